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
from screenlab.kinetics.sites import frame_of, text_array
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
    words, codes = _flag_codes(flags, n)
    return words[codes] if n else np.zeros(0, dtype=object)


def _flag_codes(flags: dict[str, np.ndarray], n: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_flag_text` as distinct texts (object array of str) and one code per row into them."""
    bits = np.zeros(n, dtype=np.int64)
    names = list(flags)
    for i, name in enumerate(names):        # a loop over flag codes, not wells
        bits |= np.asarray(flags[name], dtype=bool).astype(np.int64) << i
    combos, inv = np.unique(bits, return_inverse=True)
    text = np.array([";".join(nm for i, nm in enumerate(names) if int(c) >> i & 1) for c in combos]
                    + [""], dtype=object)   # the trailing "" keeps the array 1-d of str when empty
    return text, inv.ravel()


def _group_starts(g: np.ndarray, n_groups: int) -> np.ndarray:
    return np.searchsorted(g, np.arange(n_groups), side="left")


def _take(values: np.ndarray, idx: np.ndarray) -> np.ndarray:
    safe = np.where(idx >= 0, idx, 0)
    got = values[safe] if values.size else np.zeros(idx.shape)
    return np.where(idx >= 0, got, np.nan)


def _first_order_fit(wells: np.ndarray, t, y, g, G: int, plateau=None, k_start=None) -> fit.FirstOrderFit:
    """:func:`screenlab.kinetics.fit.fit_first_order` of the readings of ``wells`` (the sorted
    well codes in ``g``, every one with readings), fitted with those wells numbered 0..n-1 (what
    the fitter does itself for groups without points) and spread back to all G wells: wells not
    fitted get NaN estimates, 0 df and status TOO_FEW. ``plateau`` / ``k_start``: per well (G)."""
    local = np.full(G, -1, dtype=np.int64)
    local[wells] = np.arange(wells.size)
    sub = fit.fit_first_order(t, y, local[g], int(wells.size),
                              plateau=None if plateau is None else np.asarray(plateau, dtype=float)[wells],
                              k_start=None if k_start is None else np.asarray(k_start, dtype=float)[wells])
    full = {}
    for name, v in vars(sub).items():
        if v.dtype == bool:
            arr = np.zeros(G, dtype=bool)
        elif name == "status":
            arr = np.full(G, fit.TOO_FEW, dtype=v.dtype)
        elif np.issubdtype(v.dtype, np.integer):
            arr = np.zeros(G, dtype=v.dtype)
        else:
            arr = np.full(G, np.nan)
        arr[wells] = v
        full[name] = arr
    return fit.FirstOrderFit(**full)


def _order_by_well(code: np.ndarray, t: np.ndarray) -> np.ndarray | None:
    """None when every well's readings form one run sorted by time (the order readings come in),
    else the stable order by (well code, time)."""
    if code.size <= 1:
        return None
    same = code[1:] == code[:-1]
    if np.all(~same | (t[1:] >= t[:-1])):
        run_code = code[np.flatnonzero(np.concatenate(([True], ~same)))]
        if np.bincount(run_code).max() <= 1:               # no well split over two runs
            return None
    return np.lexsort((t, code))


def _all_missing(values: pd.Series) -> bool:
    """Whether every value is missing (read from the Arrow null count when there is one)."""
    pa_arr = getattr(values.array, "_pa_array", None)
    if pa_arr is not None:
        return pa_arr.null_count == len(pa_arr)
    return bool(values.isna().all())


def _equals(values: pd.Series, word: str) -> np.ndarray:
    """Boolean array: which rows equal ``word`` (missing values do not)."""
    pa_arr = getattr(values.array, "_pa_array", None)
    if pa_arr is not None:
        import pyarrow as pa
        import pyarrow.compute as pc
        if pa.types.is_string(pa_arr.type) or pa.types.is_large_string(pa_arr.type):
            eq = pc.fill_null(pc.equal(pa_arr, pa.scalar(word, pa_arr.type)), False)
            return eq.to_numpy(zero_copy_only=False).astype(bool, copy=False)
    return (values.astype("string") == word).fillna(False).to_numpy(dtype=bool)


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
    # non-empty wells by position (no copy of the wide wells frame until the end)
    role_codes, role_words = pd.factorize(wells["role"])
    not_empty = np.array([str(w) != "empty" for w in role_words] + [True], dtype=bool)
    rows = np.flatnonzero(not_empty[np.asarray(role_codes, dtype=np.int64)])
    cols = _WELL_COLUMNS + [f for f in data.factor_names if f in wells.columns and f not in _WELL_COLUMNS]
    G = len(rows)
    theo = wells["substrate_conc_mM"].to_numpy(dtype=float)[rows] * pps
    theo = np.where(np.isfinite(theo) & (theo > 0), theo, np.nan)

    # --- the main analyte's usable readings, each well's in one run sorted by time ------------
    # integer well codes once, on whole columns (no string group-by, merge or frame filter)
    is_main = _equals(amounts["analyte"], data.manifest.analyte_main)
    code = np.where(is_main, well_index(amounts["plate"], amounts["well"], wells["plate"].iloc[rows],
                                        wells["well"].iloc[rows]), -1)
    t_all = amounts["time_h"].to_numpy(dtype=float)
    p_all = amounts["product_mM"].to_numpy(dtype=float)
    use = (code >= 0) & np.isfinite(t_all) & np.isfinite(p_all)
    first_reading_base = np.zeros(G, dtype=bool)
    if "baseline" in amounts.columns and not _all_missing(amounts["baseline"]):
        fr = _equals(amounts["baseline"], "first_reading")
        first_reading_base[code[fr & (code >= 0)]] = True
    if use.all():
        t, prod = t_all, p_all
    else:
        code, t, prod = code[use], t_all[use], p_all[use]
    # readings arrive sorted by plate, well, analyte and time (CampaignData contract), so each
    # well's readings are one time-sorted run already; otherwise a stable sort by (well, time).
    # Only the order within a well matters below (every group sum runs over a well's readings
    # in time order), not the order of the wells.
    order = _order_by_well(code, t)
    if order is not None:
        code, t, prod = code[order], t[order], prod[order]
    g = code
    conv = prod / theo[g] * 100.0

    n_points = np.bincount(g, minlength=G)
    run_start = np.ones(g.size, dtype=bool)
    run_start[1:] = g[1:] != g[:-1]
    starts = np.zeros(G, dtype=np.int64)                  # first reading of each well (0 for none)
    starts[g[run_start]] = np.flatnonzero(run_start)
    pos = np.arange(g.size) - starts[g]                   # place of each reading in its well
    is_t0 = t <= T0_TOLERANCE_H
    g_t0 = g[is_t0]
    n_t0_int = np.bincount(g_t0, minlength=G)
    n_t0 = n_t0_int.astype(float)
    has_t0 = n_t0 > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        p_t0 = np.where(has_t0, np.bincount(g_t0, weights=prod[is_t0], minlength=G) / n_t0, np.nan)

    # leading run of readings at or below the window (unknown conversion counts as inside)
    with np.errstate(invalid="ignore"):
        above = conv > window                             # NaN (no substrate) is not above
    # the window ends at each well's first reading above it (wells are contiguous, time-sorted)
    first_above = starts + n_points
    ia = np.flatnonzero(above)
    if ia.size:
        ga = g[ia]
        lead = np.ones(ia.size, dtype=bool)
        lead[1:] = ga[1:] != ga[:-1]
        first_above[ga[lead]] = ia[lead]
    n_win = (first_above - starts).astype(np.int64)
    in_win = pos < n_win[g]

    # first reading after t = 0: each well's readings are time-sorted, so its t = 0 readings lead
    i_first = np.where(n_t0_int < n_points, starts + n_t0_int, -1)
    first_time = _take(t, i_first)
    first_prod = _take(prod, i_first)
    first_conv = _take(conv, i_first)
    n_pos = n_points - n_t0_int                          # readings after t = 0
    i_last = np.where(n_points > 0, starts + n_points - 1, -1)
    last_time = _take(t, i_last)
    last_prod = _take(prod, i_last)
    last_conv = _take(conv, i_last)
    # the per-reading temporaries are done with: free them before the fits (a smaller working set)
    del conv, above, ia, is_t0, g_t0, use

    # --- method per well -------------------------------------------------------------------
    m_slope = (n_win >= min_pts) & (n_pos >= 1)
    m_first = ~m_slope & (n_points >= 3) & (n_pos >= 2)
    m_end = ~m_slope & ~m_first & (n_pos >= 1)
    m_fit = m_slope | m_first
    method_code = np.select([m_slope, m_first, m_end], [1, 2, 3], default=0)   # into _METHODS

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
    n_fit = np.zeros(G, dtype=np.int64)         # fitted readings per well: a leading run of each

    # initial slope
    sel = np.flatnonzero(in_win & m_slope[g])
    del in_win
    if sel.size:
        lf = fit.fit_lines(t[sel], prod[sel], g[sel], G)
        ok = m_slope & np.isfinite(lf.slope)
        rate[ok], rate_se[ok], rate_df[ok] = lf.slope[ok], lf.slope_se[ok], lf.df[ok]
        intercept[ok], resid_sd[ok] = lf.intercept[ok], lf.resid_sd[ok]
        used_pts[m_slope] = n_win[m_slope]
        failed |= m_slope & ~ok
        # the window is a leading run of the time-sorted course: its end is its last reading
        t_end_seg[ok] = t[starts[ok] + n_win[ok] - 1]
        n_fit[m_slope] = n_win[m_slope]

    # first-order fit of the whole course
    sel = np.flatnonzero(m_first[g])
    if sel.size:
        t_s, p_s, g_s = t[sel], prod[sel], g[sel]
        b1_start, k_start = models.start_guess(t_s, p_s, g_s, G)
        free = _first_order_fit(np.flatnonzero(m_first), t_s, p_s, g_s, G, k_start=k_start)
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
            sel2 = refit[g_s]
            fx = _first_order_fit(np.flatnonzero(refit), t_s[sel2], p_s[sel2], g_s[sel2], G, plateau=theo)
            good = refit & (fx.status == fit.OK)
            rate[good], rate_se[good], rate_df[good] = fx.rate[good], fx.rate_se[good], fx.df[good]
            k_fit[good], plateau[good], resid_sd[good] = fx.k[good], fx.b1[good], fx.resid_sd[good]
            fixed_flag |= good
            failed |= refit & ~good
        used_pts[m_first] = n_points[m_first]
        t_end_seg[m_first] = first_time[m_first]
        n_fit[m_first] = n_points[m_first]

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

    induction = _induction(g, t, prod, None, G, pos, n_fit=n_fit)
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

    flag_words, flag_codes = _flag_codes(flags, G)
    return frame_of(wells, cols, None if G == len(wells) else rows, {
        "n_points": n_points.astype(np.int64),
        "method": pd.array(np.array(_METHODS, dtype=object), dtype="string").take(method_code),
        "rate_mM_per_h": rate,
        "rate_se_mM_per_h": rate_se,
        "rate_df": rate_df,
        "k_per_h": k_out,
        "last_time_h": last_time,
        "last_product_mM": last_prod,
        "last_conversion_pct": last_conv,
        "flags": text_array(flag_words, flag_codes),
        "rate_ci_low_mM_per_h": rate - half,
        "rate_ci_high_mM_per_h": rate + half,
        "window_points": np.where(m_slope, n_win, 0),
        "intercept_mM": intercept,
        "plateau_mM": plateau,
        "resid_sd_mM": resid_sd,
        "has_t0": has_t0,
        "first_time_h": first_time,
        "first_conversion_pct": first_conv,
    })


def _induction(g, t, prod, in_fit, G, pos=None, n_fit=None) -> np.ndarray:
    """Straight lines through the first and the second half of the fitted readings (sharing the
    middle reading): flagged when the early slope is below half the late slope and the
    difference exceeds FLAG_SIGMAS standard errors (pooled residual SD of the two lines).

    Each well's readings are contiguous and time-sorted in ``g`` and its fitted ones a leading
    run of them: either the mask ``in_fit`` (``pos``, each reading's place in its well, from
    sorted ``g`` when not given) or, with ``pos``, the number ``n_fit`` of fitted readings per well."""
    if n_fit is None:
        if not in_fit.any():
            return np.zeros(G, dtype=bool)
        if pos is None:
            gi = g[in_fit]
            pos = np.zeros(g.shape, dtype=np.int64)
            pos[in_fit] = np.arange(gi.size) - _group_starts(gi, G)[gi]
        n = np.bincount(g, weights=in_fit, minlength=G).astype(np.int64)
        mid = (n // 2)[g]
        one, two = np.flatnonzero(in_fit & (pos <= mid)), np.flatnonzero(in_fit & (pos >= mid))
    else:
        n = np.asarray(n_fit, dtype=np.int64)
        if not (n > 0).any():
            return np.zeros(G, dtype=bool)
        half = n // 2
        # first half: places 0..mid of a leading run; second half: places mid..n-1
        one = np.flatnonzero(pos <= np.where(n > 0, half, -1)[g])
        two = np.flatnonzero((pos >= half[g]) & (pos < n[g]))
    # the two halves fitted separately (each group's sums in the same order as one joint fit)
    early_fit = fit.fit_lines(t[one], prod[one], g[one], G)
    late_fit = fit.fit_lines(t[two], prod[two], g[two], G)
    early, late = early_fit.slope, late_fit.slope
    df = (early_fit.n - 2) + (late_fit.n - 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        rss = np.nan_to_num(early_fit.rss) + np.nan_to_num(late_fit.rss)
        s2 = rss / df
        se = np.sqrt(s2 / early_fit.sxx + s2 / late_fit.sxx)
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
