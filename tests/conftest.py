"""Shared fixtures (builders of test campaigns). Keep them small and generic.

``demo_store``: a store holding the demo campaigns, built once per test session in a temporary
folder (about 6 s). Tests must not write to it; copy it (``demo_store_copy``) to write.

``make_data(name, plates=..., fmt=..., times=..., k_scale=..., solvent=..., analytes=...)``: a
synthetic CampaignData built in code, in the shape the reader gives. ``write_sample_campaign(folder,
name, ...)``: the same campaign written as a campaign folder (docs/campaign-format.md). Readings
follow a first-order approach to full conversion, value = 100 (1 - exp(-k t)) percent; invented
data, tests only.

``quality_campaign(seed, n_cat=, temps=, plates_per_t=, reps=, noise=, edge_bias=, fmt=, bad_plate=, ...)``:
a seeded campaign whose well rates are simulated from a known truth (Arrhenius TOF per catalyst, a
blank line, log-normal well noise), returned as ``(data, kin, truth)`` with a kinetics-like result
aggregated by plain means, so the stats layer is tested independently of the kinetics package.

``turnover_stages``: a seeded synthetic campaign (8 plates, seed 3) through rates, blanks,
turnover and group rates: ``(data, settings, per_well, blanks, wells, groups)``.

``fake_kin(tof, se, *, df=, n=, ea=, ea_se=, ea_df=, roles=, t=, flags=, ton=, ton_se=)``: a minimal
kinetics result for the ranking tests: one standard-condition rates row per catalyst ``K0, K1, ...``
at temperature ``t`` (every column of ``screenlab.schema.RATES``; those not given are empty:
NaN, no text, 0, False), two wells each (plates P1, P2), and an Arrhenius row per catalyst when
``ea`` is given.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screenlab.kinetics import KineticsResult
from screenlab.model import CampaignData, Manifest
from screenlab.plates import all_wells, is_edge
from screenlab.settings import AnalysisSettings


@pytest.fixture(scope="session")
def demo_store(tmp_path_factory) -> Path:
    from screenlab.demo import build_demo_store

    path = tmp_path_factory.mktemp("demo-store") / "demo.duckdb"
    build_demo_store(path)
    return path


@pytest.fixture()
def demo_store_copy(demo_store, tmp_path) -> Path:
    """A private, writable copy of the demo store (the .wal, if any, goes with it)."""
    dst = tmp_path / "demo-copy.duckdb"
    shutil.copy2(demo_store, dst)
    wal = Path(str(demo_store) + ".wal")
    if wal.exists():
        shutil.copy2(wal, Path(str(dst) + ".wal"))
    return dst


@pytest.fixture(scope="session")
def make_data():
    """The builder of a synthetic CampaignData (see the module docstring)."""
    return _make_data


@pytest.fixture(scope="session")
def write_sample_campaign():
    """The builder of a synthetic campaign folder (see the module docstring)."""
    return _write_sample_campaign


@pytest.fixture(scope="session")
def quality_campaign():
    """The builder of a simulated plate-quality campaign (``tests/quality_campaigns.make_campaign``)."""
    from quality_campaigns import make_campaign

    return make_campaign


@pytest.fixture(scope="session")
def small_synthetic():
    """A seeded synthetic campaign of 4 plates (screenlab.synthetic, seed 3); do not modify it."""
    from screenlab.synthetic import SyntheticSpec, synthetic_campaign

    return synthetic_campaign(SyntheticSpec(n_plates=4, seed=3))


@pytest.fixture(scope="session")
def turnover_stages():
    """A seeded synthetic campaign (8 plates, seed 3) through every turnover stage (module docstring)."""
    from screenlab.kinetics import amounts, rates, turnover
    from screenlab.synthetic import SyntheticSpec, synthetic_campaign

    data = synthetic_campaign(SyntheticSpec(n_plates=8, seed=3))
    s = AnalysisSettings.from_mapping(data.manifest.analysis)
    per_well = rates.well_rates(data, s, amounts=amounts.product_amounts(data))
    blanks = turnover.blank_rates(per_well, s)
    wells = turnover.well_turnover(data, per_well, blanks, s)
    return data, s, per_well, blanks, wells, turnover.group_rates(wells, s, factor_names=data.factor_names)


# --------------------------------------------------------------------------------------------
# the synthetic sample campaign

_SAMPLE_MANIFEST = """[campaign]
name = "{name}"
description = "synthetic store test"
reaction = "A + B -> C"

[units]
time = "min"
concentration = "mM"
volume = "uL"

[readout]
kind = "conversion"
scale = "percent"
product_per_substrate = 1.0
{extra}
"""


def _tables(plates=("P1", "P2"), fmt=96, times=(0, 10, 20, 40, 60), k_scale=1.0, n_catalysts=6,
            temps=None, solvent=True):
    cats = pd.DataFrame({
        "catalyst": [f"C{i}" for i in range(1, n_catalysts + 1)] + ["REF"],
        "name": [f"cat {i}" for i in range(1, n_catalysts + 1)] + ["benchmark"],
        "family": ["phosphine"] * (n_catalysts // 2) + ["nhc"] * (n_catalysts - n_catalysts // 2) + [""],
        "molar_mass_g_mol": [350.0 + i for i in range(n_catalysts)] + [412.5],
    })
    temps = temps or {p: 40.0 + 10 * i for i, p in enumerate(plates)}
    pl = pd.DataFrame({"plate": list(plates), "format": fmt, "temperature_c": [temps[p] for p in plates],
                       "run_date": ["2026-03-0%d" % (i + 1) for i in range(len(plates))],
                       "notes": ["" if i else "first block" for i in range(len(plates))]})
    grid = all_wells(fmt)
    n = len(grid)
    lay = []
    for p in plates:  # a few plates
        role = np.where(np.arange(n) % 12 == 0, "blank", np.where(np.arange(n) % 12 == 11, "reference", "sample"))
        cat = np.where(role == "blank", "", np.where(role == "reference", "REF",
                                                     np.array([f"C{(i % n_catalysts) + 1}" for i in range(n)])))
        frame = pd.DataFrame({"plate": p, "well": grid["well"], "role": role, "catalyst": cat,
                              "loading": np.where(role == "blank", np.nan, 0.5),
                              "loading_unit": np.where(role == "blank", "", "umol"),
                              "substrate_conc": 100.0, "volume": 250.0})
        if solvent:
            frame["solvent"] = np.where(np.arange(n) % 2 == 0, "toluene", "THF")
        lay.append(frame)
    lay = pd.concat(lay, ignore_index=True)
    rows = []
    t = np.asarray(times, dtype=float)
    for p in plates:
        kk = k_scale * (0.002 + 0.0004 * (np.arange(n) % 7))
        conv = 100.0 * (1.0 - np.exp(-np.outer(kk, t)))
        rows.append(pd.DataFrame({"plate": p, "well": np.repeat(grid["well"].to_numpy(), len(t)),
                                  "time": np.tile(t, n), "value": np.round(conv.ravel(), 4)}))
    rea = pd.concat(rows, ignore_index=True)
    return cats, pl, lay, rea


def _write_sample_campaign(folder: Path, name: str = "demo-aldol", *, extra_manifest: str = "", **kw) -> Path:
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    cats, pl, lay, rea = _tables(**kw)
    (folder / "campaign.toml").write_text(_SAMPLE_MANIFEST.format(name=name, extra=extra_manifest), encoding="utf-8")
    cats.to_csv(folder / "catalysts.csv", index=False)
    pl.to_csv(folder / "plates.csv", index=False)
    lay.to_csv(folder / "layout.csv", index=False)
    rea.to_csv(folder / "readings.csv", index=False)
    return folder


def _make_data(name: str = "demo-aldol", *, plates=("P1", "P2"), fmt=96, times=(0, 10, 20, 40, 60),
              k_scale=1.0, solvent=True, analytes=None, description="synthetic") -> CampaignData:
    """A CampaignData in canonical form built in code (the reader's documented shape)."""
    cats, pl, lay, rea = _tables(plates=plates, fmt=fmt, times=times, k_scale=k_scale, solvent=solvent)
    catalysts = pd.DataFrame({
        "catalyst": cats["catalyst"].astype("str"), "name": cats["name"].astype("str"),
        "family": cats["family"].replace("", np.nan).astype("str"),
        "molar_mass_g_mol": cats["molar_mass_g_mol"].astype(float), "sites_per_unit": 1.0,
        "metal_wt_pct": np.nan, "metal_molar_mass_g_mol": np.nan, "dispersion": 1.0})
    from screenlab.plates import FORMATS

    plates_f = pd.DataFrame({
        "plate": pl["plate"].astype("str"), "format": pl["format"].astype("int64"),
        "n_rows": pl["format"].map(lambda f: FORMATS[f][0]).astype("int64"),
        "n_cols": pl["format"].map(lambda f: FORMATS[f][1]).astype("int64"),
        "temperature_c": pl["temperature_c"].astype(float),
        "run_date": pl["run_date"].astype("str"), "notes": pl["notes"].replace("", np.nan).astype("str")})
    grid = all_wells(fmt)
    temp = lay["plate"].map(dict(zip(pl["plate"], pl["temperature_c"]))).astype(float)
    wells = pd.DataFrame({
        "plate": lay["plate"].astype("str"), "well": lay["well"].astype("str"),
        "row": np.tile(grid["row"].to_numpy(), len(plates)).astype("int64"),
        "col": np.tile(grid["col"].to_numpy(), len(plates)).astype("int64"),
        "role": lay["role"].astype("str"), "catalyst": lay["catalyst"].replace("", np.nan).astype("str"),
        "loading": lay["loading"].astype(float), "loading_unit": lay["loading_unit"].replace("", np.nan).astype("str"),
        "substrate_conc_mM": lay["substrate_conc"].astype(float), "volume_uL": lay["volume"].astype(float),
        "temperature_c": temp})
    factor_names = ()
    if solvent:
        wells["solvent"] = lay["solvent"].astype("str")
        factor_names = ("solvent",)
    readings = pd.DataFrame({"plate": rea["plate"].astype("str"), "well": rea["well"].astype("str"),
                             "analyte": "product", "time_h": rea["time"].astype(float) / 60.0,
                             "value": rea["value"].astype(float)})
    readings["analyte"] = readings["analyte"].astype("str")
    if analytes:
        parts = [readings.assign(analyte=a, value=readings["value"] * (1 - 0.2 * i)) for i, a in enumerate(analytes)]
        readings = pd.concat(parts, ignore_index=True)
        readings["analyte"] = readings["analyte"].astype("str")
    readings = readings.sort_values(["plate", "well", "analyte", "time_h"], kind="stable").reset_index(drop=True)
    manifest = Manifest(name=name, readout_kind="conversion", readout_scale="percent", description=description,
                        reaction="A + B -> C", analysis={"reference_temperature_c": 50.0},
                        analyte_main=analytes[0] if analytes else "product",
                        byproducts=tuple(analytes[1:]) if analytes else (),
                        source_toml=_SAMPLE_MANIFEST.format(name=name, extra=""))
    return CampaignData(manifest=manifest, catalysts=catalysts, plates=plates_f, wells=wells, readings=readings,
                        factor_names=factor_names)


def _fake_kin(tof, se, *, df=1e7, n=4, ea=None, ea_se=None, ea_df=1e7, roles=None, t=60.0, flags=None,
              ton=None, ton_se=None):
    """See the module docstring (``fake_kin``)."""
    from screenlab.kinetics import KineticsResult
    from screenlab.schema import RATES
    from screenlab.settings import AnalysisSettings

    names = [f"K{i}" for i in range(len(tof))]
    roles = roles or ["sample"] * len(tof)
    rates = pd.DataFrame({"catalyst": names, "role": roles, "temperature_c": t, "n_wells": n,
                          "tof_per_h": tof, "tof_se_per_h": se, "tof_df": df, "is_standard": True,
                          "ton": tof if ton is None else ton, "ton_se": se if ton_se is None else ton_se,
                          "enhancement": np.asarray(tof, float) * 10,
                          "enhancement_ci_low": np.asarray(tof, float) * 10 / 1.1,
                          "enhancement_ci_high": np.asarray(tof, float) * 11,
                          "flags": flags or [""] * len(tof)})
    empty = {"float": np.nan, "text": None, "int": 0, "bool": False}
    for col in RATES.columns:                        # the schema's other columns, empty
        if col.name not in rates:
            rates[col.name] = pd.Series([empty[col.dtype]] * len(rates), dtype=object if col.dtype == "text" else None)
    wells = pd.DataFrame({"catalyst": np.repeat(names, 2), "role": np.repeat(roles, 2),
                          "plate": ["P1", "P2"] * len(tof)})
    arr = pd.DataFrame()
    if ea is not None:
        arr = pd.DataFrame({"catalyst": names, "role": roles, "n_temperatures": 4, "t_min_c": 40.0, "t_max_c": 70.0,
                            "ea_kj_mol": ea, "ea_se": ea_se, "fit_df": ea_df, "flags": ""})
    return KineticsResult(pd.DataFrame(), wells, pd.DataFrame(), rates, arr, pd.DataFrame(), AnalysisSettings())


@pytest.fixture(scope="session")
def fake_kin():
    """The builder ``fake_kin(tof, se, ...)`` (module docstring)."""
    return _fake_kin
