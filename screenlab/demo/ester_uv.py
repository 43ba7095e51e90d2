"""Demo campaign ``ester-hydrolysis-uv``: 4-nitrophenyl acetate hydrolysis followed at 405 nm
(absorbance, Beer-Lambert) on 96-well plates at three temperatures."""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.demo.common import (Campaign, catalyst_columns, layout_file, per_well_truth, plates_by_temperature,
                                   screen_groups, time_courses, well_site_conc_mM)
from screenlab.demo.generator import arrhenius_factor, beer_lambert_absorbance, first_order_conversion, site_umol
from screenlab.model import UNCATALYSED

_UV_TREF = 35.0
_UV_TEMPS = (25.0, 35.0, 45.0)
UV_TIMES_S = tuple(range(0, 3001, 300))     # 11 readings, every 5 min
_UV_S0 = 0.10        # mM
_UV_V = 200.0        # uL
UV_LOAD = 5.0       # mol%
UV_EPS = 16100.0    # L mol-1 cm-1, effective value at pH 8.0 (invented calibration)
UV_PATH = 0.56      # cm, 200 uL in a flat-bottom 96-well plate
UV_BLANK = dict(ea_kj_mol=62.0, k_ref_per_h=0.12)   # spontaneous hydrolysis at pH 8.0, 35 C
_UV_LIBRARY = [
    ("ZN-IM1", "Zn(II) tris(imidazolyl)methane", "Zn imidazole", 1.0, 48.0, 22.0),
    ("ZN-IM2", "Zn(II) tris(methylimidazolyl)methane", "Zn imidazole", 1.0, 52.0, 30.0),
    ("ZN-DI", "dinuclear Zn(II) bis(imidazolyl) xylyl", "Zn imidazole", 2.0, 45.0, 24.0),
    ("CU-BP1", "Cu(II) 2,2'-bipyridyl aqua", "Cu bipyridyl", 1.0, 58.0, 9.0),
    ("CU-BP2", "Cu(II) 4,4'-dimethyl-bipyridyl aqua", "Cu bipyridyl", 1.0, 61.0, 12.0),
    ("CO-CY", "Co(III) cyclen diaqua", "Co macrocycle", 1.0, 66.0, 5.0),
    ("CO-TN", "Co(III) trien diaqua", "Co macrocycle", 1.0, 70.0, 3.5),
    ("PEP-H1", "His-rich heptapeptide", "peptide", 1.0, 40.0, 14.0),
    ("PEP-H2", "His/Asp heptapeptide", "peptide", 1.0, 43.0, 28.0),
    ("PEP-SC", "scrambled heptapeptide", "peptide", 1.0, np.nan, 0.0),
    ("IMZ", "imidazole (small-molecule control)", "control", 1.0, 55.0, 1.5),
    ("REF-ZN", "benchmark Zn(II) cyclen", "benchmark", 1.0, 50.0, 18.0),
]
UV_SPIKE = ("UV-35", 0.35)   # an air bubble: one reading of one well reads 0.35 AU high


def build(rng: np.random.Generator) -> Campaign:
    cats = pd.DataFrame(_UV_LIBRARY, columns=["catalyst", "name", "family", "sites_per_unit", "ea_kj_mol",
                                              "tof_ref_per_h"])
    cats = cats.assign(molar_mass_g_mol=np.nan, metal_wt_pct=np.nan, metal_molar_mass_g_mol=np.nan,
                       dispersion=np.nan, sites_per_unit=cats["sites_per_unit"].where(cats["sites_per_unit"] != 1.0))
    std = dict(substrate_conc=_UV_S0, volume=_UV_V, buffer="HEPES pH 8.0")
    groups = screen_groups(cats["catalyst"], "REF-ZN", n_sample=6, n_reference=6, n_blank=8, loading=UV_LOAD,
                           loading_unit="mol%", std=std)
    plates, layout = plates_by_temperature(
        rng, _UV_TEMPS, 96, lambda temp: groups,
        lambda i, temp: dict(plate=f"UV-{int(temp)}", format=96, temperature_c=temp, run_date=f"2026-04-{14 + i:02d}",
                             notes=f"plate reader, 405 nm, read every 5 min at {temp:g} C"))
    layout["_vol_uL"] = layout["volume"]
    filled = layout["role"] != "empty"
    tw = per_well_truth(layout, cats, ["ea_kj_mol", "tof_ref_per_h"])
    temp = layout["_temp"].to_numpy(float)
    site_mM = well_site_conc_mM(layout, cats)
    k2 = (tw["tof_ref_per_h"].fillna(0.0).to_numpy(float) / _UV_S0
          * arrhenius_factor(tw["ea_kj_mol"].fillna(0.0).to_numpy(float), temp, _UV_TREF))
    dispense = np.exp(rng.normal(0.0, 0.05, len(layout)))
    k_cat = np.where(filled, k2 * site_mM * dispense, 0.0)
    k_blank = np.where(filled, UV_BLANK["k_ref_per_h"] * arrhenius_factor(UV_BLANK["ea_kj_mol"], temp, _UV_TREF),
                       0.0)
    layout = layout.assign(_k_cat=k_cat, _k_blank=k_blank)
    course = time_courses(layout, np.asarray(UV_TIMES_S, float))
    x = first_order_conversion(course["t"].to_numpy() / 3600.0, course["_k_cat"], course["_k_blank"])
    absorb = beer_lambert_absorbance(x * course["substrate_conc"].to_numpy(float), UV_EPS, UV_PATH)
    absorb = absorb + rng.normal(0.0, 1.0, len(absorb)) * (0.003 + 0.01 * absorb)
    # planted flaw: one air bubble in one well of the 35 C plate, at the 25 min reading
    plate_id, jump = UV_SPIKE
    spike_well = layout.loc[(layout["plate"] == plate_id) & (layout["catalyst"] == "CU-BP2"), "well"].iloc[0]
    hit = ((course["plate"] == plate_id) & (course["well"] == spike_well) & (course["t"] == 1500)).to_numpy()
    absorb = absorb + np.where(hit, jump, 0.0)
    readings = pd.DataFrame({"plate": course["plate"], "well": course["well"], "time": course["t"],
                             "value": np.round(absorb, 4)})
    out_layout = layout_file(layout, "buffer")
    toml = f'''[campaign]
name = "ester-hydrolysis-uv"
description = "Invented demo: 4-nitrophenyl acetate hydrolysis by small metal complexes and peptides, plate reader at 405 nm, three temperatures"
reaction = "4-nitrophenyl acetate + H2O -> 4-nitrophenolate + acetate (HEPES pH 8.0)"

[units]
time = "s"
concentration = "mM"
volume = "uL"

[readout]
kind = "absorbance"
product_per_substrate = 1.0
epsilon_M_cm = {UV_EPS:g}
path_length_cm = {UV_PATH:g}

[analysis]
reference_temperature_c = {_UV_TREF:g}
'''
    subst_umol = _UV_S0 * _UV_V * 1e-3
    sites = site_umol(cats, np.full(len(cats), UV_LOAD), np.full(len(cats), "mol%", dtype=object),
                       np.full(len(cats), subst_umol))
    k_cat_ref = cats["tof_ref_per_h"] / _UV_S0 * sites / (_UV_V * 1e-3)
    truth = pd.DataFrame({
        "catalyst": cats["catalyst"], "name": cats["name"], "family": cats["family"],
        "role": np.where(cats["catalyst"] == "REF-ZN", "reference", "sample"),
        "behaviour": np.where(cats["tof_ref_per_h"] > 0, "normal", "inactive"),
        "ea_kj_mol": cats["ea_kj_mol"], "tof_ref_per_h": cats["tof_ref_per_h"],
        "enhancement_ref": (k_cat_ref + UV_BLANK["k_ref_per_h"]) / UV_BLANK["k_ref_per_h"],
        "selectivity_pct": np.nan, "ee_pct": np.nan, "std_loading": UV_LOAD, "loading_unit": "mol%",
        "sites_umol": sites, "formula": "", "kd_ref_per_h": np.nan, "induction_tau_ref_h": np.nan,
        "blank_rate_ref_mM_per_h": np.nan,
    })
    truth = pd.concat([truth, pd.DataFrame([{
        "catalyst": UNCATALYSED, "name": "spontaneous hydrolysis (buffer only)", "family": "", "role": "blank",
        "behaviour": "background", "ea_kj_mol": UV_BLANK["ea_kj_mol"], "enhancement_ref": 1.0,
        "loading_unit": "", "formula": "", "blank_rate_ref_mM_per_h": UV_BLANK["k_ref_per_h"] * _UV_S0}])],
        ignore_index=True)
    return Campaign("ester-hydrolysis-uv", toml, catalyst_columns(cats), pd.DataFrame(plates), out_layout,
                     readings, truth)
