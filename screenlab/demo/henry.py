"""Demo campaign ``henry-chiral-2026``: enantioselective nitroaldol, chiral HPLC of both
enantiomers and two by-products as product concentrations, 48-vial blocks at two temperatures."""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.demo.common import (Campaign, catalyst_columns, layout_file, per_well_truth, plates_by_temperature,
                                   screen_groups, time_courses, well_site_conc_mM)
from screenlab.demo.generator import arrhenius_factor
from screenlab.model import UNCATALYSED

_HN_TREF = 25.0
_HN_TEMPS = (25.0, 40.0)
_HN_TIMES_H = (0.0, 0.5, 1.0, 2.0, 4.0, 6.0, 8.0)
_HN_S0 = 100.0       # mM (written as 0.1 M)
_HN_V = 1000.0       # uL (written as 1.0 mL)
_HN_LOAD = 1.0       # umol (1 mol%)
_HN_ANALYTES = ("P_R", "P_S", "B_ene", "B_bis")
#: background: base-promoted racemic nitroaldol plus dehydration; 70 % P (racemic), 30 % alkene
HN_BLANK = dict(ea_kj_mol=72.0, k_ref_per_h=0.004, frac_main=0.70)
# catalyst, name, family, Ea, TOF of the main product at 25 C (h-1), selectivity % to P, ee % (R positive)
_HN_LIBRARY = [
    ("CU-BOX1", "Cu(OAc)2 / bis(oxazoline) L1 (Ph)", "Cu bis(oxazoline)", 48.0, 14.0, 94.0, 92.0),
    ("CU-BOX2", "Cu(OAc)2 / bis(oxazoline) L2 (tBu)", "Cu bis(oxazoline)", 52.0, 6.0, 97.0, 96.0),
    ("CU-BOX3", "Cu(OAc)2 / bis(oxazoline) L3 (iPr)", "Cu bis(oxazoline)", 50.0, 11.0, 90.0, 81.0),
    ("CU-DA1", "Cu(OAc)2 / trans-diamine L4", "Cu diamine", 44.0, 25.0, 82.0, 64.0),
    ("CU-DA2", "Cu(OAc)2 / trans-diamine L5 (N-benzyl)", "Cu diamine", 46.0, 19.0, 88.0, -72.0),
    ("ZN-AA1", "Et2Zn / aminoalcohol L6", "Zn aminoalcohol", 58.0, 9.0, 75.0, 40.0),
    ("ZN-AA2", "Et2Zn / aminoalcohol L7", "Zn aminoalcohol", 61.0, 4.0, 93.0, 88.0),
    ("CO-SAL", "Co(II) salen L8", "Co salen", 55.0, 2.0, 70.0, 30.0),
    ("REF-CU", "benchmark Cu(OAc)2 / bis(oxazoline) L0", "benchmark", 50.0, 10.0, 92.0, 85.0),
]


def build(rng: np.random.Generator, library: list[tuple] | None = None) -> Campaign:
    """The campaign (``library``: other invented catalysts in the rows' shape of the demo's own, the
    benchmark ``REF-CU`` among them)."""
    cats = pd.DataFrame(_HN_LIBRARY if library is None else library,
                        columns=["catalyst", "name", "family", "ea_kj_mol", "tof_ref_per_h", "selectivity_pct",
                                 "ee_pct"])
    cats = cats.assign(molar_mass_g_mol=np.nan, sites_per_unit=np.nan, metal_wt_pct=np.nan,
                       metal_molar_mass_g_mol=np.nan, dispersion=np.nan)
    std = dict(substrate_conc=_HN_S0 / 1000.0, volume=_HN_V / 1000.0, additive="DIPEA 10 mol%")
    groups = screen_groups(cats["catalyst"], "REF-CU", n_sample=3, n_reference=4, n_blank=4, loading=_HN_LOAD,
                           loading_unit="umol", std=std)
    plates, layout = plates_by_temperature(
        rng, _HN_TEMPS, 48, lambda temp: groups,
        lambda i, temp: dict(plate=f"HN-{int(temp)}", format=48, temperature_c=temp, run_date=f"2026-05-{4 + i:02d}",
                             notes=f"48-vial block at {temp:g} C, chiral HPLC"))
    layout["_vol_uL"] = layout["volume"] * 1000.0
    layout["_s0_mM"] = layout["substrate_conc"] * 1000.0
    filled = (layout["role"] != "empty").to_numpy()
    tw = per_well_truth(layout, cats, ["ea_kj_mol", "tof_ref_per_h", "selectivity_pct", "ee_pct"])
    temp = layout["_temp"].to_numpy(float)
    lay_mM = layout.assign(substrate_conc=layout["_s0_mM"])
    site_mM = well_site_conc_mM(lay_mM, cats)
    arr = arrhenius_factor(tw["ea_kj_mol"].fillna(0.0).to_numpy(float), temp, _HN_TREF)
    dispense = np.exp(rng.normal(0.0, 0.06, len(layout)))
    k_main = np.where(filled, tw["tof_ref_per_h"].fillna(0.0).to_numpy(float) / _HN_S0 * arr * site_mM * dispense,
                      0.0)
    sel = tw["selectivity_pct"].fillna(100.0).to_numpy(float) / 100.0
    ee = tw["ee_pct"].fillna(0.0).to_numpy(float) / 100.0
    k_byp = k_main * (1.0 - sel) / sel
    kb = np.where(filled, HN_BLANK["k_ref_per_h"] * arrhenius_factor(HN_BLANK["ea_kj_mol"], temp, _HN_TREF), 0.0)
    # parallel first-order paths (rows: wells; columns: P_R, P_S, B_ene, B_bis)
    paths = np.column_stack([
        k_main * (1 + ee) / 2 + kb * HN_BLANK["frac_main"] / 2,
        k_main * (1 - ee) / 2 + kb * HN_BLANK["frac_main"] / 2,
        k_byp * 0.6 + kb * (1 - HN_BLANK["frac_main"]),
        k_byp * 0.4,
    ])
    layout = layout.assign(**{f"_k_{a}": paths[:, j] for j, a in enumerate(_HN_ANALYTES)})
    course = time_courses(layout, np.asarray(_HN_TIMES_H, float))
    n = len(course)
    kp = course[[f"_k_{a}" for a in _HN_ANALYTES]].to_numpy(float)        # (n, 4)
    ktot = kp.sum(axis=1)
    frac = -np.expm1(-ktot * course["t"].to_numpy(float))
    share = np.divide(kp, ktot[:, None], out=np.zeros_like(kp), where=ktot[:, None] > 0)
    conc_mM = course["_s0_mM"].to_numpy(float)[:, None] * share * frac[:, None]
    conc_mM = conc_mM + rng.normal(0.0, 1.0, conc_mM.shape) * (0.15 + 0.015 * conc_mM)    # HPLC noise
    conc_M = np.round(np.clip(conc_mM, 0.0, None) / 1000.0, 5)
    readings = pd.DataFrame({
        "plate": np.repeat(course["plate"].to_numpy(object), 4),
        "well": np.repeat(course["well"].to_numpy(object), 4),
        "time": np.repeat(course["t"].to_numpy(float), 4),
        "analyte": np.tile(np.array(_HN_ANALYTES, dtype=object), n),
        "value": conc_M.reshape(-1),
    })
    out_layout = layout_file(layout, "additive")
    toml = f'''[campaign]
name = "henry-chiral-2026"
description = "Invented demo: enantioselective nitroaldol with chiral Cu, Zn and Co catalysts, chiral HPLC of both enantiomers and two by-products, two temperatures"
reaction = "4-nitrobenzaldehyde + nitromethane -> 2-nitro-1-(4-nitrophenyl)ethanol (R/S); by-products nitroalkene (B_ene), bis-adduct (B_bis)"

[units]
time = "h"
concentration = "M"
volume = "mL"

[readout]
kind = "product_conc"
product_per_substrate = 1.0

[analytes]
main = "P"
byproducts = ["B_ene", "B_bis"]
enantiomers = ["P_R", "P_S"]

[analysis]
reference_temperature_c = {_HN_TREF:g}
'''
    sites = np.full(len(cats), _HN_LOAD)
    k_cat_ref = cats["tof_ref_per_h"] / _HN_S0 * sites / (_HN_V * 1e-3)
    kb_main = HN_BLANK["k_ref_per_h"] * HN_BLANK["frac_main"]
    truth = pd.DataFrame({
        "catalyst": cats["catalyst"], "name": cats["name"], "family": cats["family"],
        "role": np.where(cats["catalyst"] == "REF-CU", "reference", "sample"), "behaviour": "normal",
        "ea_kj_mol": cats["ea_kj_mol"], "tof_ref_per_h": cats["tof_ref_per_h"],
        "enhancement_ref": (k_cat_ref + kb_main) / kb_main,
        "selectivity_pct": cats["selectivity_pct"], "ee_pct": cats["ee_pct"],
        "std_loading": _HN_LOAD, "loading_unit": "umol", "sites_umol": sites, "formula": "",
        "kd_ref_per_h": np.nan, "induction_tau_ref_h": np.nan, "blank_rate_ref_mM_per_h": np.nan,
    })
    truth = pd.concat([truth, pd.DataFrame([{
        "catalyst": UNCATALYSED, "name": "base-promoted background (racemic)", "family": "", "role": "blank",
        "behaviour": "background", "ea_kj_mol": HN_BLANK["ea_kj_mol"], "enhancement_ref": 1.0,
        "selectivity_pct": 100.0 * HN_BLANK["frac_main"], "ee_pct": 0.0, "loading_unit": "", "formula": "",
        "blank_rate_ref_mM_per_h": kb_main * _HN_S0}])], ignore_index=True)
    return Campaign("henry-chiral-2026", toml, catalyst_columns(cats), pd.DataFrame(plates), out_layout,
                     readings, truth)
