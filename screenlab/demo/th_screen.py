"""Demo campaign ``th-screen-2026``: transfer hydrogenation, GC-FID yield in percent, four block
temperatures, a loading series, a substrate series and a base factor (see demo_campaign/README.md)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.demo.common import (Campaign, catalyst_columns, layout_file, per_well_truth, place,
                                   plates_by_temperature, time_courses, well_group, well_site_conc_mM)
from screenlab.demo.generator import ATOMIC_WEIGHTS, arrhenius_factor, first_order_conversion, molar_mass, site_umol
from screenlab.model import UNCATALYSED
from screenlab.plates import is_edge

_TH_TREF = 60.0
_TH_TEMPS = (40.0, 50.0, 60.0, 70.0)
_TH_TIMES_MIN = (0, 15, 30, 60, 120, 180, 240, 360)
TH_S0 = 200.0      # mM
_TH_V = 500.0       # uL
TH_BLANK = dict(ea_kj_mol=105.0, k_ref_per_h=0.010)   # base-mediated background at 60 C

# catalyst, name, family, dosing (unit, standard loading), formula / supported data, Ea, TOF(60 C), behaviour
_TH_LIBRARY = [
    # homogeneous Ru(II) arene / sulfonyl-diamine complexes, dosed from stock solutions in umol
    ("RU-01", "Ru(arene A)(Ts-diamine)Cl", "Ru arene-diamine", "umol", 0.5, None, 52.0, 310.0, "normal"),
    ("RU-02", "Ru(arene B)(Ts-diamine)Cl", "Ru arene-diamine", "umol", 0.5, None, 58.0, 180.0, "normal"),
    ("RU-03", "Ru(arene A)(Ms-diamine)Cl", "Ru arene-diamine", "umol", 0.5, None, 61.0, 44.0, "normal"),
    ("RU-04", "Ru(arene C)(Ts-diamine)Cl", "Ru arene-diamine", "umol", 0.5, None, 55.0, 150.0, "normal"),
    ("RU-05", "Ru(arene B)(Ms-diamine)Cl", "Ru arene-diamine", "umol", 0.5, None, 66.0, 41.0, "normal"),
    ("RU-06", "Ru(arene C)(aminoalcohol)Cl", "Ru arene-diamine", "umol", 0.5, None, 72.0, 12.0, "normal"),
    ("RU-07", "Ru(arene A)(Ts-diamine)OTf precatalyst", "Ru arene-diamine", "umol", 0.5, None, 48.0, 39.0,
     "induction"),
    # Ir(III) Cp* complexes, umol; IR-03 is a chloride-bridged dimer (2 Ir per formula unit)
    ("IR-01", "Ir(Cp*)(aminoalcohol)Cl", "Ir Cp*", "umol", 0.5, None, 63.0, 46.0, "normal"),
    ("IR-02", "Ir(Cp*)(Ts-diamine)Cl", "Ir Cp*", "umol", 0.5, None, 70.0, 95.0, "normal"),
    ("IR-03", "[Ir(Cp*)Cl2]2 + aminoalcohol (1:2)", "Ir Cp*", "umol", 0.25, None, 67.0, 43.0, "normal"),
    ("IR-04", "Ir(Cp*)(picolinamide)Cl", "Ir Cp*", "umol", 0.5, None, 88.0, 8.0, "normal"),
    ("IR-05", "Ir(Cp*)(bipyridyl-diol)Cl", "Ir Cp*", "umol", 0.5, None, 93.0, 25.0, "normal"),
    # Fe / Mn PNP pincer complexes, weighed solids (mg) with molar mass from the formula
    ("FE-01", "Fe(PNP-iPr)(CO)HBr", "Fe/Mn pincer", "mg", 0.30, "C17H38BrFeNOP2", 78.0, 60.0, "deactivating"),
    ("FE-02", "Fe(PNP-Ph)(CO)HBr", "Fe/Mn pincer", "mg", 0.30, "C29H30BrFeNOP2", 82.0, 15.0, "normal"),
    ("FE-03", "Fe(PNP-Cy)(CO)HBr", "Fe/Mn pincer", "mg", 0.30, "C29H54BrFeNOP2", 75.0, 38.0, "normal"),
    ("FE-04", "Fe(PNP-tBu)(CO)HBr", "Fe/Mn pincer", "mg", 0.30, "C21H46BrFeNOP2", np.nan, 0.0, "inactive"),
    ("MN-01", "Mn(PNP-iPr)(CO)2Br", "Fe/Mn pincer", "mg", 0.30, "C18H37BrMnNO2P2", 69.0, 130.0, "normal"),
    ("MN-02", "Mn(PNP-Ph)(CO)2Br", "Fe/Mn pincer", "mg", 0.30, "C30H29BrMnNO2P2", 85.0, 6.0, "normal"),
    ("MN-03", "Mn(PNP-Cy)(CO)2Br", "Fe/Mn pincer", "mg", 0.30, "C30H53BrMnNO2P2", 90.0, 20.0, "normal"),
    # supported metals, weighed (mg): (metal, wt%, dispersion)
    ("S-RU-C", "5 % Ru on carbon", "supported metal", "mg", 3.0, ("Ru", 5.0, 0.30), 45.0, 70.0, "normal"),
    ("S-RU-AL", "5 % Ru on alumina", "supported metal", "mg", 2.0, ("Ru", 5.0, 0.45), 50.0, 40.0, "normal"),
    ("S-PD-C", "10 % Pd on carbon", "supported metal", "mg", 2.0, ("Pd", 10.0, 0.25), 38.0, 5.0, "normal"),
    ("S-PT-AL", "5 % Pt on alumina, coarse pellets", "supported metal", "mg", 3.5, ("Pt", 5.0, 0.55), 15.0, 90.0,
     "transport_limited"),
    ("S-IR-SI", "2 % Ir on silica", "supported metal", "mg", 8.0, ("Ir", 2.0, 0.60), 60.0, 30.0, "normal"),
    ("S-NI-SI", "20 % Ni on silica", "supported metal", "mg", 2.0, ("Ni", 20.0, 0.08), np.nan, 0.0, "inactive"),
    ("S-CU-ZR", "10 % Cu on zirconia", "supported metal", "mg", 3.0, ("Cu", 10.0, 0.12), 95.0, 3.0, "normal"),
    # the benchmark, on every plate
    ("REF-RU", "benchmark Ru(p-cymene)(Ts-diamine)Cl", "benchmark", "umol", 0.5, None, 56.0, 120.0, "reference"),
]
TH_KD_REF = 0.60       # FE-01 deactivation constant at 60 C, h-1 (Ea 90 kJ/mol)
TH_TAU_REF = 0.75      # RU-07 induction time at 60 C, h (activation Ea 70 kJ/mol)
_TH_EDGE_PLATE = "TH-70"
#: outer ring of the edge plate: fraction of solvent lost while the block warmed up before the
#: first sample, and further loss by the last reading (concentration factor 1 / (1 - lost))
TH_EDGE_LOSS0 = 0.08
TH_EDGE_LOSS1 = 0.14
TH_K2CO3 = 0.35        # rate factor of K2CO3 against KOtBu for the catalysed path (invented)


def _th_catalysts() -> pd.DataFrame:
    rec = []
    for cid, name, fam, unit, load, extra, ea, tof, beh in _TH_LIBRARY:
        row = dict(catalyst=cid, name=name, family=fam, loading_unit=unit, std_loading=load, ea_kj_mol=ea,
                   tof_ref_per_h=tof, behaviour=beh, formula="", molar_mass_g_mol=np.nan,
                   sites_per_unit=2.0 if cid == "IR-03" else np.nan, metal_wt_pct=np.nan,
                   metal_molar_mass_g_mol=np.nan, dispersion=np.nan)
        if isinstance(extra, str):
            row.update(formula=extra, molar_mass_g_mol=molar_mass(extra))
        elif isinstance(extra, tuple):
            metal, wt, disp = extra
            row.update(formula=metal, metal_wt_pct=wt, metal_molar_mass_g_mol=ATOMIC_WEIGHTS[metal], dispersion=disp)
        rec.append(row)
    return pd.DataFrame(rec)


def build(rng: np.random.Generator) -> Campaign:
    """The campaign: the plates and layout, every well's rate constants, the GC readings with the
    planted flaws, and the truth (the random draws in that order)."""
    cats = _th_catalysts()
    plates, layout = _layout(rng, cats)
    layout = _rate_constants(rng, layout, cats)
    readings = _readings(rng, layout)
    out_layout = layout_file(layout, "base")
    return Campaign("th-screen-2026", _TOML, catalyst_columns(cats), pd.DataFrame(plates), out_layout,
                    readings, _truth(cats))


def _layout(rng: np.random.Generator, cats: pd.DataFrame) -> tuple[list[dict], pd.DataFrame]:
    """Four screening blocks (every candidate x 3, the benchmark x 6, blanks x 6) and the series
    block at 60 C (loading series, substrate series, base factor)."""
    cand = cats[cats["behaviour"] != "reference"]
    ref = cats[cats["behaviour"] == "reference"].iloc[0]
    std = dict(substrate_conc=TH_S0, volume=_TH_V, base="KOtBu")

    def sample_groups(role_rows: pd.DataFrame, n: int, role: str = "sample", **over) -> list[pd.DataFrame]:
        return [well_group(role, n, catalyst=r.catalyst, loading=r.std_loading, loading_unit=r.loading_unit,
                           **{**std, **over}) for r in role_rows.itertuples()]

    dates = {40.0: "2026-03-02", 50.0: "2026-03-03", 60.0: "2026-03-04", 70.0: "2026-03-05"}
    main = sample_groups(cand, 3) + sample_groups(pd.DataFrame([ref]), 6, role="reference")
    main.append(well_group("blank", 6, **std))
    plates, screen = plates_by_temperature(  # four plates
        rng, _TH_TEMPS, 96, lambda temp: main,
        lambda i, temp: dict(plate=f"TH-{int(temp)}", format=96, temperature_c=temp, run_date=dates[temp],
                             notes=f"main screen, 3 wells per candidate, block at {temp:g} C"))
    ir2 = cats.set_index("catalyst").loc["IR-02"]
    mn1 = cats.set_index("catalyst").loc["MN-01"]
    groups = [well_group("sample", 3, catalyst="RU-04", loading=ld, loading_unit="umol", **std)
              for ld in (0.125, 0.25, 0.5, 1.0)]
    groups += [well_group("sample", 3, catalyst="MN-01", loading=mn1.std_loading, loading_unit="mg",
                          **{**std, "substrate_conc": sc}) for sc in (50.0, 100.0, 200.0, 400.0)]
    groups += [well_group("sample", 3, catalyst=c.name, loading=c.std_loading, loading_unit=c.loading_unit,
                          **{**std, "base": "K2CO3"}) for c in (ir2, cats.set_index("catalyst").loc["RU-01"])]
    groups += [well_group("reference", 6, catalyst="REF-RU", loading=ref.std_loading, loading_unit="umol", **std),
               well_group("blank", 6, **std)]
    series = place(rng, 96, groups).assign(plate="TH-60S", _temp=60.0)
    plates.append(dict(plate="TH-60S", format=96, temperature_c=60.0, run_date="2026-03-06",
                       notes="series block: RU-04 loading series, MN-01 substrate series, IR-02 and RU-01 with K2CO3"))
    layout = pd.concat([screen, series], ignore_index=True)
    layout["_vol_uL"] = layout["volume"]
    return plates, layout


def _rate_constants(rng: np.random.Generator, layout: pd.DataFrame, cats: pd.DataFrame) -> pd.DataFrame:
    """Every well's catalysed and background rate constants, deactivation and induction (vectorised
    over wells, with the dispensing scatter), and the planted dispensing failure."""
    filled = layout["role"] != "empty"
    tw = per_well_truth(layout, cats, ["ea_kj_mol", "tof_ref_per_h", "behaviour", "family"])
    temp = layout["_temp"].to_numpy(float)
    site_mM = well_site_conc_mM(layout, cats)
    k2_ref = tw["tof_ref_per_h"].fillna(0.0).to_numpy(float) / TH_S0          # mM-1 h-1
    k2 = k2_ref * arrhenius_factor(tw["ea_kj_mol"].fillna(0.0).to_numpy(float), temp, _TH_TREF)
    scatter_sd = np.select([tw["family"].to_numpy(object) == "Fe/Mn pincer",
                            tw["family"].to_numpy(object) == "supported metal"], [0.10, 0.08], 0.06)
    dispense = np.exp(rng.normal(0.0, 1.0, len(layout)) * scatter_sd)
    base_factor = np.where(layout["base"].to_numpy(object) == "K2CO3", TH_K2CO3, 1.0)
    k_cat = np.where(filled, k2 * site_mM * dispense * base_factor, 0.0)
    k_blank = np.where(filled, TH_BLANK["k_ref_per_h"] * arrhenius_factor(TH_BLANK["ea_kj_mol"], temp, _TH_TREF),
                       0.0)
    beh = tw["behaviour"].to_numpy(object)
    kd = np.where(beh == "deactivating", TH_KD_REF * arrhenius_factor(90.0, temp, _TH_TREF), 0.0)
    tau = np.where(beh == "induction", TH_TAU_REF / arrhenius_factor(70.0, temp, _TH_TREF), 0.0)
    layout = layout.assign(_k_cat=k_cat, _k_blank=k_blank, _kd=kd, _tau=tau)
    # planted flaw 1: a dispensing failure (no substrate reached the vial): flat zero course
    failed = (layout["plate"] == "TH-60") & (layout["catalyst"] == "RU-02")
    failed_idx = layout.index[failed][1]
    layout["_failed"] = layout.index == failed_idx
    return layout


def _readings(rng: np.random.Generator, layout: pd.DataFrame) -> pd.DataFrame:
    """GC yields (percent) of every non-empty well at every reading time, with the evaporating edge
    ring, GC noise, the failed well and a missing reading."""
    course = time_courses(layout, np.asarray(_TH_TIMES_MIN, float))
    t_h = course["t"].to_numpy() / 60.0
    x = first_order_conversion(t_h, course["_k_cat"], course["_k_blank"], course["_kd"], course["_tau"])
    y = 100.0 * x
    # planted flaw 2: solvent evaporating through the outer ring of the 70 C block concentrates
    # the sampled solution against the internal standard, so its yields read high (already at
    # the first sample, more so later)
    edge = (course["plate"].to_numpy(object) == _TH_EDGE_PLATE) & is_edge(course["_row"], course["_col"], 96)
    lost = TH_EDGE_LOSS0 + TH_EDGE_LOSS1 * t_h / t_h.max()
    y = y * np.where(edge, 1.0 / (1.0 - lost), 1.0)
    y = y + rng.normal(0.0, 1.0, len(y)) * (0.8 + 0.008 * y)      # GC noise, ~0.8-1.6 % absolute
    y = np.where(course["_failed"].to_numpy(bool), 0.0, y)
    # exported as the GC software writes them: noise around 0 and full conversion is kept, so
    # a few yields read a little below 0 or above 100 % (the import takes -5..110 %)
    y = np.round(np.clip(y, -4.99, 109.99), 2)
    readings = pd.DataFrame({"plate": course["plate"], "well": course["well"], "time": course["t"], "value": y})
    # planted flaw 3: a missing reading (the 120 min sample of one well was never injected)
    miss_well = layout.loc[(layout["plate"] == "TH-50") & (layout["catalyst"] == "IR-01"), "well"].iloc[0]
    return readings[~((readings["plate"] == "TH-50") & (readings["well"] == miss_well)
                      & (readings["time"] == 120))].reset_index(drop=True)


_TOML = f'''[campaign]
name = "th-screen-2026"
description = "Invented demo: transfer hydrogenation screen, 26 candidates in four families plus a benchmark, four block temperatures, loading and substrate series at 60 C"
reaction = "4'-chloroacetophenone + 2-propanol -> 1-(4-chlorophenyl)ethanol + acetone (KOtBu, 2-propanol)"

[units]
time = "min"
concentration = "mM"
volume = "uL"

[readout]
kind = "yield"
scale = "percent"
product_per_substrate = 1.0

[analysis]
reference_temperature_c = {_TH_TREF:g}
'''


def _truth(cats: pd.DataFrame) -> pd.DataFrame:
    """The truth per catalyst at the standard condition and the reference temperature, and the
    background's row."""
    tr = cats.copy()
    std_sites = site_umol(tr, tr["std_loading"], tr["loading_unit"].to_numpy(object),
                          np.full(len(tr), TH_S0 * _TH_V * 1e-3))
    k_blank_ref = TH_BLANK["k_ref_per_h"]
    k_cat_ref = tr["tof_ref_per_h"] / TH_S0 * std_sites / (_TH_V * 1e-3)
    truth = pd.DataFrame({
        "catalyst": tr["catalyst"], "name": tr["name"], "family": tr["family"],
        "role": np.where(tr["behaviour"] == "reference", "reference", "sample"),
        "behaviour": tr["behaviour"].replace({"reference": "normal"}),
        "ea_kj_mol": tr["ea_kj_mol"], "tof_ref_per_h": tr["tof_ref_per_h"],
        "enhancement_ref": (k_cat_ref + k_blank_ref) / k_blank_ref,
        "selectivity_pct": np.nan, "ee_pct": np.nan,
        "std_loading": tr["std_loading"], "loading_unit": tr["loading_unit"], "sites_umol": std_sites,
        "formula": tr["formula"],
        "kd_ref_per_h": np.where(tr["behaviour"] == "deactivating", TH_KD_REF, np.nan),
        "induction_tau_ref_h": np.where(tr["behaviour"] == "induction", TH_TAU_REF, np.nan),
        "blank_rate_ref_mM_per_h": np.nan,
    })
    blank_row = pd.DataFrame([{"catalyst": UNCATALYSED, "name": "background (base only)", "family": "",
                               "role": "blank", "behaviour": "background", "ea_kj_mol": TH_BLANK["ea_kj_mol"],
                               "enhancement_ref": 1.0, "loading_unit": "", "formula": "",
                               "blank_rate_ref_mM_per_h": k_blank_ref * TH_S0}])
    return pd.concat([truth, blank_row], ignore_index=True)
