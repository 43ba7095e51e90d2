"""One initial rate per well, from its product-amount time course (main analyte).

:func:`well_rates` picks a method per well, all wells at once (vectorised; no loop over wells):

``initial_slope``
    at least ``settings.min_window_points`` readings (t = 0 included when present) from the
    start of the course up to the first reading above ``settings.conversion_window_pct``
    conversion: ordinary least-squares slope with intercept, SE from the fit, df = n - 2.
    The 20 % default is the usual initial-rate window (common practice, no source); within it
    a first-order course bends only a little (ln(1/(1-X))/X = 1.116 at X = 0.2).
``first_order``
    otherwise, with at least 3 readings: first-order saturation fit ``P = b1 (1 - exp(-k t))`` of
    the whole course; rate = b1 k (the fitted initial slope), SE by the delta method from the
    fit covariance, df = n - 2. When b1 is poorly determined - b1 above 1.5 x the theoretical
    maximum product (substrate x product_per_substrate), relative SE of b1 above 50 %, fewer
    than 4 readings, or a doubtful free fit - the plateau is fixed at the theoretical maximum
    (one-parameter fit in k, rate = k x [S]0 x product_per_substrate, df = n - 1) and the well
    is flagged ``fixed_plateau``.
``end_point``
    a single reading after t = 0 (or t = 0 plus one reading; with two readings after t = 0 and
    none at t = 0 the earlier one): rate = (product - product at t = 0, when read) / time;
    rate_se NaN, rate_df 0.
``no_data``
    no usable reading after t = 0.

Columns (one row per non-empty well, in the order of ``data.wells``): the well's
``plate, well, row, col, role, catalyst, temperature_c, loading, loading_unit,
substrate_conc_mM, volume_uL, <factor columns>``, then ``n_points`` (usable readings of the main
analyte), ``method``, ``rate_mM_per_h``, ``rate_se_mM_per_h``, ``rate_df``, ``k_per_h``
(first_order: the fitted k; otherwise rate / theoretical maximum product, the pseudo-first-order
constant the initial rate implies; NaN without substrate), ``last_time_h``, ``last_product_mM``,
``last_conversion_pct``, ``flags``; and in addition ``rate_ci_low_mM_per_h``,
``rate_ci_high_mM_per_h`` (Student t at ``settings.confidence``), ``window_points``,
``intercept_mM`` (initial_slope), ``plateau_mM`` (first_order), ``resid_sd_mM``, ``has_t0``,
``first_time_h`` and ``first_conversion_pct`` (first reading after t = 0).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from screenlab.kinetics import fit, models
from screenlab.kinetics.amounts import T0_TOLERANCE_H, product_amounts, well_index
from screenlab.model import CampaignData
from screenlab.settings import AnalysisSettings

#: flag code -> one plain sentence (gathered by screenlab.flags)
FLAGS: dict[str, str] = {
    "end_point_only": "Only one reading after t = 0: the rate is product / time (an average, no standard error).",
    "above_window": "The first reading after t = 0 is already above the conversion window, so the initial "
                    "rate is underestimated.",
    "induction": "Induction period: a line through the first half of the fitted readings is less than half "
                 "as steep as one through the second half, by more than 3 standard errors.",
    "deactivation": "Deactivation (or an equilibrium limit): the product gained after the initial segment is "
                    "less than half of what the initial rate slowed only by substrate depletion would give, "
                    "by more than 3 residual SDs.",
    "fixed_plateau": "The plateau was not determined by the data; it was fixed at the theoretical maximum "
                     "product (substrate x stoichiometry) and only k was fitted.",
    "fit_failed": "No rate could be fitted (readings at one time only, or k at the end of the searchable range).",
    "few_points": "Fewer than 4 readings carry the rate, so its standard error is rough.",
    "no_readings": "No usable reading after t = 0 for the main product.",
    "negative_rate": "The rate is negative (product decreases); usually noise around zero, or a drifting baseline.",
    "baseline_first_reading": "Absorbance without a reading at t = 0: the first reading was taken as zero product, "
                              "so product formed before it is missed.",
    "no_substrate": "No substrate concentration: conversion is unknown, so the conversion window was not applied.",
}

#: first-order fits whose plateau exceeds this multiple of the theoretical maximum are refitted
#: with the plateau fixed (common practice, no source)
PLATEAU_MAX_RATIO = 1.5
#: ... and so are those whose plateau has a relative standard error above this
PLATEAU_MAX_REL_SE = 0.5
#: induction / deactivation need a difference of this many standard errors (common practice, no source)
FLAG_SIGMAS = 3.0

_WELL_COLUMNS = ["plate", "well", "row", "col", "role", "catalyst", "temperature_c", "loading",
                 "loading_unit", "substrate_conc_mM", "volume_uL"]


#: method names; position = internal method code
_METHODS = ("no_data", "initial_slope", "first_order", "end_point")


def _flag_text(flags: dict[str, np.ndarray], n: int) -> np.ndarray:
    """Object array of str: the codes whose mask is true, in the order of ``flags``, joined with ``;``.

    The masks are packed into one integer per row; each distinct combination (a few) is joined once.
    """
    bits = np.zeros(n, dtype=np.int64)
    names = list(flags)
    for i, name in enumerate(names):        # a loop over flag codes, not wells
        bits |= np.asarray(flags[name], dtype=bool).astype(np.int64) << i
    combos, inv = np.unique(bits, return_inverse=True)
    text = np.array([";".join(nm for i, nm in enumerate(names) if int(c) >> i & 1) for c in combos]
                    + [""], dtype=object)   # the trailing "" keeps the array 1-d of str when empty
    return text[inv.ravel()] if n else np.zeros(0, dtype=object)


def _group_starts(g: np.ndarray, n_groups: int) -> np.ndarray:
    return np.searchsorted(g, np.arange(n_groups), side="left")


def _first_index(g: np.ndarray, mask: np.ndarray, n_groups: int) -> np.ndarray:
    """Index (into the sorted arrays) of the first True of ``mask`` per group, -1 if none."""
    out = np.full(n_groups, -1, dtype=np.int64)
    idx = np.flatnonzero(mask)
    if idx.size:
        gi = g[idx]                                       # g is sorted: first of each run
        new = np.ones(gi.size, dtype=bool)
        new[1:] = gi[1:] != gi[:-1]
        out[gi[new]] = idx[new]
    return out


def _take(values: np.ndarray, idx: np.ndarray) -> np.ndarray:
    safe = np.where(idx >= 0, idx, 0)
    got = values[safe] if values.size else np.zeros(idx.shape)
    return np.where(idx >= 0, got, np.nan)


def well_rates(data: CampaignData, settings: AnalysisSettings | None = None,
               amounts: pd.DataFrame | None = None) -> pd.DataFrame:
    """Initial rate of every non-empty well; see the module docstring for methods and columns."""
    if settings is None:
        settings = AnalysisSettings.from_mapping(data.manifest.analysis)
    if amounts is None:
        amounts = product_amounts(data)
    window = float(settings.conversion_window_pct)
    min_pts = max(int(settings.min_window_points), 2)
    pps = float(data.manifest.product_per_substrate)

    wells = data.wells
    role = wells["role"].astype("string")
    wells = wells[(role != "empty").fillna(True).to_numpy()].reset_index(drop=True)
    cols = _WELL_COLUMNS + [f for f in data.factor_names if f in wells.columns and f not in _WELL_COLUMNS]
    out = wells[cols].copy()
    G = len(out)
    theo = out["substrate_conc_mM"].to_numpy(dtype=float) * pps
    theo = np.where(np.isfinite(theo) & (theo > 0), theo, np.nan)

    # --- the main analyte's usable readings, sorted by (well, time) --------------------------
    # integer well codes once, on whole columns (no string group-by, merge or frame filter)
    is_main = (amounts["analyte"] == data.manifest.analyte_main).fillna(False).to_numpy(dtype=bool)
    code = np.where(is_main, well_index(amounts["plate"], amounts["well"], out["plate"], out["well"]), -1)
    t_all = amounts["time_h"].to_numpy(dtype=float)
    p_all = amounts["product_mM"].to_numpy(dtype=float)
    use = (code >= 0) & np.isfinite(t_all) & np.isfinite(p_all)
    first_reading_base = np.zeros(G, dtype=bool)
    if "baseline" in amounts.columns:
        fr = (amounts["baseline"].astype("string") == "first_reading").fillna(False).to_numpy(dtype=bool)
        first_reading_base[code[fr & (code >= 0)]] = True
    code, t, prod = code[use], t_all[use], p_all[use]
    # readings arrive sorted by well and time (CampaignData contract): sort only when they are not
    # (np.lexsort is stable, so skipping it on sorted input changes nothing)
    if code.size > 1 and not np.all((code[1:] > code[:-1]) | ((code[1:] == code[:-1]) & (t[1:] >= t[:-1]))):
        order = np.lexsort((t, code))
        code, t, prod = code[order], t[order], prod[order]
    g = code
    conv = prod / theo[g] * 100.0

    n_points = np.bincount(g, minlength=G)
    starts = _group_starts(g, G)
    is_t0 = t <= T0_TOLERANCE_H
    n_t0 = np.bincount(g, weights=is_t0, minlength=G)
    has_t0 = n_t0 > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        p_t0 = np.where(has_t0, np.bincount(g, weights=np.where(is_t0, prod, 0.0), minlength=G) / n_t0, np.nan)

    # leading run of readings at or below the window (unknown conversion counts as inside)
    above = np.nan_to_num(conv, nan=-np.inf) > window
    c = np.cumsum(above)
    c_before = c - above
    offset = c_before[starts[g]] if g.size else c_before
    in_win = (c - offset) == 0
    n_win = np.bincount(g, weights=in_win, minlength=G).astype(np.int64)

    i_first = _first_index(g, ~is_t0, G)                  # first reading after t = 0
    first_time = _take(t, i_first)
    first_prod = _take(prod, i_first)
    first_conv = _take(conv, i_first)
    n_pos = np.bincount(g, weights=~is_t0, minlength=G).astype(np.int64)
    i_last = np.where(n_points > 0, starts + n_points - 1, -1)
    last_time = _take(t, i_last)
    last_prod = _take(prod, i_last)
    last_conv = _take(conv, i_last)

    # --- method per well -------------------------------------------------------------------
    m_slope = (n_win >= min_pts) & (n_pos >= 1)
    m_first = ~m_slope & (n_points >= 3) & (n_pos >= 2)
    m_end = ~m_slope & ~m_first & (n_pos >= 1)
    m_fit = m_slope | m_first
    method = np.select([m_slope, m_first, m_end], list(_METHODS[1:]), default=_METHODS[0]).astype(object)

    rate = np.full(G, np.nan)
    rate_se = np.full(G, np.nan)
    rate_df = np.zeros(G, dtype=np.int64)
    k_fit = np.full(G, np.nan)
    intercept = np.full(G, np.nan)
    plateau = np.full(G, np.nan)
    resid_sd = np.full(G, np.nan)
    failed = np.zeros(G, dtype=bool)
    fixed_flag = np.zeros(G, dtype=bool)
    used_pts = np.zeros(G, dtype=np.int64)
    # end of the initial segment (for the deactivation check) and the fitted set (induction)
    t_end_seg = np.full(G, np.nan)
    in_fit = np.zeros(g.shape, dtype=bool)

    # initial slope
    sel = in_win & m_slope[g]
    if sel.any():
        lf = fit.fit_lines(t[sel], prod[sel], g[sel], G)
        ok = m_slope & np.isfinite(lf.slope)
        rate[ok], rate_se[ok], rate_df[ok] = lf.slope[ok], lf.slope_se[ok], lf.df[ok]
        intercept[ok], resid_sd[ok] = lf.intercept[ok], lf.resid_sd[ok]
        used_pts[m_slope] = n_win[m_slope]
        failed |= m_slope & ~ok
        seg_end = np.full(G, -np.inf)
        np.maximum.at(seg_end, g[sel], t[sel])
        t_end_seg[ok] = seg_end[ok]
        in_fit |= sel

    # first-order fit of the whole course
    sel = m_first[g]
    if sel.any():
        b1_start, k_start = models.start_guess(t[sel], prod[sel], g[sel], G)
        free = fit.fit_first_order(t[sel], prod[sel], g[sel], G, k_start=k_start)
        with np.errstate(invalid="ignore", divide="ignore"):
            poor = ((n_points < 4) | (free.status != fit.OK)
                    | ~(free.b1 <= PLATEAU_MAX_RATIO * theo) | ~(free.b1_se <= PLATEAU_MAX_REL_SE * np.abs(free.b1)))
        refit = m_first & poor & np.isfinite(theo)
        keep_free = m_first & ~refit & (free.status == fit.OK)
        rate[keep_free], rate_se[keep_free] = free.rate[keep_free], free.rate_se[keep_free]
        rate_df[keep_free], k_fit[keep_free] = free.df[keep_free], free.k[keep_free]
        plateau[keep_free], resid_sd[keep_free] = free.b1[keep_free], free.resid_sd[keep_free]
        failed |= m_first & ~refit & ~keep_free
        if refit.any():
            sel2 = sel & refit[g]
            fx = fit.fit_first_order(t[sel2], prod[sel2], g[sel2], G, plateau=np.where(refit, theo, np.nan))
            good = refit & (fx.status == fit.OK)
            rate[good], rate_se[good], rate_df[good] = fx.rate[good], fx.rate_se[good], fx.df[good]
            k_fit[good], plateau[good], resid_sd[good] = fx.k[good], fx.b1[good], fx.resid_sd[good]
            fixed_flag |= good
            failed |= refit & ~good
        used_pts[m_first] = n_points[m_first]
        t_end_seg[m_first] = first_time[m_first]
        in_fit |= sel

    # end point: earliest reading after t = 0, net of the t = 0 reading when there is one
    if m_end.any():
        net = first_prod - np.where(has_t0, p_t0, 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            rate[m_end] = (net / first_time)[m_end]
        used_pts[m_end] = 1
    rate[failed] = np.nan
    rate_se[failed] = np.nan
    rate_df[failed] = 0

    with np.errstate(invalid="ignore", divide="ignore"):
        k_out = np.where(m_first, k_fit, rate / theo)
        k_out = np.where(failed, np.nan, k_out)
        # one t quantile per distinct df (a handful), not per well
        df_u, df_inv = np.unique(np.where(rate_df > 0, rate_df, 1), return_inverse=True)
        tq = stats.t.ppf(0.5 + settings.confidence / 2.0, df_u)[df_inv.ravel()]
        half = np.where((rate_df > 0) & np.isfinite(rate_se), tq * rate_se, np.nan)

    induction = _induction(g, t, prod, in_fit, G)
    deactivation = _deactivation(rate, intercept, theo, t_end_seg, last_time, last_prod,
                                 resid_sd, m_fit)

    flags = {
        "no_readings": ~(m_fit | m_end),
        "end_point_only": m_end,
        "above_window": np.nan_to_num(first_conv, nan=-np.inf) > window,
        "induction": induction,
        "deactivation": deactivation,
        "fixed_plateau": fixed_flag,
        "fit_failed": failed,
        "few_points": m_fit & (used_pts < 4) & ~failed,
        "negative_rate": np.nan_to_num(rate, nan=0.0) < 0,
        "baseline_first_reading": first_reading_base,
        "no_substrate": ~np.isfinite(theo) & (n_points > 0),
    }
    flag_str = _flag_text(flags, G)

    out["n_points"] = n_points.astype(np.int64)
    out["method"] = pd.Series(method, dtype="string")
    out["rate_mM_per_h"] = rate
    out["rate_se_mM_per_h"] = rate_se
    out["rate_df"] = rate_df
    out["k_per_h"] = k_out
    out["last_time_h"] = last_time
    out["last_product_mM"] = last_prod
    out["last_conversion_pct"] = last_conv
    out["flags"] = flag_str
    out["rate_ci_low_mM_per_h"] = rate - half
    out["rate_ci_high_mM_per_h"] = rate + half
    out["window_points"] = np.where(m_slope, n_win, 0)
    out["intercept_mM"] = intercept
    out["plateau_mM"] = plateau
    out["resid_sd_mM"] = resid_sd
    out["has_t0"] = has_t0
    out["first_time_h"] = first_time
    out["first_conversion_pct"] = first_conv
    return out


def _induction(g, t, prod, in_fit, G) -> np.ndarray:
    """Straight lines through the first and the second half of the fitted readings (sharing the
    middle reading): flagged when the early slope is below half the late slope and the
    difference exceeds FLAG_SIGMAS standard errors (pooled residual SD of the two lines)."""
    gi, ti, pi = g[in_fit], t[in_fit], prod[in_fit]
    if gi.size == 0:
        return np.zeros(G, dtype=bool)
    n = np.bincount(gi, minlength=G)
    starts = _group_starts(gi, G)
    pos = np.arange(gi.size) - starts[gi]
    mid = (n // 2)[gi]
    one, two = pos <= mid, pos >= mid
    codes = np.concatenate([2 * gi[one], 2 * gi[two] + 1])
    lf = fit.fit_lines(np.concatenate([ti[one], ti[two]]), np.concatenate([pi[one], pi[two]]), codes, 2 * G)
    early, late = lf.slope[0::2], lf.slope[1::2]
    df = (lf.n[0::2] - 2) + (lf.n[1::2] - 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        rss = np.nan_to_num(lf.rss[0::2]) + np.nan_to_num(lf.rss[1::2])
        s2 = rss / df
        se = np.sqrt(s2 / lf.sxx[0::2] + s2 / lf.sxx[1::2])
        hit = (n >= 4) & (df > 0) & (late > 0) & (early < 0.5 * late) & ((late - early) > FLAG_SIGMAS * se)
    return np.asarray(hit, dtype=bool)


def _deactivation(rate, intercept, theo, t_end, last_time, last_prod, resid_sd, fitted) -> np.ndarray:
    """Product gained from the end of the initial segment to the last reading < 0.5 x the gain that
    the initial rate, slowed only by substrate depletion (first order, plateau = theoretical
    maximum; a straight line when that is unknown), predicts - and short of it by more than
    FLAG_SIGMAS x sqrt(2) residual SDs."""
    a0 = np.where(np.isfinite(intercept), intercept, 0.0)
    with np.errstate(invalid="ignore", over="ignore"):
        pred_end = models.depletion_course(t_end, a0, rate, theo)
        pred_last = models.depletion_course(last_time, a0, rate, theo)
        pred_gain = pred_last - pred_end
        obs_gain = last_prod - pred_end
        hit = (fitted & (last_time > t_end) & (rate > 0)
               & (pred_gain > 0) & (obs_gain < 0.5 * pred_gain)
               & ((pred_gain - obs_gain) > FLAG_SIGMAS * np.sqrt(2.0) * resid_sd))
    return np.asarray(np.nan_to_num(hit, nan=0) > 0, dtype=bool)
