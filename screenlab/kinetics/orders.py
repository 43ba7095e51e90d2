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

from screenlab import _groups as grp
from screenlab.kinetics.sites import join_flags
from screenlab.kinetics.turnover import _infer_factors, _role, _tkey
from screenlab.uncertainty import t_quantile
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


def _group_ols(gid: np.ndarray, x: np.ndarray, y: np.ndarray, n_groups: int):
    """Per-group OLS slope of y on x (rows tagged by ``gid``): slope, SE, df = n - 2, n.

    Two-pass (centred) sums with np.bincount, so every group is fitted at once. SE is NaN where
    df <= 0; the slope is NaN where x does not vary within the group.
    """
    w = np.bincount(gid, minlength=n_groups).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = grp.group_sum(gid, n_groups, x) / w
        my = grp.group_sum(gid, n_groups, y) / w
        dx = x - mx[gid]
        dy = y - my[gid]
        sxx = grp.group_sum(gid, n_groups, dx * dx)
        sxy = grp.group_sum(gid, n_groups, dx * dy)
        slope = np.where(sxx > 0, sxy / np.where(sxx > 0, sxx, 1.0), np.nan)
        res = dy - slope[gid] * dx
        rss = grp.group_sum(gid, n_groups, res * res)
        df = w - 2
        se = np.where(df > 0, np.sqrt(rss / np.where(df > 0, df, 1.0) / sxx), np.nan)
    return slope, se, df, w


def _fixed_text(first: pd.DataFrame, fixed: list[str]) -> np.ndarray:
    """``"name=value; ..."`` of the fixed conditions of each series (missing values left out)."""
    parts = []
    for k in fixed:
        col = first[k]
        txt = np.array([f"{k}={v}" for v in col.to_numpy(dtype=object)], dtype=object)
        parts.append(np.where(col.isna().to_numpy(), "", txt))
    if not parts:
        return np.full(len(first), "", dtype=object)
    stacked = np.column_stack(parts)
    return np.array(["; ".join(p for p in row if p) for row in stacked], dtype=object)


#: :func:`order_points`: one row per catalysed well of a series of :func:`apparent_orders`
POINT_COLUMNS = ["series", "catalyst", "temperature_c", "variable", "plate", "well", "level", "level_unit",
                 "net_rate_mM_per_h", "tof_per_h", "in_fit"]


def apparent_orders(turnover: pd.DataFrame, settings: AnalysisSettings | None = None,
                    factor_names=None) -> pd.DataFrame:
    """Orders in substrate and in catalyst loading; columns :data:`COLUMNS`.

    Every series is fitted at once (group ids and np.bincount sums), so the cost grows with the
    number of wells, not with the number of series times pandas overhead.
    """
    return _orders(turnover, settings, factor_names, points=False)[0]


def order_points(turnover: pd.DataFrame, settings: AnalysisSettings | None = None,
                 factor_names=None) -> pd.DataFrame:
    """The wells behind each series of :func:`apparent_orders` (columns :data:`POINT_COLUMNS`):
    ``series`` is the row of the orders table, ``level`` the substrate concentration (mM) or the
    loading (in ``level_unit``), ``in_fit`` whether the well entered the log-log fit (a net rate or
    a level <= 0 cannot). The points a plot of ln rate on ln level shows, the fitted slope through
    the ``in_fit`` ones being the order."""
    return _orders(turnover, settings, factor_names, points=True)[1]


def _orders(turnover: pd.DataFrame, settings: AnalysisSettings | None, factor_names, *, points: bool):
    """``(orders, points)``: :func:`apparent_orders` and, with ``points``, :func:`order_points`
    (else None)."""
    settings = settings or AnalysisSettings()
    no_points = pd.DataFrame(columns=POINT_COLUMNS) if points else None
    factors = list(_infer_factors(turnover, factor_names))
    role = _role(turnover)
    t = turnover[np.isin(role, ["sample", "reference"])]
    t = t[np.isfinite(pd.to_numeric(t["rate_mM_per_h"], errors="coerce").to_numpy(float))].copy()
    if t.empty:
        return pd.DataFrame(columns=COLUMNS), no_points
    t["temperature_c"] = _tkey(t["temperature_c"])
    net = pd.to_numeric(t["net_rate_mM_per_h"], errors="coerce").to_numpy(float)
    tof = pd.to_numeric(t["tof_per_h"], errors="coerce").to_numpy(float)
    series = {
        "substrate_conc": ("substrate_conc_mM", ["loading", "loading_unit", *factors]),
        "loading": ("loading", ["loading_unit", "substrate_conc_mM", *factors]),
    }
    frames, point_frames, n_before = [], [], 0
    for variable, (col, fixed) in series.items():
        keys = ["catalyst", "temperature_c", *fixed]
        gid_s = t.groupby(keys, dropna=False, sort=True, observed=True).ngroup()
        gid = gid_s.to_numpy(np.int64)
        n_groups = int(gid.max()) + 1 if gid.size else 0
        lv = pd.to_numeric(t[col], errors="coerce").to_numpy(float)
        pos = np.isfinite(lv) & (lv > 0)
        ok = pos & np.isfinite(net) & (net > 0)
        n_levels = grp.count_distinct(gid[ok], lv[ok], n_groups)
        keep = (grp.count_distinct(gid[pos], lv[pos], n_groups) >= 2) & (n_levels >= 2)
        if not keep.any():
            continue
        nonpos = grp.group_sum(gid, n_groups, (np.isfinite(net) & (net <= 0)).astype(float)) > 0
        go = gid[ok]
        order, se, df, n_ok = _group_ols(go, np.log(lv[ok]), np.log(net[ok]), n_groups)
        q = np.asarray(t_quantile(settings.confidence, np.where(df > 0, df, np.nan)), dtype=float)
        lo = np.full(n_groups, np.inf)
        hi = np.full(n_groups, -np.inf)
        np.minimum.at(lo, go, lv[ok])
        np.maximum.at(hi, go, lv[ok])
        first = t.iloc[np.unique(gid, return_index=True)[1]]        # one row per series, in gid order
        out = pd.DataFrame({
            "catalyst": first["catalyst"].to_numpy(dtype=object), "temperature_c": first["temperature_c"].to_numpy(float),
            "variable": variable, "n_levels": n_levels, "order": order, "order_se": se,
            "order_ci_low": order - q * se, "order_ci_high": order + q * se, "n_wells": n_ok.astype(np.int64),
            "level_min": lo, "level_max": hi, "fixed": "",
            "order_df": df, "tof_slope": np.nan, "tof_slope_se": np.nan, "tof_slope_ci_low": np.nan,
            "tof_slope_ci_high": np.nan})
        flag_cols = {"nonpositive_rates": nonpos, "no_replicates": df <= 0}
        if variable == "loading":
            okt = ok & np.isfinite(tof) & (tof > 0)
            fit_t = grp.count_distinct(gid[okt], lv[okt], n_groups) >= 2
            gt = gid[okt]
            s, sse, sdf, _ = _group_ols(gt, np.log(lv[okt]), np.log(tof[okt]), n_groups)
            sq = np.asarray(t_quantile(settings.confidence, np.where(sdf > 0, sdf, np.nan)), dtype=float)
            out["tof_slope"] = np.where(fit_t, s, np.nan)
            out["tof_slope_se"] = np.where(fit_t, sse, np.nan)
            out["tof_slope_ci_low"] = np.where(fit_t, s - sq * sse, np.nan)
            out["tof_slope_ci_high"] = np.where(fit_t, s + sq * sse, np.nan)
            flag_cols["tof_falls_with_loading"] = fit_t & np.isfinite(sse) & (s + sq * sse < 0)
        codes = np.full(n_groups, "", dtype=object)
        for code, on in flag_cols.items():                           # a loop over flag codes
            codes = np.where(on, np.where(codes == "", code, codes + ";" + code), codes)
        out["flags"] = codes
        out = out[keep].copy()
        out["fixed"] = _fixed_text(first[keep], fixed)
        frames.append(out)
        if points:
            row = n_before + np.cumsum(keep) - 1                       # a kept series' row in the table
            on = keep[gid]
            unit = (t["loading_unit"].astype("string").fillna("").to_numpy(dtype=object)[on]
                    if variable == "loading" else "mM")
            point_frames.append(pd.DataFrame({
                "series": row[gid[on]].astype(np.int64), "catalyst": t["catalyst"].to_numpy(dtype=object)[on],
                "temperature_c": t["temperature_c"].to_numpy(float)[on], "variable": variable,
                "plate": t["plate"].to_numpy(dtype=object)[on], "well": t["well"].to_numpy(dtype=object)[on],
                "level": lv[on], "level_unit": unit, "net_rate_mM_per_h": net[on], "tof_per_h": tof[on],
                "in_fit": ok[on]}))
        n_before += int(keep.sum())
    if not frames:
        return pd.DataFrame(columns=COLUMNS), no_points
    out = pd.concat(frames, ignore_index=True)[COLUMNS]
    out["flags"] = join_flags(out["flags"], {}, index=out.index).to_numpy(dtype=object)
    out["n_levels"] = out["n_levels"].astype(np.int64)
    if not points:
        return out, None
    pts = pd.concat(point_frames, ignore_index=True)[POINT_COLUMNS]
    return out, pts.sort_values(["series", "level", "plate", "well"], kind="stable", ignore_index=True)
