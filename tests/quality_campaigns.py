"""Synthetic campaigns built in code (invented data, tests only): ``make_campaign`` simulates well
rates from a known truth (Arrhenius TOF per catalyst, a blank line, log-normal well noise) and
returns a CampaignData and a kinetics-like result with the frame columns of DEVELOPERS.md,
aggregated here by plain means so that the stats layer can be tested before and independently
of the kinetics package. A plain module the tests import by name (not a test module).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.kinetics import KineticsResult
from screenlab.model import CampaignData, Manifest
from screenlab.plates import all_wells, is_edge
from screenlab.settings import AnalysisSettings



R = 8.31446261815324


def _fit_arrhenius(name, role, t_c, y, y_se):
    """OLS of ln y on 1/T (the Arrhenius line), with the covariance of (intercept, slope)."""
    x = 1.0 / (np.asarray(t_c) + 273.15)
    ln_y = np.log(y)
    X = np.column_stack([np.ones_like(x), x])
    beta, *_ = np.linalg.lstsq(X, ln_y, rcond=None)
    dof = len(x) - 2
    s2 = float(np.sum((ln_y - X @ beta) ** 2) / dof) if dof > 0 else np.nan
    cov = s2 * np.linalg.inv(X.T @ X) if dof > 0 else np.full((2, 2), np.nan)
    from scipy import stats

    ea = -beta[1] * R / 1000
    ea_se = np.sqrt(cov[1, 1]) * R / 1000
    tq = stats.t.ppf(0.975, dof) if dof > 0 else np.nan
    return {"catalyst": name, "role": role, "n_temperatures": len(x), "t_min_c": min(t_c), "t_max_c": max(t_c),
            "ea_kj_mol": ea, "ea_se": ea_se, "ea_ci_low": ea - tq * ea_se, "ea_ci_high": ea + tq * ea_se,
            "ln_a": beta[0], "ln_a_se": np.sqrt(cov[0, 0]), "fit_intercept": beta[0], "fit_slope_k": beta[1],
            "cov_ii": cov[0, 0], "cov_is": cov[0, 1], "cov_ss": cov[1, 1], "fit_df": dof, "flags": ""}


def make_campaign(seed=0, *, n_cat=8, temps=(40.0, 50.0, 60.0, 70.0), plates_per_t=1, reps=4, noise=0.08,
                  true_tof60=None, true_ea=None, edge_bias=0.0, ref_tof60=30.0, ref_ea=60.0, fmt=96,
                  blank_rate60=0.05, blank_ea=80.0, bad_plate=None):
    """A seeded campaign: n_cat candidates + benchmark 'REF' + blanks, `reps` wells each per plate.

    edge_bias multiplies the rate of every sample well on the outer ring by (1 + edge_bias).
    bad_plate: name of a plate whose benchmark wells get the blank's rate (Z' < 0).
    """
    rng = np.random.default_rng(seed)
    cats = [f"C{i + 1:02d}" for i in range(n_cat)]
    tof60 = np.asarray(true_tof60 if true_tof60 is not None else np.exp(rng.uniform(np.log(5), np.log(200), n_cat)))
    ea = np.asarray(true_ea if true_ea is not None else rng.uniform(40, 90, n_cat))
    truth = pd.DataFrame({"catalyst": cats, "tof60": tof60, "ea": ea})
    sites, conc, vol = 0.1, 100.0, 500.0  # umol sites, mM, uL -> rate = tof * sites / vol * 1e3 mM/h
    rows = []
    plates = []
    grid = all_wells(fmt)
    for t in temps:
        for k in range(plates_per_t):
            pname = f"P{int(t)}-{k + 1}"
            plates.append({"plate": pname, "format": fmt, "n_rows": int(grid.row.max() + 1),
                           "n_cols": int(grid.col.max() + 1), "temperature_c": t, "run_date": f"2026-01-{len(plates) + 1:02d}",
                           "notes": pd.NA})
            content = [("sample", c) for c in cats for _ in range(reps)] + [("reference", "REF")] * reps + [("blank", None)] * reps
            pos = rng.permutation(len(grid))[: len(content)]
            for (role, cat), p in zip(content, pos):
                rows.append({"plate": pname, "well": grid.well[p], "row": int(grid.row[p]), "col": int(grid.col[p]),
                             "role": role, "catalyst": cat, "temperature_c": t})
    wells = pd.DataFrame(rows)
    inv = 1 / (wells["temperature_c"] + 273.15) - 1 / 333.15
    cat_tof = wells["catalyst"].map(dict(zip(cats, tof60))).astype(float)
    cat_ea = wells["catalyst"].map(dict(zip(cats, ea))).astype(float)
    cat_tof = cat_tof.where(wells["role"] != "reference", ref_tof60)
    cat_ea = cat_ea.where(wells["role"] != "reference", ref_ea)
    true_tof = cat_tof * np.exp(-cat_ea * 1000 / R * inv)
    blank_true = blank_rate60 * np.exp(-blank_ea * 1000 / R * inv)
    mult = np.exp(rng.normal(0, noise, len(wells)))
    edge = is_edge(wells["row"], wells["col"], fmt) & (wells["role"] == "sample")
    mult = mult * np.where(edge, 1 + edge_bias, 1.0)
    net = np.where(wells["role"] == "blank", 0.0, true_tof * sites / vol * 1e3)
    rate = (net + blank_true) * mult
    if bad_plate is not None:
        bad = (wells["plate"] == bad_plate) & (wells["role"] == "reference")
        rate = np.where(bad, blank_true * mult, rate)
    wells["rate_mM_per_h"] = rate
    wells["last_conversion_pct"] = np.minimum(rate * 2.0 / conc * 100, 100)
    wells["loading"] = np.where(wells["role"] == "blank", np.nan, sites)
    wells["loading_unit"] = np.where(wells["role"] == "blank", None, "umol")
    wells["substrate_conc_mM"] = conc
    wells["volume_uL"] = vol
    wells["flags"] = ""
    # blanks per plate
    bmask = wells["role"] == "blank"
    blanks = (wells[bmask].groupby(["plate", "temperature_c"])["rate_mM_per_h"]
              .agg(n_blanks="count", blank_rate_mM_per_h="mean", blank_sd_mM_per_h="std").reset_index())
    blanks["blank_se_mM_per_h"] = blanks["blank_sd_mM_per_h"] / np.sqrt(blanks["n_blanks"])
    blanks["blank_lod_mM_per_h"] = 3 * blanks["blank_sd_mM_per_h"]
    blanks["flags"] = ""
    w = wells.merge(blanks[["plate", "blank_rate_mM_per_h", "blank_se_mM_per_h"]], on="plate")
    w["net_rate_mM_per_h"] = w["rate_mM_per_h"] - w["blank_rate_mM_per_h"]
    w["sites_umol"] = w["loading"]
    w["tof_per_h"] = w["net_rate_mM_per_h"] * w["volume_uL"] * 1e-3 / w["sites_umol"]
    w["ton"] = w["tof_per_h"] * 2.0
    w["enhancement"] = w["rate_mM_per_h"] / w["blank_rate_mM_per_h"]
    # group table
    act = w[w["role"] != "blank"]
    g = act.groupby(["catalyst", "role", "temperature_c"]).agg(
        n_wells=("tof_per_h", "count"), rate_mM_per_h=("rate_mM_per_h", "mean"), rate_sd_mM_per_h=("rate_mM_per_h", "std"),
        tof_per_h=("tof_per_h", "mean"), tof_sd_per_h=("tof_per_h", "std"), ton=("ton", "mean"), ton_sd=("ton", "std"),
        enhancement=("enhancement", "mean"), enh_sd=("enhancement", "std"),
        plates=("plate", lambda s: ";".join(sorted(set(s))))).reset_index()
    from scipy import stats

    g["tof_se_per_h"] = g["tof_sd_per_h"] / np.sqrt(g["n_wells"])
    g["tof_df"] = g["n_wells"] - 1
    tq = stats.t.ppf(0.975, g["tof_df"])
    g["tof_ci_low"] = g["tof_per_h"] - tq * g["tof_se_per_h"]
    g["tof_ci_high"] = g["tof_per_h"] + tq * g["tof_se_per_h"]
    g["ton_se"] = g["ton_sd"] / np.sqrt(g["n_wells"])
    ese = g["enh_sd"] / np.sqrt(g["n_wells"])
    g["enhancement_ci_low"] = g["enhancement"] * np.exp(-tq * ese / g["enhancement"])
    g["enhancement_ci_high"] = g["enhancement"] * np.exp(tq * ese / g["enhancement"])
    g["loading"], g["loading_unit"], g["substrate_conc_mM"] = sites, "umol", conc
    g["is_standard"] = True
    g["flags"] = ""
    g = g.drop(columns=["ton_sd", "enh_sd"])
    from screenlab.schema import RATES

    for col in RATES.columns:          # the schema's other columns, empty (rank_candidates checks its rates table)
        if col.name not in g:
            g[col.name] = {"float": np.nan, "text": None, "int": 0, "bool": False}[col.dtype]
    from screenlab.schema import RATES

    for col in RATES.columns:          # the schema's other columns, empty (rank_candidates checks its rates table)
        if col.name not in g:
            g[col.name] = {"float": np.nan, "text": None, "int": 0, "bool": False}[col.dtype]
    arr_rows = [_fit_arrhenius(c, sub["role"].iloc[0], sub["temperature_c"].tolist(), sub["tof_per_h"].to_numpy(), None)
                for c, sub in g.groupby("catalyst")] if len(temps) >= 2 else []
    bt = blanks.groupby("temperature_c")["blank_rate_mM_per_h"].mean()
    if len(temps) >= 3:
        arr_rows.append(_fit_arrhenius("(uncatalysed)", "blank", bt.index.tolist(), bt.to_numpy(), None))
    arr = pd.DataFrame(arr_rows)
    catalysts = pd.DataFrame({"catalyst": cats + ["REF"], "name": cats + ["benchmark"],
                              "family": ["A" if i % 2 else "B" for i in range(n_cat)] + ["ref"]})
    data = CampaignData(manifest=Manifest(name="synthetic", readout_kind="product_conc"), catalysts=catalysts,
                        plates=pd.DataFrame(plates), wells=wells[["plate", "well", "row", "col", "role", "catalyst",
                                                                  "loading", "loading_unit", "substrate_conc_mM",
                                                                  "volume_uL", "temperature_c"]],
                        readings=pd.DataFrame(columns=["plate", "well", "analyte", "time_h", "value"]))
    kin = KineticsResult(amounts=pd.DataFrame(), wells=w, blanks=blanks, rates=g, arrhenius=arr, orders=pd.DataFrame(),
                       settings=AnalysisSettings())
    return data, kin, truth
