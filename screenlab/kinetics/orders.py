"""Apparent reaction orders at fixed temperature, and the loading (Madon-Boudart) check.

For each catalyst x temperature, wells are put in series where one variable changes and every
other condition (loading or substrate concentration, loading unit, factor columns) is fixed:

* ``substrate_conc``: order = slope of ln(net rate, mM/h) on ln(substrate_conc_mM);
* ``loading``: order = slope of ln(net rate per well volume, mM/h) on ln(loading), i.e. the order in
  catalyst (1 when every site works at the same rate).

Each well is one point (ordinary least squares); SE from the residual scatter and a Student t
interval with df = n_wells - 2 (no interval when df = 0, flag ``no_replicates``). Wells with
net rate <= 0 cannot enter a log fit and are left out (flag ``nonpositive_rates``).

For loading series also the slope of ln TOF on ln loading is fitted (``tof_slope``): when its whole
interval lies below zero the TOF falls as loading rises (flag ``tof_falls_with_loading``). A
site-normalised rate should not depend on the number of sites when transport does not limit
(Madon & Boudart, Ind. Eng. Chem. Fundam. 1982, 21, 438), so this points to mass-transfer limits
or to sites that are not all equally active.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.kinetics.sites import join_flags
from screenlab.kinetics.turnover import _infer_factors, _role, _tkey, t_quantile
from screenlab.settings import AnalysisSettings

FLAGS: dict[str, str] = {
    "no_replicates": "Exactly two points: the order is estimated without a standard error or interval.",
    "nonpositive_rates": "Some wells had a net rate <= 0 and were left out of the log-log fit.",
    "tof_falls_with_loading": "TOF falls significantly as the loading rises: transport limits or unequal sites "
                              "(Madon-Boudart idea).",
}

COLUMNS = ["catalyst", "temperature_c", "variable", "n_levels", "order", "order_se", "order_ci_low",
           "order_ci_high", "flags", "n_wells", "level_min", "level_max", "fixed", "tof_slope", "tof_slope_se",
           "tof_slope_ci_low", "tof_slope_ci_high", "order_df"]


def _ols(x: np.ndarray, y: np.ndarray):
    n = len(x)
    X = np.column_stack([np.ones(n), x])
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    df = n - 2
    if df <= 0:
        return float(beta[1]), np.nan, df
    res = y - X @ beta
    s2 = float(res @ res) / df
    cov = np.linalg.inv(X.T @ X) * s2
    return float(beta[1]), float(np.sqrt(cov[1, 1])), df


def apparent_orders(turnover: pd.DataFrame, settings: AnalysisSettings | None = None,
                    factor_names=None) -> pd.DataFrame:
    """Orders in substrate and in catalyst loading; columns :data:`COLUMNS`."""
    settings = settings or AnalysisSettings()
    factors = list(_infer_factors(turnover, factor_names))
    role = _role(turnover)
    t = turnover[np.isin(role, ["sample", "reference"])].copy()
    t = t[np.isfinite(pd.to_numeric(t["rate_mM_per_h"], errors="coerce").to_numpy(float))]
    rows = []
    if t.empty:
        return pd.DataFrame(columns=COLUMNS)
    t["temperature_c"] = _tkey(t["temperature_c"])
    series = {
        "substrate_conc": ("substrate_conc_mM", ["loading", "loading_unit", *factors]),
        "loading": ("loading", ["loading_unit", "substrate_conc_mM", *factors]),
    }
    for variable, (col, fixed) in series.items():
        keys = ["catalyst", "temperature_c", *fixed]
        for key, g in t.groupby(keys, dropna=False, sort=True):     # a loop over series, not wells
            lv = pd.to_numeric(g[col], errors="coerce").to_numpy(float)
            if len(np.unique(lv[np.isfinite(lv) & (lv > 0)])) < 2:
                continue
            net = pd.to_numeric(g["net_rate_mM_per_h"], errors="coerce").to_numpy(float)
            ok = np.isfinite(lv) & (lv > 0) & np.isfinite(net) & (net > 0)
            flags = {"nonpositive_rates": bool((np.isfinite(net) & (net <= 0)).any())}
            n_levels = len(np.unique(lv[ok]))
            if n_levels < 2:
                continue
            x = np.log(lv[ok])
            order, se, df = _ols(x, np.log(net[ok]))
            q = float(t_quantile(settings.confidence, df)) if df > 0 else np.nan
            flags["no_replicates"] = df <= 0
            r = dict(catalyst=key[0], temperature_c=float(key[1]), variable=variable, n_levels=n_levels,
                     order=order, order_se=se, order_ci_low=order - q * se, order_ci_high=order + q * se,
                     n_wells=int(ok.sum()), level_min=float(lv[ok].min()), level_max=float(lv[ok].max()),
                     fixed="; ".join(f"{k}={v}" for k, v in zip(fixed, key[2:]) if not pd.isna(v)),
                     order_df=float(df), tof_slope=np.nan, tof_slope_se=np.nan, tof_slope_ci_low=np.nan,
                     tof_slope_ci_high=np.nan)
            if variable == "loading":
                tof = pd.to_numeric(g["tof_per_h"], errors="coerce").to_numpy(float)
                okt = ok & np.isfinite(tof) & (tof > 0)
                if len(np.unique(lv[okt])) >= 2:
                    s, sse, sdf = _ols(np.log(lv[okt]), np.log(tof[okt]))
                    sq = float(t_quantile(settings.confidence, sdf)) if sdf > 0 else np.nan
                    r.update(tof_slope=s, tof_slope_se=sse, tof_slope_ci_low=s - sq * sse,
                             tof_slope_ci_high=s + sq * sse)
                    flags["tof_falls_with_loading"] = bool(np.isfinite(sse) and s + sq * sse < 0)
            r["flags"] = ";".join(c for c, on in flags.items() if on)
            rows.append(r)
    out = pd.DataFrame(rows, columns=COLUMNS)
    if len(out):
        out["flags"] = join_flags(out["flags"], {}, index=out.index).to_numpy(dtype=object)
        out["n_levels"] = out["n_levels"].astype(np.int64)
    return out
