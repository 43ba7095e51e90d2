"""Seeded generator of large synthetic screening campaigns (for the speed benchmark and tests).

Everything here is invented; no number is a measurement. :func:`synthetic_campaign` builds a
:class:`~screenlab.model.CampaignData` directly in canonical units, :func:`write_campaign_folder`
writes the same campaign as a folder in the import format (``docs/campaign-format.md``),
and reading that folder back with :func:`screenlab.ingest.read_campaign` gives the same frames
(the values are rounded to what the CSV files hold before either is made). Both are vectorised
over wells and readings; nothing loops over wells.

Design of a campaign of ``n_plates`` plates (:class:`SyntheticSpec`)
--------------------------------------------------------------------
* Plates come in *sets*, one plate per block temperature (``temperatures_c``, default
  40/50/60/70 degC); every plate of a set holds the same candidates, so each candidate is seen
  at every temperature with ``replicates`` wells per temperature. Each set screens its own block
  of the library, so the library grows with the number of plates (a 96-well plate with 4 blanks
  and 4 benchmark wells holds 29 candidates x 3 wells; the 1 left-over position is empty).
* Every plate has ``n_blanks`` blank wells (no catalyst) and ``n_reference`` wells of the one
  benchmark catalyst ``REF-1`` (role ``reference``); positions are shuffled per plate.
* Readout: yield in percent, ``n_times`` readings per well from t = 0 to ``t_end_min`` minutes
  (spacing denser at the start), Gaussian noise of ``noise_pct`` percentage points, rounded to
  two decimals.
* Kinetics: first order in substrate, ``Y(t) = 1 - exp(-(k_cat + k_blank) t)`` with
  ``k_cat = TOF x [sites] / [S]0`` (so the initial rate is TOF x [sites]) and each TOF and the
  blank constant following Arrhenius about ``reference_temperature_c``. Candidate TOFs at the
  reference temperature are log-normal (median ``tof_median_per_h``), activation energies normal
  (65 +/- 12 kJ/mol, clipped to 25..110); a share ``inactive_share`` of candidates is inactive.
* Loading 0.5 umol of sites (``sites_per_unit`` 1) in 500 uL with 200 mM substrate, so the site
  concentration is 1 mM; one named factor column ``solvent`` (constant ``2-propanol``).

Public API: :class:`SyntheticSpec`, :func:`synthetic_campaign`, :func:`write_campaign_folder`,
:func:`truth_table`, :data:`REFERENCE_CATALYST`.
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from screenlab.model import DEFAULT_ANALYTE, CampaignData, Manifest
from screenlab.plates import FORMATS, all_wells
from screenlab.demo.generator import arrhenius_factor, first_order_conversion
from screenlab.units import time_factor_to_h

REFERENCE_CATALYST = "REF-1"
from screenlab.model import UNCATALYSED  # noqa: E402  (the one reserved name)
_SUBSTRATE_MM = 200.0
_VOLUME_UL = 500.0
_LOADING_UMOL = 0.5
_FACTOR = "solvent"
_FACTOR_LEVEL = "2-propanol"


@dataclass(frozen=True)
class SyntheticSpec:
    """What to generate (see the module docstring for the design)."""

    n_plates: int = 4
    fmt: int = 96
    n_times: int = 8
    temperatures_c: tuple[float, ...] = (40.0, 50.0, 60.0, 70.0)
    replicates: int = 3
    n_blanks: int = 4
    n_reference: int = 4
    t_end_min: float = 240.0
    noise_pct: float = 0.5
    tof_median_per_h: float = 30.0
    tof_log_sd: float = 1.0
    inactive_share: float = 0.05
    reference_tof_per_h: float = 40.0
    reference_ea_kj_mol: float = 60.0
    blank_k_per_h: float = 0.002
    blank_ea_kj_mol: float = 80.0
    reference_temperature_c: float = 60.0
    seed: int = 0
    name: str | None = None

    def __post_init__(self) -> None:
        if self.fmt not in FORMATS:
            raise ValueError(f"plate format {self.fmt} is not one of {', '.join(map(str, FORMATS))}")
        if self.n_plates < 1 or self.n_times < 1 or self.replicates < 1:
            raise ValueError("n_plates, n_times and replicates must be at least 1")
        if not self.temperatures_c:
            raise ValueError("at least one temperature is needed")
        if self.n_blanks < 0 or self.n_reference < 0:
            raise ValueError("n_blanks and n_reference must be >= 0")
        if self.candidates_per_plate < 1:
            raise ValueError(f"a {self.fmt}-well plate has no room for a candidate after "
                             f"{self.n_blanks} blanks and {self.n_reference} benchmark wells")

    @property
    def campaign_name(self) -> str:
        return self.name or f"synthetic-{self.n_plates}x{self.fmt}-s{self.seed}"

    @property
    def candidates_per_plate(self) -> int:
        return (self.fmt - self.n_blanks - self.n_reference) // self.replicates

    @property
    def n_sets(self) -> int:
        return math.ceil(self.n_plates / len(self.temperatures_c))

    @property
    def n_candidates(self) -> int:
        return self.n_sets * self.candidates_per_plate

    @property
    def n_filled_wells(self) -> int:
        return self.n_plates * (self.n_blanks + self.n_reference + self.candidates_per_plate * self.replicates)

    @property
    def n_readings(self) -> int:
        return self.n_filled_wells * self.n_times


def _times_min(spec: SyntheticSpec) -> np.ndarray:
    """Reading times in minutes, denser at the start: t_end x (i / (n-1))^1.5, to 0.1 min."""
    if spec.n_times == 1:
        return np.array([float(spec.t_end_min)])
    u = np.arange(spec.n_times) / (spec.n_times - 1)
    return np.round(spec.t_end_min * u ** 1.5, 1)


def _arrhenius(value_ref, ea_kj_mol, t_c, tref_c):
    """value(T) = value(Tref) x k(T)/k(Tref) (the demo generator's Arrhenius factor)."""
    return np.asarray(value_ref, dtype=float) * arrhenius_factor(ea_kj_mol, t_c, tref_c)


def _catalyst_ids(n: int) -> np.ndarray:
    width = max(5, len(str(n)))
    return np.char.add("C", np.char.zfill(np.arange(1, n + 1).astype(str), width))


def truth_table(spec: SyntheticSpec) -> pd.DataFrame:
    """The generating values: ``catalyst, role, tof_ref_per_h, ea_kj_mol`` (one row per catalyst,
    the benchmark last) plus an ``(uncatalysed)`` row whose ``tof_ref_per_h`` column holds the blank
    rate constant k_blank in h-1 at the reference temperature."""
    rng = np.random.default_rng([spec.seed, 1])
    n = spec.n_candidates
    tof = spec.tof_median_per_h * np.exp(spec.tof_log_sd * rng.standard_normal(n))
    tof[rng.random(n) < spec.inactive_share] = 0.0
    ea = np.clip(65.0 + 12.0 * rng.standard_normal(n), 25.0, 110.0)
    return pd.DataFrame({
        "catalyst": np.concatenate([_catalyst_ids(n), [REFERENCE_CATALYST, UNCATALYSED]]),
        "role": np.concatenate([np.full(n, "sample"), ["reference", "blank"]]),
        "tof_ref_per_h": np.concatenate([tof, [spec.reference_tof_per_h, spec.blank_k_per_h]]),
        "ea_kj_mol": np.concatenate([ea, [spec.reference_ea_kj_mol, spec.blank_ea_kj_mol]]),
    })


def _tables(spec: SyntheticSpec) -> dict[str, pd.DataFrame]:
    """Catalysts, plates, layout (file units) and readings (minutes, percent), already rounded."""
    rng = np.random.default_rng([spec.seed, 2])
    truth = truth_table(spec)
    n_t = len(spec.temperatures_c)
    cpp, reps = spec.candidates_per_plate, spec.replicates
    P, F = spec.n_plates, spec.fmt
    width = max(4, len(str(P)))
    plate_ids = np.char.add("P", np.char.zfill(np.arange(1, P + 1).astype(str), width))
    plate_set = np.arange(P) // n_t
    plate_t = np.asarray(spec.temperatures_c, dtype=float)[np.arange(P) % n_t]
    day0 = np.datetime64("2026-01-05")
    run_date = np.datetime_as_string(day0 + np.arange(P) // n_t, unit="D")

    # contents of one plate, in slot order: blanks, benchmark, candidates x replicates, empties
    n_slot = spec.n_blanks + spec.n_reference + cpp * reps
    slot_role = np.concatenate([np.full(spec.n_blanks, "blank"), np.full(spec.n_reference, "reference"),
                                np.full(cpp * reps, "sample"), np.full(F - n_slot, "empty")])
    slot_cand = np.concatenate([np.full(spec.n_blanks + spec.n_reference, -1), np.repeat(np.arange(cpp), reps),
                                np.full(F - n_slot, -1)])
    # a random position for every slot of every plate: argsort of uniform keys, one per plate
    pos = np.argsort(rng.random((P, F)), axis=1)            # slot -> position
    slot_of_pos = np.argsort(pos, axis=1)                    # position -> slot
    role = slot_role[slot_of_pos].ravel()
    cand_local = slot_cand[slot_of_pos]
    cand_global = np.where(cand_local >= 0, plate_set[:, None] * cpp + cand_local, -1).ravel()
    n_cand = spec.n_candidates
    cat_ids = np.concatenate([_catalyst_ids(n_cand), [REFERENCE_CATALYST]])
    cat_index = np.where(role == "reference", n_cand, cand_global)
    has_cat = cat_index >= 0
    grid = all_wells(F)
    well = np.tile(grid["well"].to_numpy(), P)
    plate_of_well = np.repeat(np.arange(P), F)
    catalyst = np.where(has_cat, cat_ids[np.clip(cat_index, 0, None)], "")
    used = role != "empty"
    layout = pd.DataFrame({
        "plate": plate_ids[plate_of_well],
        "well": well,
        "role": role,
        "catalyst": catalyst,
        "loading": np.where(has_cat, _LOADING_UMOL, np.nan),
        "loading_unit": np.where(has_cat, "umol", ""),
        "substrate_conc": np.where(used, _SUBSTRATE_MM, np.nan),
        "volume": np.where(used, _VOLUME_UL, np.nan),
        _FACTOR: np.where(used, _FACTOR_LEVEL, ""),
    })

    # kinetics of every filled well, vectorised over wells x times
    t_well = plate_t[plate_of_well]
    tof_ref = truth["tof_ref_per_h"].to_numpy()
    ea = truth["ea_kj_mol"].to_numpy()
    tref = spec.reference_temperature_c
    idx = np.clip(cat_index, 0, None)
    tof = np.where(has_cat, _arrhenius(tof_ref[idx], ea[idx], t_well, tref), 0.0)
    site_mM = _LOADING_UMOL / _VOLUME_UL * 1e3                # umol / uL x 1000 = mmol / L
    k_cat = tof * site_mM / _SUBSTRATE_MM                     # h-1
    k_blank = _arrhenius(spec.blank_k_per_h, spec.blank_ea_kj_mol, t_well, tref)
    k = (k_cat + k_blank)[used]
    t_min = _times_min(spec)
    t_h = t_min * time_factor_to_h("min")
    y = 100.0 * first_order_conversion(t_h[None, :], k[:, None], 0.0)
    y = y + spec.noise_pct * rng.standard_normal(y.shape)
    y = np.round(np.clip(y, -1.9, 101.9), 2) + 0.0           # + 0.0 turns -0.0 into 0.0
    nw = int(used.sum())
    readings = pd.DataFrame({
        "plate": np.repeat(layout["plate"].to_numpy()[used], spec.n_times),
        "well": np.repeat(well[used], spec.n_times),
        "time": np.tile(t_min, nw),
        "value": y.ravel(),
    })
    catalysts = pd.DataFrame({
        "catalyst": cat_ids,
        "name": np.char.add("synthetic catalyst ", cat_ids),
        "family": np.concatenate([np.char.add("family ", (np.arange(n_cand) % 6 + 1).astype(str)), ["benchmark"]]),
        "sites_per_unit": np.ones(n_cand + 1),
    })
    plates = pd.DataFrame({"plate": plate_ids, "format": F, "temperature_c": plate_t, "run_date": run_date,
                           "notes": np.char.add("synthetic plate set ", (plate_set + 1).astype(str))})
    return {"catalysts": catalysts, "plates": plates, "layout": layout, "readings": readings}


def _manifest_text(spec: SyntheticSpec) -> str:
    return (
        "[campaign]\n"
        f'name = {json.dumps(spec.campaign_name, ensure_ascii=False)}\n'
        f'description = "Invented synthetic campaign: {spec.n_plates} plates of {spec.fmt} wells, '
        f'{spec.n_candidates} candidates, seed {spec.seed}"\n'
        'reaction = "S -> P (synthetic first-order data)"\n\n'
        "[units]\n"
        'time = "min"\nconcentration = "mM"\nvolume = "uL"\n\n'
        "[readout]\n"
        'kind = "yield"\nscale = "percent"\nproduct_per_substrate = 1.0\n\n'
        "[analysis]\n"
        f"reference_temperature_c = {spec.reference_temperature_c:g}\n"
    )


def _manifest(spec: SyntheticSpec) -> Manifest:
    text = _manifest_text(spec)
    return Manifest(
        name=spec.campaign_name, readout_kind="yield", readout_scale="percent", product_per_substrate=1.0,
        description=(f"Invented synthetic campaign: {spec.n_plates} plates of {spec.fmt} wells, "
                     f"{spec.n_candidates} candidates, seed {spec.seed}"),
        reaction="S -> P (synthetic first-order data)", time_unit="min", concentration_unit="mM",
        volume_unit="uL", analysis={"reference_temperature_c": _toml_number(spec.reference_temperature_c)},
        analyte_main=DEFAULT_ANALYTE, source_toml=text)


def _toml_number(x: float):
    return int(x) if float(x).is_integer() else float(x)


def _str(values) -> pd.Series:
    """A pandas ``str`` column with NaN for empty text (as the reader gives)."""
    s = pd.Series(values, dtype="str")
    return s.where(s != "", np.nan).astype("str")


def synthetic_campaign(spec: SyntheticSpec | None = None, **kwargs) -> CampaignData:
    """The campaign of ``spec`` (or ``SyntheticSpec(**kwargs)``) as a validated-shape CampaignData
    in canonical units, equal to what :func:`screenlab.ingest.read_campaign` gives for the folder
    :func:`write_campaign_folder` writes."""
    spec = spec if spec is not None else SyntheticSpec(**kwargs)
    tb = _tables(spec)
    cat, pl, lay, rd = tb["catalysts"], tb["plates"], tb["layout"], tb["readings"]
    nr, nc = FORMATS[spec.fmt]
    catalysts = pd.DataFrame({
        "catalyst": _str(cat["catalyst"]), "name": _str(cat["name"]), "family": _str(cat["family"]),
        "molar_mass_g_mol": np.nan, "sites_per_unit": cat["sites_per_unit"].to_numpy(dtype=float),
        "metal_wt_pct": np.nan, "metal_molar_mass_g_mol": np.nan, "dispersion": 1.0,
    })
    plates = pd.DataFrame({
        "plate": _str(pl["plate"]), "format": pl["format"].to_numpy(dtype=np.int64),
        "n_rows": np.full(len(pl), nr, dtype=np.int64), "n_cols": np.full(len(pl), nc, dtype=np.int64),
        "temperature_c": pl["temperature_c"].to_numpy(dtype=float), "run_date": _str(pl["run_date"]),
        "notes": _str(pl["notes"]),
    })
    grid = all_wells(spec.fmt)
    plate_t = np.repeat(pl["temperature_c"].to_numpy(dtype=float), spec.fmt)
    wells = pd.DataFrame({
        "plate": _str(lay["plate"]), "well": _str(lay["well"]),
        "row": np.tile(grid["row"].to_numpy(dtype=np.int64), spec.n_plates),
        "col": np.tile(grid["col"].to_numpy(dtype=np.int64), spec.n_plates),
        "role": _str(lay["role"]), "catalyst": _str(lay["catalyst"]),
        "loading": lay["loading"].to_numpy(dtype=float), "loading_unit": _str(lay["loading_unit"]),
        "substrate_conc_mM": lay["substrate_conc"].to_numpy(dtype=float),
        "volume_uL": lay["volume"].to_numpy(dtype=float), "temperature_c": plate_t,
        _FACTOR: pd.Series(lay[_FACTOR], dtype="str"),  # the reader keeps an empty factor cell as ""
    })
    readings = pd.DataFrame({
        "plate": _str(rd["plate"]), "well": _str(rd["well"]),
        "analyte": pd.Series(np.full(len(rd), DEFAULT_ANALYTE), dtype="str"),
        "time_h": rd["time"].to_numpy(dtype=float) * time_factor_to_h("min"),
        "value": rd["value"].to_numpy(dtype=float),
    })
    readings = readings.sort_values(["plate", "well", "analyte", "time_h"], kind="stable").reset_index(drop=True)
    return CampaignData(manifest=_manifest(spec), catalysts=catalysts, plates=plates, wells=wells,
                        readings=readings, factor_names=(_FACTOR,))


def write_campaign_folder(out_dir, spec: SyntheticSpec | None = None, **kwargs) -> Path:
    """Write the campaign of ``spec`` as a campaign folder (campaign.toml, catalysts.csv,
    plates.csv, layout.csv, readings.csv) in ``out_dir`` (created); returns the folder."""
    spec = spec if spec is not None else SyntheticSpec(**kwargs)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    tb = _tables(spec)
    (out / "campaign.toml").write_text(_manifest_text(spec), encoding="utf-8")
    for name, frame in tb.items():
        frame.to_csv(out / f"{name}.csv", index=False, lineterminator="\n")
    return out


# ------------------------------------------------------------------------------------------------
# Campaigns of mixed rate laws with known truth (for the truth-recovery study of the rate step)
# ------------------------------------------------------------------------------------------------

#: time-course shapes :func:`kinetics_campaign` can give a candidate; ``*`` marks those whose
#: initial rate is measurable (a point estimate is expected), the others test bounds and flags
BEHAVIOURS: dict[str, str] = {
    "first_order": "* r = k S",
    "near_zero_order": "* saturation with Km = 0.02 S0: straight until the substrate runs out",
    "saturation": "* r = V S / (Km + S), Km between 0.3 and 3 S0",
    "deactivation": "* r = k S exp(-kd t): the catalyst decays at first order",
    "induction": "r = k S (1 - exp(-t / tau)): the catalyst needs activating; initial rate 0",
    "too_fast": "r = k S with the course complete before the first reading",
    "inactive": "no catalysed reaction: only the background",
    "consecutive": "* S -> P -> Q: the product is consumed later (k2 = k1)",
}
MEASURABLE = tuple(b for b, d in BEHAVIOURS.items() if d.startswith("*"))


@dataclass(frozen=True)
class KineticsSpec:
    """A small campaign of candidates with known rate laws (all invented).

    One plate per temperature; every plate holds ``n_blanks`` blanks, ``n_reference`` wells of the
    first-order benchmark :data:`REFERENCE_CATALYST` and ``replicates`` wells of every candidate.
    Candidates take the ``behaviours`` in turn (see :data:`BEHAVIOURS`), TOFs at the reference
    temperature log-normal about ``tof_median_per_h``, Ea normal about ``ea_mean_kj_mol``.
    Every well's catalyst amount scatters by ``replicate_cv`` (dispensing) and every plate's rate
    constants, background included, by a log-normal factor of SD ``plate_sd`` (block temperature,
    evaporation); the truth is the nominal value, without either. Readings are yields in percent
    with Gaussian noise of ``noise_pct`` points, exported as measured (values above 100 % stay),
    rounded to two decimals. The background is first order in substrate (``blank_k_per_h``) and
    runs beside the catalysed reaction on the substrate left.
    """

    behaviours: tuple[str, ...] = tuple(BEHAVIOURS)
    n_candidates: int = 24
    temperatures_c: tuple[float, ...] = (40.0, 50.0, 60.0, 70.0)
    replicates: int = 3
    n_blanks: int = 4
    n_reference: int = 4
    fmt: int = 96
    times_min: tuple[float, ...] = (0.0, 15.0, 30.0, 60.0, 120.0, 180.0, 240.0, 360.0)
    noise_pct: float = 0.5
    replicate_cv: float = 0.03
    plate_sd: float = 0.03
    substrate_mM: float = 200.0
    volume_uL: float = 500.0
    loading_umol: float = 0.5
    tof_median_per_h: float = 30.0
    tof_log_sd: float = 0.5
    ea_mean_kj_mol: float = 65.0
    ea_sd_kj_mol: float = 10.0
    reference_tof_per_h: float = 40.0
    reference_ea_kj_mol: float = 60.0
    blank_k_per_h: float = 0.002
    blank_ea_kj_mol: float = 85.0
    near_zero_km_ratio: float = 0.02
    saturation_km_ratio: tuple[float, float] = (0.3, 3.0)
    kd_ref_per_h: float = 0.4
    kd_ea_kj_mol: float = 90.0
    induction_tau_ref_h: float = 0.6
    induction_ea_kj_mol: float = 70.0
    consecutive_k2_ratio: float = 1.0
    too_fast_tof_per_h: float = 30000.0
    reference_temperature_c: float = 60.0
    seed: int = 0
    name: str | None = None

    def __post_init__(self) -> None:
        unknown = set(self.behaviours) - set(BEHAVIOURS)
        if unknown or not self.behaviours:
            raise ValueError(f"unknown behaviours {sorted(unknown)}; known: {', '.join(BEHAVIOURS)}")
        if self.fmt not in FORMATS:
            raise ValueError(f"plate format {self.fmt} is not one of {', '.join(map(str, FORMATS))}")
        need = self.n_blanks + self.n_reference + self.n_candidates * self.replicates
        if need > self.fmt or self.n_candidates < 1 or self.replicates < 1:
            raise ValueError(f"{need} filled wells do not fit a {self.fmt}-well plate")
        if not self.times_min or min(self.times_min) < 0:
            raise ValueError("times_min must be non-empty and >= 0")

    @property
    def campaign_name(self) -> str:
        return self.name or f"kinetics-mix-s{self.seed}"


@dataclass(frozen=True)
class KineticsCampaign:
    """What :func:`kinetics_campaign` gives: the campaign as read by the importer, its files, and
    the truth.

    ``truth`` one row per catalyst x temperature: ``catalyst, behaviour, role, temperature_c,
    tof_per_h`` (nominal initial TOF of the catalysed pathway, h-1; 0 for induction and inactive),
    ``tof_max_per_h`` (largest TOF over the course), ``ton`` (catalysed product per site at the
    last reading; NaN for consecutive courses, where the product is consumed), ``final_conversion_pct``
    (nominal), ``ea_kj_mol``, ``measurable`` (a point estimate of the initial TOF is expected),
    ``expected_censored`` (``lower`` too fast, ``upper`` inactive, else ""); plus rows for
    ``(uncatalysed)`` with the background's initial rate in ``tof_per_h`` as mM/h.
    """

    data: CampaignData
    files: dict[str, bytes]
    truth: pd.DataFrame
    spec: KineticsSpec


def _rate_constants(spec: KineticsSpec, rng) -> pd.DataFrame:
    n = spec.n_candidates
    beh = np.array([spec.behaviours[i % len(spec.behaviours)] for i in range(n)], dtype=object)
    tof = spec.tof_median_per_h * np.exp(spec.tof_log_sd * rng.standard_normal(n))
    tof = np.where(beh == "too_fast", spec.too_fast_tof_per_h, tof)
    tof = np.where(beh == "inactive", 0.0, tof)
    ea = np.clip(spec.ea_mean_kj_mol + spec.ea_sd_kj_mol * rng.standard_normal(n), 30.0, 110.0)
    lo, hi = np.log(spec.saturation_km_ratio[0]), np.log(spec.saturation_km_ratio[1])
    km = np.where(beh == "saturation", np.exp(rng.uniform(lo, hi, n)),
                  np.where(beh == "near_zero_order", spec.near_zero_km_ratio, np.nan))
    return pd.DataFrame({
        "catalyst": np.concatenate([_catalyst_ids(n), [REFERENCE_CATALYST]]),
        "behaviour": np.concatenate([beh, ["first_order"]]),
        "role": np.concatenate([np.full(n, "sample"), ["reference"]]),
        "tof_ref_per_h": np.concatenate([tof, [spec.reference_tof_per_h]]),
        "ea_kj_mol": np.concatenate([ea, [spec.reference_ea_kj_mol]]),
        "km_ratio": np.concatenate([km, [np.nan]]),
    })


def _integrate_courses(beh, r0, km, kd, tau, k_bg, t_h, k2_ratio=1.0) -> dict[str, np.ndarray]:
    """Integrate every well's course by RK4 between the reading times (vectorised over wells).

    State: substrate s and product p as fractions of the initial substrate, and the product q of
    the catalysed pathway alone (for the TON). ``r0`` is the initial catalysed rate (fraction/h).
    Returns s, p, q at every reading (wells x times) and the largest catalysed rate seen.
    """
    n = len(beh)
    fast = beh == "too_fast"
    if fast.any():
        # plain first order (closed form): s = exp(-(k + kb) t), the catalysed share k / (k + kb);
        # kept out of the step-size choice of the others
        slow = {key: None for key in ("s", "p", "q", "rmax")}
        rest = np.flatnonzero(~fast)
        if rest.size:
            sub = _integrate_courses(beh[rest], r0[rest], km[rest], kd[rest], tau[rest], k_bg[rest], t_h, k2_ratio)
        kt = (r0[fast] + k_bg[fast])[:, None] * np.asarray(t_h, dtype=float)[None, :]
        s_f = np.exp(-kt)
        share = (r0[fast] / (r0[fast] + k_bg[fast]))[:, None]
        for key in slow:
            slow[key] = np.zeros((n, len(t_h))) if key != "rmax" else np.zeros(n)
        slow["s"][fast], slow["p"][fast], slow["q"][fast] = s_f, 1.0 - s_f, share * (1.0 - s_f)
        slow["rmax"][fast] = r0[fast]
        if rest.size:
            for key in slow:
                slow[key][rest] = sub[key]
        return slow
    sat = np.isin(beh, ["near_zero_order", "saturation"])
    vs = np.where(sat, r0 * (1.0 + np.nan_to_num(km)), 0.0)          # V / S0, fraction/h
    k = np.where(sat, 0.0, r0)
    k2 = np.where(beh == "consecutive", k2_ratio * r0, 0.0)
    kdd = np.where(beh == "deactivation", kd, 0.0)
    tau_ = np.where(beh == "induction", tau, 0.0)
    km_ = np.where(sat, km, 1.0)

    def cat_rate(s, t):
        act = np.exp(-kdd * t) * np.where(tau_ > 0, -np.expm1(-t / np.where(tau_ > 0, tau_, 1.0)), 1.0)
        return (k * s + np.where(sat, vs * s / (km_ + s), 0.0)) * act

    def deriv(state, t):
        s, p, q = state
        rc = cat_rate(s, t)
        rb = k_bg * s
        return np.stack([-(rc + rb), rc + rb - k2 * p, rc])

    times = np.asarray(t_h, dtype=float)
    state = np.stack([np.ones(n), np.zeros(n), np.zeros(n)])
    out = np.zeros((3, n, len(times)))
    rmax = cat_rate(np.ones(n), 0.0)
    k_top = float(np.nanmax(np.concatenate([k, vs / km_, k_bg, k2, kdd, 1.0 / np.where(tau_ > 0, tau_, np.inf), [1.0]])))
    t_prev = 0.0
    for j, t_next in enumerate(times):          # a loop over reading times, vectorised over wells
        span = t_next - t_prev
        steps = max(50, int(np.ceil(span * k_top / 0.25)))
        h = span / steps if steps else 0.0
        t = t_prev
        for _ in range(steps if span > 0 else 0):
            a = deriv(state, t)
            b = deriv(state + 0.5 * h * a, t + 0.5 * h)
            c = deriv(state + 0.5 * h * b, t + 0.5 * h)
            d = deriv(state + h * c, t + h)
            state = state + h / 6.0 * (a + 2 * b + 2 * c + d)
            t += h
            rmax = np.maximum(rmax, cat_rate(state[0], t))
        out[:, :, j] = state
        t_prev = t_next
    return {"s": out[0], "p": out[1], "q": out[2], "rmax": rmax}


def kinetics_campaign(spec: KineticsSpec | None = None, **kwargs) -> KineticsCampaign:
    """Build the campaign of ``spec`` (or ``KineticsSpec(**kwargs)``) as files, read them with the
    importer (so the data pass every import check, over-range yields included) and return the
    campaign with its truth (see :class:`KineticsCampaign`)."""
    from screenlab.ingest import read_campaign

    spec = spec if spec is not None else KineticsSpec(**kwargs)
    rng = np.random.default_rng([spec.seed, 11])
    cats = _rate_constants(spec, rng)
    n_t = len(spec.temperatures_c)
    F = spec.fmt
    plate_ids = np.array([f"T{int(round(t)):d}" if float(t).is_integer() else f"T{t:g}"
                          for t in spec.temperatures_c], dtype=object)
    if len(set(plate_ids)) != n_t:
        plate_ids = np.array([f"P{i + 1}" for i in range(n_t)], dtype=object)
    nc, reps = spec.n_candidates, spec.replicates
    slot_role = np.concatenate([np.full(spec.n_blanks, "blank"), np.full(spec.n_reference, "reference"),
                                np.full(nc * reps, "sample")])
    slot_cat = np.concatenate([np.full(spec.n_blanks, -1), np.full(spec.n_reference, nc),
                               np.repeat(np.arange(nc), reps)])
    n_slot = len(slot_role)
    grid = all_wells(F)
    pos = np.stack([rng.permutation(F)[:n_slot] for _ in range(n_t)])    # slot -> position, per plate
    plate_of = np.repeat(np.arange(n_t), n_slot)
    role = np.tile(slot_role, n_t)
    cat_idx = np.tile(slot_cat, n_t)
    well = grid["well"].to_numpy()[pos.ravel()]
    temp = np.asarray(spec.temperatures_c, dtype=float)[plate_of]
    has_cat = cat_idx >= 0
    ci = np.maximum(cat_idx, 0)
    tref = spec.reference_temperature_c
    site_mM = spec.loading_umol / spec.volume_uL * 1e3
    # per-plate and per-well scatter (truth is nominal, without them)
    plate_f = np.exp(spec.plate_sd * rng.standard_normal(n_t))[plate_of]
    well_f = np.maximum(1.0 + spec.replicate_cv * rng.standard_normal(len(role)), 0.05)
    tof_t = np.where(has_cat, _arrhenius(cats["tof_ref_per_h"].to_numpy()[ci], cats["ea_kj_mol"].to_numpy()[ci],
                                         temp, tref), 0.0)
    r0 = tof_t * site_mM / spec.substrate_mM * plate_f * np.where(has_cat, well_f, 1.0)   # fraction / h
    beh = np.where(has_cat, cats["behaviour"].to_numpy()[ci], "none").astype(object)
    km = np.where(has_cat, cats["km_ratio"].to_numpy()[ci], np.nan)
    kd = spec.kd_ref_per_h * _arrhenius(1.0, spec.kd_ea_kj_mol, temp, tref)
    tau = spec.induction_tau_ref_h / _arrhenius(1.0, spec.induction_ea_kj_mol, temp, tref)
    k_bg = _arrhenius(spec.blank_k_per_h, spec.blank_ea_kj_mol, temp, tref) * plate_f
    t_min = np.asarray(spec.times_min, dtype=float)
    t_h = t_min * time_factor_to_h("min")
    course = _integrate_courses(beh, r0, km, kd, tau, k_bg, t_h, spec.consecutive_k2_ratio)
    y = 100.0 * course["p"] + spec.noise_pct * rng.standard_normal(course["p"].shape)
    y = np.round(np.clip(y, -4.9, 109.9), 2) + 0.0

    cat_ids = cats["catalyst"].to_numpy()
    layout = pd.DataFrame({
        "plate": plate_ids[plate_of], "well": well, "role": role,
        "catalyst": np.where(has_cat, cat_ids[ci], ""),
        "loading": np.where(has_cat, spec.loading_umol, np.nan),
        "loading_unit": np.where(has_cat, "umol", ""),
        "substrate_conc": spec.substrate_mM, "volume": spec.volume_uL,
    })
    readings = pd.DataFrame({"plate": np.repeat(layout["plate"].to_numpy(), len(t_min)),
                             "well": np.repeat(well, len(t_min)), "time": np.tile(t_min, len(role)),
                             "value": y.ravel()})
    catalysts = pd.DataFrame({"catalyst": cat_ids, "name": np.char.add("invented ", cat_ids.astype(str)),
                              "family": cats["behaviour"].to_numpy(), "sites_per_unit": 1.0})
    plates = pd.DataFrame({"plate": plate_ids, "format": F, "temperature_c": np.asarray(spec.temperatures_c)})
    toml = ("[campaign]\n"
            f"name = {json.dumps(spec.campaign_name)}\n"
            f'description = "Invented truth-recovery campaign: {nc} candidates of mixed rate laws, seed {spec.seed}"\n'
            'reaction = "S -> P (synthetic)"\n\n'
            '[units]\ntime = "min"\nconcentration = "mM"\nvolume = "uL"\n\n'
            '[readout]\nkind = "yield"\nscale = "percent"\nproduct_per_substrate = 1.0\n\n'
            f"[analysis]\nreference_temperature_c = {_toml_number(tref)}\n")

    def csv(frame):
        return frame.to_csv(index=False, lineterminator="\n").encode()

    files = {"campaign.toml": toml.encode(), "catalysts.csv": csv(catalysts), "plates.csv": csv(plates),
             "layout.csv": csv(layout), "readings.csv": csv(readings)}
    data = read_campaign(dict(files)).data

    # truth per catalyst x temperature from the nominal courses (no plate or well scatter)
    T = np.asarray(spec.temperatures_c, dtype=float)
    cat_rep = np.repeat(np.arange(len(cats)), n_t)
    t_rep = np.tile(T, len(cats))
    b_rep = cats["behaviour"].to_numpy()[cat_rep]
    tof_nom = _arrhenius(cats["tof_ref_per_h"].to_numpy()[cat_rep], cats["ea_kj_mol"].to_numpy()[cat_rep], t_rep, tref)
    r0n = tof_nom * site_mM / spec.substrate_mM
    kdn = spec.kd_ref_per_h * _arrhenius(1.0, spec.kd_ea_kj_mol, t_rep, tref)
    taun = spec.induction_tau_ref_h / _arrhenius(1.0, spec.induction_ea_kj_mol, t_rep, tref)
    kbn = _arrhenius(spec.blank_k_per_h, spec.blank_ea_kj_mol, t_rep, tref)
    nom = _integrate_courses(b_rep, r0n, cats["km_ratio"].to_numpy()[cat_rep], kdn, taun, kbn, t_h,
                             spec.consecutive_k2_ratio)
    init = np.where(np.isin(b_rep, ["induction", "inactive"]), 0.0, tof_nom)
    ton = nom["q"][:, -1] * spec.substrate_mM / site_mM
    truth = pd.DataFrame({
        "catalyst": cats["catalyst"].to_numpy()[cat_rep], "behaviour": b_rep,
        "role": cats["role"].to_numpy()[cat_rep], "temperature_c": t_rep, "tof_per_h": init,
        "tof_max_per_h": nom["rmax"] * spec.substrate_mM / site_mM,
        "ton": np.where(b_rep == "consecutive", np.nan, ton),
        "final_conversion_pct": 100.0 * nom["p"][:, -1],
        "ea_kj_mol": cats["ea_kj_mol"].to_numpy()[cat_rep],
        "measurable": np.isin(b_rep, MEASURABLE),
        "expected_censored": np.where(b_rep == "too_fast", "lower", np.where(b_rep == "inactive", "upper", "")),
    })
    bg = pd.DataFrame({"catalyst": UNCATALYSED, "behaviour": "background", "role": "blank", "temperature_c": T,
                       "tof_per_h": _arrhenius(spec.blank_k_per_h, spec.blank_ea_kj_mol, T, tref) * spec.substrate_mM,
                       "tof_max_per_h": np.nan, "ton": np.nan, "final_conversion_pct": np.nan,
                       "ea_kj_mol": spec.blank_ea_kj_mol, "measurable": True, "expected_censored": ""})
    truth = pd.concat([truth, bg], ignore_index=True)
    return KineticsCampaign(data=data, files=files, truth=truth, spec=spec)


__all__ = ["BEHAVIOURS", "KineticsCampaign", "KineticsSpec", "MEASURABLE", "REFERENCE_CATALYST", "SyntheticSpec",
           "kinetics_campaign", "synthetic_campaign", "truth_table", "write_campaign_folder"]
