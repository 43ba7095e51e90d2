"""One initial rate per well, from a fitted integrated rate law: the slope of the course at t = 0.

:func:`well_rates` works on all wells at once (vectorised; no loop over wells):

1. **Courses.** Each non-empty well's main-analyte readings (product in mM) as the fraction X of
   its theoretical maximum (substrate x stoichiometry), or in mM where the well has no substrate
   concentration. Absorbance readings above the detector's linear range are left out of the fit
   (flag ``above_linear_range``); values above full scale stay in, as measured (flag
   ``above_full_scale``). A lone spike (one reading far off the course its neighbours draw: a
   bubble, a mis-injection; :func:`lone_spikes`) is left out too (flag ``reading_spike``).
2. **Every rate law fitted to every well** (:mod:`screenlab.kinetics.ratelaws`): zero order with
   substrate run-out, first order, saturation (integrated Michaelis-Menten), first order to a
   plateau, first order with catalyst decay, and the generic quadratic over the early window.
3. **Done before the first reading.** A well whose first reading after t = 0 is already at 80 %
   or more of its largest value (a single reading: of full conversion), and clearly above noise,
   has no measurable initial rate: the rate is only known to exceed the chord to that reading,
   ``X1 / t1`` (a lower bound for any course that slows down). It gets ``censored = lower``, that
   bound as its rate, no SE and flag ``done_at_first_reading``.
4. **One law per catalyst x condition.** All wells of one catalyst and condition, at every
   temperature (blanks: per condition), share one law: the integrated law with the smallest AICc
   summed over its wells with the largest product (:data:`PROBE_WELLS`, or a quarter of them) (Hurvich & Tsai 1989; all
   integrated laws are fitted to the same readings, so their AICc compare; the wells that got
   furthest tell the laws apart, and a flat course, such as a dispensing failure, takes no part). The generic early-window quadratic is used instead where most of the
   group's courses are not initial-rate kinetics (product falling after a maximum, or induction)
   or where the chosen law misses the data (its residual variance over the group's wells more
   than :data:`MISFIT_RATIO` times the campaign's noise variance; flag ``law_misfit``).
5. **Per well** the chosen law's ``r0`` (x the theoretical maximum for mM/h), its SE from the fit
   covariance (delta method), df = n - parameters; residual SD and its ratio to the campaign's
   noise level are kept as diagnostics. A well where the group's law cannot be fitted takes its
   own best law (flag ``own_rate_law``). Wells with one reading after t = 0 get the chord
   (``end_point``: an average rate, no SE).

The campaign's noise level at each well's signal level comes from the residual SDs of every
well's own best law (:func:`_noise_level`: binned by signal level, so noise that grows with the
signal is not mistaken for a misfit).

Shape checks per well (kept in ``flags``; :func:`screenlab.kinetics.turnover.group_rates` carries
them to the group row when most replicates have them):

``induction``   lines through the first and the second half of the rise (up to the course's
                maximum): the early slope below half the late one by more than 3 SE; or the
                early-window quadratic bends upwards (t^2 term above 3 SE, and its slope at the
                window's end at least 1.5 times its slope at t = 0); or its steepest
                three-reading slope (after the first readings, above 5 noise SEs) is more than
                twice its early-window rate; or first order with an activating catalyst,
                ``1 - exp(-k (t - tau (1 - exp(-t/tau))))``, fits with an AICc lower than every
                integrated law's by more than :data:`INDUCTION_AICC`;
``product_decline``  the last reading below the course's maximum by more than 3 x sqrt(2) noise
                SDs and 5 % of that maximum, or by a fifth of a maximum of at least 2 %
                conversion over two or more readings (a consecutive reaction, or product lost);
``deactivation`` the last reading short of what first-order depletion from the fitted initial
                rate gives, ``s (1 - exp(-r0 t_last / s))``, by more than 3 x sqrt(2) noise SDs
                and 10 % (the rate falls faster than any law of order <= 1 in substrate allows;
                s is the main product's share of all products where by-products are declared).

Columns (one row per non-empty well, in the order of ``data.wells``): the well's
``plate, well, row, col, role, catalyst, temperature_c, loading, loading_unit,
substrate_conc_mM, volume_uL, <factor columns>``, then ``n_points`` (usable readings of the main
analyte), ``method`` (the law, or ``end_point``, ``first_reading`` for a censored well,
``no_data``), ``rate_mM_per_h``, ``rate_se_mM_per_h``, ``rate_df``, ``k_per_h`` (rate / theoretical
maximum: the pseudo-first-order constant the initial rate implies; NaN without substrate),
``last_time_h``, ``last_product_mM``, ``last_conversion_pct``, ``flags``, ``censored`` (``lower``
or ""); and in addition ``rate_ci_low_mM_per_h``, ``rate_ci_high_mM_per_h`` (Student t at
``settings.confidence``; a censored well: the bound and NaN), ``window_points`` (readings the law
used), ``law_p1``, ``law_p2`` (its parameters, see :class:`~screenlab.kinetics.ratelaws.LawFit`),
``law_capped`` (parameters in conversion units), ``plateau_mM``, ``resid_sd_mM``, ``noise_ratio``
(residual SD / campaign noise), ``max_rate_mM_per_h`` (steepest local slope: least-squares lines
through every three consecutive readings), ``has_t0``, ``first_time_h`` and
``first_conversion_pct`` (first reading after t = 0), ``fit_points`` (readings in the fits),
``substrate_integral_h`` (integral of the substrate fraction left over the course, for the
background's share of the product).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from screenlab.kinetics import fit, ratelaws
from screenlab.kinetics.amounts import ABOVE_FULL_SCALE, ABOVE_LINEAR_RANGE, T0_TOLERANCE_H, product_amounts, well_index
from screenlab.kinetics.sites import frame_of, text_array
from screenlab.model import CampaignData
from screenlab.settings import AnalysisSettings
from screenlab.uncertainty import t_quantile

#: flag code -> one plain sentence (gathered by screenlab.flags)
FLAGS: dict[str, str] = {
    "end_point_only": "Only one reading after t = 0: the rate is product / time (an average, no standard error).",
    "done_at_first_reading": "The well was at 80 % or more of its final product at its first reading: the initial "
                             "rate is faster than the readings can show and is reported as a lower bound "
                             "(rerun at lower loading or temperature, or read earlier).",
    "induction": "Induction period: the course starts slower than it later runs (a line through the first half "
                 "of the rise is less than half as steep as one through the second half, by more than 3 "
                 "standard errors). The rate at t = 0 is not the catalyst's working rate; see max_rate.",
    "deactivation": "Deactivation (or an equilibrium limit): the course falls short of what first-order "
                    "depletion from its initial rate gives, so the rate falls faster than any rate law of "
                    "order <= 1 in substrate allows.",
    "product_decline": "The product falls after a maximum (a consecutive reaction consumes it, or it is lost): "
                       "the course is not initial-rate kinetics; the rate comes from the early window.",
    "law_misfit": "The rate law chosen for this group leaves residuals much larger than the campaign's noise; "
                  "the rate comes from the early-window quadratic.",
    "own_rate_law": "The group's rate law could not be fitted to this well; its own best law was used.",
    "fit_failed": "No rate law could be fitted to this well.",
    "few_points": "Fewer than 4 readings carry the rate, so its standard error is rough.",
    "no_readings": "No usable reading after t = 0 for the main product.",
    "negative_rate": "The rate is negative (product decreases); usually noise around zero, or a drifting baseline.",
    "baseline_first_reading": "Absorbance without a reading at t = 0: the first reading was taken as zero product, "
                              "so product formed before it is missed.",
    "no_substrate": "No substrate concentration: conversion is unknown, so only the laws that need no maximum "
                    "product apply.",
    "above_full_scale": "At least one reading lies above full scale (more than 100 % of the theoretical product, "
                        "within the 110 % accepted as instrument overshoot); taken as measured.",
    "above_linear_range": "At least one absorbance lies above the detector's linear range "
                          "([readout].linear_range_max); those readings are left out of the rate fit.",
    "reading_spike": "One reading lies far off the course its neighbours draw (a bubble, a mis-injection): a lone "
                     "peak or dip much larger than the course's other kinks and the plate's noise. It is left out of "
                     "the rate fit (it stays in the store).",
}

#: a well at this fraction of its largest reading at its first reading is done (common practice,
#: no source: the issue's "past, say, 80 % of its plateau")
DONE_FRACTION = 0.8
#: ... and clearly above noise: its first reading above this many noise SDs
DONE_NOISE_SDS = 5.0
#: induction / deactivation / decline need a difference of this many standard errors (common
#: practice, no source)
FLAG_SIGMAS = 3.0
#: a group's law misses its data when its residual variance exceeds this multiple of the noise
#: variance (residuals twice the noise SD; common practice, no source)
MISFIT_RATIO = 4.0
#: wells of each catalyst x condition (those with the largest product) on which the law is chosen:
#: at least PROBE_WELLS, and a PROBE_SHARE of its wells where it has more (a blank group, say)
PROBE_WELLS = 3
PROBE_SHARE = 0.25
#: AICc advantage of the induction course over every integrated law that flags induction (a
#: difference above 4 is "considerably less support" for the others: Burnham & Anderson 2002)
INDUCTION_AICC = 4.0
#: the early-window quadratic's window, as a fraction of the course's largest value, is
#: settings.conversion_window_pct / 100

_WELL_COLUMNS = ["plate", "well", "row", "col", "role", "catalyst", "temperature_c", "loading",
                 "loading_unit", "substrate_conc_mM", "volume_uL"]


def _flag_text(flags: dict[str, np.ndarray], n: int) -> np.ndarray:
    """Object array of str: the codes whose mask is true, in the order of ``flags``, joined with ``;``."""
    words, codes = _flag_codes(flags, n)
    return words[codes] if n else np.zeros(0, dtype=object)


def _flag_codes(flags: dict[str, np.ndarray], n: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`_flag_text` as distinct texts (object array of str) and one code per row into them.

    The masks are packed into one integer per row; each distinct combination (a few) is joined once.
    """
    bits = np.zeros(n, dtype=np.int64)
    names = list(flags)
    for i, name in enumerate(names):        # a loop over flag codes, not wells
        bits |= np.asarray(flags[name], dtype=bool).astype(np.int64) << i
    combos, inv = np.unique(bits, return_inverse=True)
    text = np.array([";".join(nm for i, nm in enumerate(names) if int(c) >> i & 1) for c in combos]
                    + [""], dtype=object)   # the trailing "" keeps the array 1-d of str when empty
    return text, inv.ravel()


#: a lone spike: its kink (distance from the chord of its two neighbours) is this many times the
#: course's fourth largest kink and the plate's robust kink scale (common practice, no source)
SPIKE_RATIO = 5.0
SPIKE_NOISE_SDS = 6.0
#: courses with fewer readings have too few kinks to tell a spike from the course
SPIKE_MIN_READINGS = 6
#: ... and each neighbour's kink, of the other sign, at least this share of the spike's
SPIKE_NEIGHBOUR_SHARE = 0.2


def lone_spikes(t: np.ndarray, y: np.ndarray, g: np.ndarray, plate_of_well: np.ndarray,
                scale: np.ndarray) -> np.ndarray:
    """One bool per reading (flat arrays sorted by well code ``g``, then time): the reading that is a
    lone spike of its course, at most one per well.

    Each interior reading's kink is its distance from the chord through its two neighbours, in mM
    (``y`` x the well's ``scale``). A reading is a spike when it is a local peak or dip, a
    neighbour's kink has the other sign and at least :data:`SPIKE_NEIGHBOUR_SHARE` of its size (as
    one displaced reading pulls them; with uneven reading times one of them may be small), no
    neighbour's kink goes its way by half that share, both neighbours are interior readings, the
    course without it is as smooth as the rest (its neighbours' kinks on the new chords within the
    course's own kink scale), the trend of neither side carried on to it reaches it, and its kink
    exceeds :data:`SPIKE_RATIO` times the course's fourth largest kink (the three largest being the
    spike and its neighbours) and :data:`SPIKE_NOISE_SDS` times the plate's robust kink scale
    (1.4826 x the median |kink| of its readings). A smooth maximum (product decline) has kinks of one
    sign around it; a kink in a monotone course (the end of an induction) is no peak."""
    n = len(y)
    out = np.zeros(n, dtype=bool)
    if n < 3:
        return out
    same_prev = np.zeros(n, dtype=bool)
    same_prev[1:] = g[1:] == g[:-1]
    same_next = np.zeros(n, dtype=bool)
    same_next[:-1] = g[:-1] == g[1:]
    i = np.flatnonzero(same_prev & same_next)
    kink = np.full(n, np.nan)
    kink[i] = _chord_kink(t, y, scale, g, i, i - 1, i + 1)
    ok = np.isfinite(kink)
    if not ok.any():
        return out
    k_abs = np.abs(kink)
    # the plate's robust kink scale
    pl = plate_of_well[g]
    noise = (pd.Series(k_abs[ok]).groupby(pl[ok]).median() * 1.4826).reindex(pl).to_numpy(dtype=float)
    # per well: the largest |kink| (the candidate) and the fourth largest
    counts = np.bincount(g)
    order = np.lexsort((-np.where(ok, k_abs, -1.0), g))
    gs = g[order]
    rank = np.arange(n) - np.searchsorted(gs, gs, side="left")
    fourth = np.full(len(counts), np.nan)
    r4 = order[(rank == 3) & ok[order]]
    fourth[g[r4]] = k_abs[r4]
    top = order[rank == 0]
    # both neighbours interior (a reading beside the course's first or last one is never taken out:
    # there the course itself may turn, at a maximum or a plateau, with nothing to check it by)
    cand = top[ok[top] & (counts[g[top]] >= SPIKE_MIN_READINGS) & ok[np.maximum(top - 1, 0)]
               & ok[np.minimum(top + 1, n - 1)]]
    if not cand.size:
        return out
    size = k_abs[cand]
    with np.errstate(invalid="ignore", divide="ignore"):
        # the bar the tests below set: the course's own kinks and the plate's noise (NaN, no bar
        # to pass: too few kinks to judge)
        floor = np.maximum(SPIKE_RATIO * fourth[g[cand]], SPIKE_NOISE_SDS * noise[cand])
        peak = (y[cand] - y[cand - 1]) * (y[cand] - y[cand + 1]) > 0
        # one displaced reading pulls its neighbours' kinks the other way, by a fair share of its
        # own (a course at its plateau at once has a kink there, but a flat neighbour after it)
        s, share = np.sign(kink[cand]), SPIKE_NEIGHBOUR_SHARE * size
        prev_k, next_k = kink[cand - 1], kink[cand + 1]
        pulled = ((np.sign(prev_k) == -s) & (np.abs(prev_k) >= share)) | ((np.sign(next_k) == -s)
                                                                         & (np.abs(next_k) >= share))
        along = ((np.sign(prev_k) == s) & (np.abs(prev_k) >= 0.5 * share)) | ((np.sign(next_k) == s)
                                                                             & (np.abs(next_k) >= 0.5 * share))
        # left out, the course its neighbours then draw must be as smooth as the rest of it (a
        # reading at a genuine turn of the course leaves a kink behind; a displaced one does not)
        inside = (cand >= 2) & (cand + 2 < n)
        c = np.where(inside, cand, 2)
        left = np.abs(_chord_kink(t, y, scale, g, c - 1, c - 2, c + 1))
        right = np.abs(_chord_kink(t, y, scale, g, c + 1, c - 1, c + 2))
        smooth = inside & (np.fmax(left, right) <= 0.5 * size) & (np.fmax(left, right) <= floor)
        # and neither side's trend, carried on to it, reaches it (a course rising straight into a
        # sharp maximum between sparse readings: its peak is where the rise was heading)
        from_left = y[c - 1] + (y[c - 1] - y[c - 2]) * (t[c] - t[c - 1]) / (t[c - 1] - t[c - 2])
        from_right = y[c + 1] + (y[c + 1] - y[c + 2]) * (t[c + 1] - t[c]) / (t[c + 2] - t[c + 1])
        off = np.fmin(np.abs(y[c] - from_left), np.abs(y[c] - from_right)) * scale[g[c]]
        spike = peak & pulled & ~along & smooth & (off >= 0.5 * size) & (off > floor) & (size > floor)
    out[cand[spike]] = True
    return out


def _chord_kink(t, y, scale, g, j, a, b):
    """The kink of readings ``j``: their distance from the chord through readings ``a`` and ``b``
    (index arrays into the flat courses), in mM (``y`` x the well's ``scale``)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        f = (t[j] - t[a]) / (t[b] - t[a])
        return (y[j] - (y[a] + (y[b] - y[a]) * f)) * scale[g[j]]


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


def _group_codes(wells: pd.DataFrame, rows: np.ndarray, factor_names, *, temperature: bool = True,
                 cache: dict | None = None) -> np.ndarray:
    """Replicate group of each kept well: catalyst x role x temperature x condition (the keys of the
    rates table; without the temperature when ``temperature`` is False), numbered 0.. in order of
    first appearance. ``cache``: a dict kept between calls on the same wells, so each key column is
    factorised once."""
    from screenlab import _groups as grp
    from screenlab.kinetics.turnover import _tkey

    keys = ["catalyst", "role", *(["temperature_c"] if temperature else []), "loading", "loading_unit",
            "substrate_conc_mM", *[f for f in factor_names if f in wells.columns]]
    cache = {} if cache is None else cache
    for k in keys:
        if k not in cache:
            cache[k] = (grp.codes(_tkey(pd.to_numeric(wells[k], errors="coerce").to_numpy(dtype=float)))
                        if k == "temperature_c" else grp.codes(wells[k]))
    return grp.group_index([cache[k] for k in keys], rows)


def _noise_level(fits: dict, c: ratelaws.Courses, rss_floor: np.ndarray) -> np.ndarray:
    """Per well: the measurement noise (SD, y units) expected at its signal level.

    Every well's own best integrated law (AICc) gives a residual SD; over wells with >= 3 residual
    df, split into up to 8 bins of equal count by the well's mean |y|, the median SD of each bin
    at the bin's median level, made non-decreasing with level and interpolated (flat beyond the
    ends). Chromatography and plate-reader noise often grows with the signal; a campaign whose
    noise does not gives one flat level. Capped courses (conversion units) and the others (mM) are
    treated apart; without enough wells, 0.5 % conversion (or 1 % of the well's largest value)."""
    G, m = c.shape
    aicc = np.stack([fits[law].aicc(rss_floor) for law in ratelaws.INTEGRATED], axis=1)
    best = np.argmin(aicc, axis=1)
    has = np.isfinite(aicc.min(axis=1))
    sd = np.stack([fits[law].resid_sd for law in ratelaws.INTEGRATED], axis=1)[np.arange(G), best]
    df = np.stack([fits[law].df for law in ratelaws.INTEGRATED], axis=1)[np.arange(G), best]
    # a course no integrated law describes (a product that falls, say) would inflate its own
    # noise: the early-window quadratic's residual SD caps it where that fit has >= 2 df
    poly = fits[ratelaws.GENERIC]
    with np.errstate(invalid="ignore"):
        capped_sd = np.where(poly.ok & (poly.df >= 2) & (poly.resid_sd < sd), poly.resid_sd, sd)
    sd = np.where(has, capped_sd, sd)
    with np.errstate(invalid="ignore", divide="ignore"):
        level = (c.w * np.abs(c.y)).sum(axis=1) / c.n if m else np.zeros(G)
        top = np.max(np.where(c.w > 0, np.abs(c.y), 0.0), axis=1) if m else np.zeros(G)
    use = has & (df >= 3) & np.isfinite(sd) & (sd > 0) & np.isfinite(level)
    out = np.where(c.capped, 0.005, 0.01 * np.maximum(top, 1e-12))
    for capped in (True, False):
        sel = use & (c.capped == capped)
        k = int(sel.sum())
        if k < 3:
            continue
        order = np.argsort(level[sel], kind="stable")
        lv, sv = level[sel][order], sd[sel][order]
        n_bins = int(min(8, max(1, k // 30)))
        edges = np.linspace(0, k, n_bins + 1).astype(int)
        centre = np.array([np.median(lv[a:b]) for a, b in zip(edges[:-1], edges[1:])])   # a few bins
        med = np.maximum.accumulate(np.array([np.median(sv[a:b]) for a, b in zip(edges[:-1], edges[1:])]))
        here = c.capped == capped
        out = np.where(here, np.interp(np.nan_to_num(level), centre, med), out)
    return out


def _local_max_slope(c: ratelaws.Courses) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Steepest least-squares slope through three consecutive fitted readings of each well (y units
    per h), the sum of squared time deviations of that triple (for its SE) and the slot where it
    starts; NaN / -1 for fewer than three readings."""
    G, m = c.shape
    if m < 3:
        return np.full(G, np.nan), np.full(G, np.nan), np.full(G, -1, dtype=np.int64)
    # every triple of consecutive slots at once, as (G, m - 2) arrays of its first, second and
    # third reading (sums taken left to right, as a three-term mean or sum is); the steepest triple
    # per well, the first of equal ones
    n3 = m - 2
    tt = [c.t[:, i:i + n3] for i in range(3)]
    yy = [c.y[:, i:i + n3] for i in range(3)]
    full = ((c.w[:, 0:n3] + c.w[:, 1:1 + n3]) + c.w[:, 2:2 + n3]) == 3
    tm = ((tt[0] + tt[1]) + tt[2]) / 3.0
    ym = ((yy[0] + yy[1]) + yy[2]) / 3.0
    dt = [v - tm for v in tt]
    dy = [v - ym for v in yy]
    sxx = (dt[0] ** 2 + dt[1] ** 2) + dt[2] ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = ((dt[0] * dy[0] + dt[1] * dy[1]) + dt[2] * dy[2]) / sxx
        cand = np.where(full & (sxx > 0) & (slope > -np.inf), slope, -np.inf)
    at = np.argmax(cand, axis=1)
    best = cand[np.arange(G), at]
    found = best > -np.inf
    best_sxx = np.where(found, sxx[np.arange(G), at], np.nan)
    at = np.where(found, at, -1).astype(np.int64)
    return np.where(np.isfinite(best), best, np.nan), best_sxx, at


def _induction(t, y, w, n_rise) -> np.ndarray:
    """Induction test on dense courses: lines through the first and the second half of each well's
    first ``n_rise`` fitted readings (sharing the middle one); flagged when the early slope is
    below half the late slope and the difference exceeds FLAG_SIGMAS standard errors (pooled
    residual SD of the two lines)."""
    G, m = t.shape
    if not m:
        return np.zeros(G, dtype=bool)
    order = np.cumsum(w > 0, axis=1) - 1                   # place among the fitted readings
    half = (n_rise // 2)[:, None]
    fitted = (w > 0) & (order < n_rise[:, None])
    one = fitted & (order <= half)
    two = fitted & (order >= half)
    g = np.repeat(np.arange(G), m).reshape(G, m)
    early = fit.fit_lines(t[one], y[one], g[one], G)
    late = fit.fit_lines(t[two], y[two], g[two], G)
    df = (early.n - 2) + (late.n - 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        rss = np.nan_to_num(early.rss) + np.nan_to_num(late.rss)
        s2 = rss / df
        se = np.sqrt(s2 / early.sxx + s2 / late.sxx)
        hit = ((n_rise >= 4) & (df > 0) & (late.slope > 0) & (early.slope < 0.5 * late.slope)
               & ((late.slope - early.slope) > FLAG_SIGMAS * se))
    return np.asarray(hit, dtype=bool)


def _pick(per_law: np.ndarray, law_index: np.ndarray) -> np.ndarray:
    """``per_law[i, law_index[i]]`` (law_index -1 -> NaN)."""
    G = per_law.shape[0]
    got = per_law[np.arange(G), np.maximum(law_index, 0)]
    return np.where(law_index >= 0, got, np.nan)


def well_rates(data: CampaignData, settings: AnalysisSettings | None = None,
               amounts: pd.DataFrame | None = None) -> pd.DataFrame:
    """Initial rate of every non-empty well; see the module docstring for the method and columns."""
    # the fits meet NaN, infinities and overflow in wells that cannot carry a law (bounds, flat or
    # single-reading courses); every such case is handled by value below, so numpy's floating-point
    # warnings would only reach the user as noise
    with np.errstate(all="ignore"):
        return _well_rates(data, settings, amounts)


def _well_rates(data, settings, amounts) -> pd.DataFrame:
    if settings is None:
        settings = AnalysisSettings.from_mapping(data.manifest.analysis)
    if amounts is None:
        amounts = product_amounts(data)
    window_frac = float(settings.conversion_window_pct) / 100.0
    min_pts = max(int(settings.min_window_points), 3)
    pps = float(data.manifest.product_per_substrate)

    wells = data.wells
    role_codes, role_words = pd.factorize(wells["role"])
    not_empty = np.array([str(w) != "empty" for w in role_words] + [True], dtype=bool)
    rows = np.flatnonzero(not_empty[np.asarray(role_codes, dtype=np.int64)])
    factors = [f for f in data.factor_names if f in wells.columns and f not in _WELL_COLUMNS]
    cols = _WELL_COLUMNS + factors
    G = len(rows)
    theo = wells["substrate_conc_mM"].to_numpy(dtype=float)[rows] * pps
    theo = np.where(np.isfinite(theo) & (theo > 0), theo, np.nan)
    capped = np.isfinite(theo)

    # --- the main analyte's usable readings, each well's in one run sorted by time ------------
    is_main = _equals(amounts["analyte"], data.manifest.analyte_main)
    code = np.where(is_main, well_index(amounts["plate"], amounts["well"], wells["plate"].iloc[rows],
                                        wells["well"].iloc[rows]), -1)
    t_all = amounts["time_h"].to_numpy(dtype=float)
    p_all = amounts["product_mM"].to_numpy(dtype=float)
    rc_all = (amounts["range_code"].to_numpy(dtype=np.int8) if "range_code" in amounts.columns
              else np.zeros(len(amounts), dtype=np.int8))
    use = (code >= 0) & np.isfinite(t_all) & np.isfinite(p_all)
    first_reading_base = np.zeros(G, dtype=bool)
    baselined = np.zeros(G, dtype=bool)                 # read against the well's own first reading
    if "baseline" in amounts.columns and not _all_missing(amounts["baseline"]):
        fr = _equals(amounts["baseline"], "first_reading")
        first_reading_base[code[fr & (code >= 0)]] = True
        baselined[code[(fr | _equals(amounts["baseline"], "t0")) & (code >= 0)]] = True
    code, t, prod, rc = code[use], t_all[use], p_all[use], rc_all[use]
    order = _order_by_well(code, t)
    if order is not None:
        code, t, prod, rc = code[order], t[order], prod[order], rc[order]
    g = code
    n_points = np.bincount(g, minlength=G).astype(np.int64)
    above_full = np.bincount(g[rc == ABOVE_FULL_SCALE], minlength=G) > 0
    above_lin = np.bincount(g[rc == ABOVE_LINEAR_RANGE], minlength=G) > 0
    has_t0 = np.bincount(g[t <= T0_TOLERANCE_H], minlength=G) > 0

    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.where(capped[g], prod / theo[g], prod)
    share = _main_share(data, amounts, rows, g, t, prod, G)
    with np.errstate(invalid="ignore", divide="ignore"):
        substrate_h = _substrate_integral(t, y / share[g], g, G, capped)
    plate_code = pd.factorize(wells["plate"].iloc[rows])[0]
    spike = lone_spikes(t, y, g, plate_code, np.where(capped, theo, 1.0))
    spiked = np.bincount(g[spike], minlength=G) > 0
    c = ratelaws.dense_courses(t, y, g, G, capped, keep=(rc != ABOVE_LINEAR_RANGE) & ~spike)
    del t, prod, rc, y, g, code, t_all, p_all, rc_all, use
    if baselined.any():
        c = _baseline_offset(c, baselined)
    T, Y, W = c.t, c.y, c.w
    Gi = np.arange(G)
    fitted = W > 0
    after0 = fitted & (T > T0_TOLERANCE_H)
    n_fit = c.n
    n_pos = after0.sum(axis=1)
    m = c.shape[1]
    i_first = np.argmax(after0, axis=1) if m else np.zeros(G, np.int64)
    y1 = np.where(n_pos > 0, Y[Gi, i_first] if m else np.nan, np.nan)
    t1 = np.where(n_pos > 0, T[Gi, i_first] if m else np.nan, np.nan)
    last_slot = (m - 1 - np.argmax(fitted[:, ::-1], axis=1)) if m else np.zeros(G, np.int64)
    at0 = fitted & (T <= T0_TOLERANCE_H)
    with np.errstate(invalid="ignore", divide="ignore"):
        y0 = np.where(at0.any(axis=1), (np.where(at0, Y, 0.0)).sum(axis=1) / at0.sum(axis=1), 0.0) if m \
            else np.zeros(G)
    y_last = np.where(n_fit > 0, Y[Gi, last_slot] if c.shape[1] else np.nan, np.nan)
    t_last = np.where(n_fit > 0, T[Gi, last_slot] if c.shape[1] else np.nan, np.nan)
    y_top = np.where(n_fit > 0, np.max(np.where(fitted, Y, -np.inf), axis=1) if c.shape[1] else np.nan, np.nan)
    i_top = np.argmax(np.where(fitted, Y, -np.inf), axis=1) if c.shape[1] else np.zeros(G, np.int64)

    # --- every law on every well (the iterative ones, first, on the most informative wells) ------
    # The law of a catalyst x condition is told apart on its wells that got furthest (curvature
    # grows with conversion): the two-parameter iterative laws are fitted first to the three wells
    # of each catalyst x condition with the largest product, and to the others only where their
    # catalyst's choice falls on them.
    key_cache: dict = {}
    law_group = _group_codes(wells, rows, factors, temperature=False, cache=key_cache)
    n_law_groups = int(law_group.max()) + 1 if G else 0
    can_fit = (n_pos >= 1) & (n_fit >= 3)
    order = np.lexsort((-np.nan_to_num(y_top, nan=-np.inf), ~can_fit, law_group))
    lg_sorted = law_group[order]
    start = np.searchsorted(lg_sorted, lg_sorted, side="left")
    probe = np.zeros(G, dtype=bool)
    group_size = np.bincount(law_group[can_fit], minlength=n_law_groups)
    n_probe = np.maximum(PROBE_WELLS, np.ceil(PROBE_SHARE * group_size).astype(np.int64))
    probe[order[(np.arange(G) - start) < n_probe[lg_sorted]]] = True
    probe &= can_fit
    fits = ratelaws.fit_all(c, window_frac=window_frac, min_points=min_pts, iterative_rows=np.flatnonzero(probe))
    scale = np.where(capped, 1.0, np.maximum(np.nan_to_num(np.abs(y_top)), 1e-12))
    rss_floor = n_fit * (1e-6 * scale) ** 2
    noise = _noise_level(fits, c, rss_floor)

    # --- done before the first reading: a lower bound, not a fit ------------------------------
    with np.errstate(invalid="ignore", divide="ignore"):
        single_done = capped & (n_pos == 1) & (y1 >= DONE_FRACTION)
        course_done = (n_pos >= 2) & (y1 >= DONE_FRACTION * y_top) & (y1 > DONE_NOISE_SDS * noise)
    done = single_done | course_done
    end_point = ~done & (n_pos >= 1) & (n_fit <= 2)
    fittable = ~done & (n_pos >= 1) & (n_fit >= 3)

    # --- one law per catalyst x condition, over all its temperatures -------------------------
    group = _group_codes(wells, rows, factors, cache=key_cache)   # replicates: one temperature
    n_groups = int(group.max()) + 1 if G else 0
    laws = list(ratelaws.INTEGRATED)
    aicc = np.stack([fits[law].aicc(rss_floor) for law in laws], axis=1)       # (G, L)
    own_best = np.where(np.isfinite(aicc.min(axis=1)), np.argmin(aicc, axis=1), -1)
    # wells that carry information on the law: a course clearly above noise (a flat course, such
    # as a dispensing failure or an inactive catalyst, fits every law alike)
    signal = np.nan_to_num(y_top) > 3.0 * noise
    eligible = fittable & (own_best >= 0)
    voting = eligible & signal & probe
    # a law that cannot be fitted to one well counts as 10 AICc units worse than that well's worst
    # fitted law, so one odd well does not veto a law for the whole catalyst
    with np.errstate(invalid="ignore"):
        worst = np.max(np.where(np.isfinite(aicc), aicc, -np.inf), axis=1)
    votes = np.where(np.isfinite(aicc), aicc, (worst + 10.0)[:, None])
    pooled = np.stack([np.bincount(law_group[voting], weights=votes[voting, j], minlength=n_law_groups)
                       for j in range(len(laws))], axis=1) if G else np.zeros((0, len(laws)))
    pooled = pooled.astype(float)
    if G:
        # catalysts without any informative well (inactive ones): vote with all their wells
        quiet = np.bincount(law_group[voting], minlength=n_law_groups) == 0
        rest = eligible & quiet[law_group]
        pooled += np.stack([np.bincount(law_group[rest], weights=votes[rest, j], minlength=n_law_groups)
                            for j in range(len(laws))], axis=1)
    n_law = np.bincount(law_group[eligible], minlength=n_law_groups)
    chosen_law = np.where(np.isfinite(pooled.min(axis=1)) & (n_law > 0), np.argmin(pooled, axis=1), -1)
    n_elig = np.bincount(group[eligible], minlength=n_groups)
    # each replicate group's law: its catalyst x condition's (the same for all its wells)
    first_of = np.full(n_groups, -1, dtype=np.int64)
    first_of[group[::-1]] = law_group[::-1]
    chosen = np.where(first_of >= 0, chosen_law[np.maximum(first_of, 0)], -1)
    # the iterative laws on the remaining wells of the catalysts that chose them
    for law in ratelaws.ITERATIVE:
        need = fittable & ~probe & (chosen_law[law_group] == laws.index(law))
        if need.any():
            fits[law] = ratelaws.fit_iterative(law, c, np.flatnonzero(need), fits)
    aicc = np.stack([fits[law].aicc(rss_floor) for law in laws], axis=1)
    own_best = np.where(np.isfinite(aicc.min(axis=1)), np.argmin(aicc, axis=1), -1)
    eligible = fittable & (own_best >= 0)

    # shapes that are not initial-rate kinetics, per well
    drop = y_top - y_last
    after_top = np.sum(fitted & (np.arange(m)[None, :] > i_top[:, None]), axis=1) if m else np.zeros(G, np.int64)
    with np.errstate(invalid="ignore"):
        # below the maximum by more than the noise allows, or a large fall (a fifth of a maximum of
        # at least 2 % conversion) over two or more readings, whatever the noise estimate says
        decline = fittable & (i_top < last_slot) & (
            ((drop > FLAG_SIGMAS * np.sqrt(2.0) * noise) & (drop > 0.05 * np.abs(y_top)))
            | ((after_top >= 2) & (drop > 0.2 * y_top) & (y_top > np.where(capped, 0.02, 0.0))))
    rise = np.cumsum(fitted, axis=1)[Gi, i_top] if c.shape[1] else np.zeros(G, np.int64)
    # induction: a slow first half of the rise, or an early window that bends upwards (the
    # quadratic's t^2 term positive by more than 3 SE: the course accelerates from t = 0)
    poly = fits[ratelaws.GENERIC]
    with np.errstate(invalid="ignore", divide="ignore"):
        t_win = np.max(np.where(ratelaws.early_window(c, window_frac, min_pts), T, 0.0), axis=1) if m else np.zeros(G)
        speeds_up = (poly.p1 + 2.0 * poly.p2 * t_win) > 1.5 * np.maximum(poly.p1, 0.0)   # by half, at least
        convex = poly.ok & (poly.n_window >= 4) & (poly.p2 > FLAG_SIGMAS * poly.p2_se) & speeds_up
    # ... or a course that runs much faster later than at its start: the steepest three-reading
    # slope (clearly above noise, after the first readings) more than twice the early rate
    max_slope, max_sxx, max_at = _local_max_slope(c)
    with np.errstate(invalid="ignore", divide="ignore"):
        late_fast = ((max_at >= 1) & (max_slope > 5.0 * noise / np.sqrt(max_sxx))
                     & (poly.r0 < 0.5 * max_slope) & poly.ok)
    # ... or a first-order course with an activating catalyst fits clearly better (AICc lower by
    # more than INDUCTION_AICC) than every integrated law (tried where the steepest part of the
    # course is not its start: a course that slows from t = 0 has no lag to find)
    # The induction course is fitted only where its answer can change the flag: a well that could
    # be flagged at all (signal well above noise) and that the cheaper tests have not flagged.
    can_flag = fittable & signal & (np.nan_to_num(y_top) > 10.0 * noise)
    shape_hit = _induction(T, Y, W, np.where(fittable, rise, 0)) | convex | late_fast
    with np.errstate(invalid="ignore"):
        lag_rows = np.flatnonzero(fittable & (max_at >= 1) & ~(poly.r0 >= 0.75 * max_slope) & can_flag & ~shape_hit)
    lagged = np.zeros(G, dtype=bool)
    if lag_rows.size:
        ind = ratelaws.fit_first_order_induction(c.subset(lag_rows), max_slope[lag_rows])
        lagged[lag_rows] = ind.aicc(rss_floor[lag_rows]) < aicc[lag_rows].min(axis=1) - INDUCTION_AICC
    induction = can_flag & (shape_hit | lagged)

    def majority(mask):
        hits = np.bincount(group[eligible & mask], minlength=n_groups)
        return hits * 2 > n_elig

    generic_group = majority(decline) | majority(induction)
    # misfit: pooled residual variance of the chosen law against the campaign's noise
    law_w = np.where(eligible, chosen[group], -1)
    rss_w = _pick(np.stack([fits[law].rss for law in laws], axis=1), law_w)
    df_w = _pick(np.stack([fits[law].df for law in laws], axis=1).astype(float), law_w)
    inside = eligible & np.isfinite(rss_w) & (law_w >= 0)
    chi = np.bincount(group[inside], weights=(rss_w / noise ** 2)[inside], minlength=n_groups)
    dfs = np.bincount(group[inside], weights=df_w[inside], minlength=n_groups)
    with np.errstate(invalid="ignore", divide="ignore"):
        misfit = (dfs > 0) & (chi / dfs > MISFIT_RATIO)
    generic_group |= misfit & (chosen >= 0)

    # --- per-well estimate from the group's law ---------------------------------------------
    all_laws = laws + [ratelaws.GENERIC]
    gen = len(laws)
    per = {k: np.stack([getattr(fits[law], k) for law in all_laws], axis=1)
           for k in ("r0", "r0_se", "rss", "ok", "p1", "p2", "n_window")}
    per["df"] = np.stack([fits[law].df for law in all_laws], axis=1)
    per["resid_sd"] = np.stack([fits[law].resid_sd for law in all_laws], axis=1)
    grp_law = np.where(generic_group, gen, chosen)
    want = np.where(fittable & (grp_law[group] >= 0), grp_law[group], np.where(fittable, own_best, -1))
    usable = per["ok"] & np.isfinite(per["r0"])
    got = _pick(usable.astype(float), want) > 0
    # a well the group's law cannot fit: its own best integrated law, else the generic form
    fallback = np.where(own_best >= 0, own_best, np.where(_pick(usable.astype(float), np.full(G, gen)) > 0, gen, -1))
    own = fittable & ~got & (want >= 0)
    law_i = np.where(fittable, np.where(got, want, fallback), -1)
    own &= law_i >= 0
    failed = fittable & (law_i < 0)

    r0 = _pick(per["r0"], law_i)
    r0_se = _pick(per["r0_se"], law_i)
    df = _pick(per["df"].astype(float), law_i)
    resid = _pick(per["resid_sd"], law_i)
    p1, p2 = _pick(per["p1"], law_i), _pick(per["p2"], law_i)
    n_used = _pick(per["n_window"].astype(float), law_i)
    scale_mM = np.where(capped, theo, 1.0)
    rate = r0 * scale_mM
    rate_se = r0_se * scale_mM
    # end points and censored wells: the chord to the first reading after t = 0 (net of the
    # t = 0 reading when there is one)
    with np.errstate(invalid="ignore", divide="ignore"):
        chord = (y1 - y0) / t1 * scale_mM
    rate = np.where(done | end_point, chord, rate)
    rate_se = np.where(done | end_point | failed, np.nan, rate_se)
    df = np.where(done | end_point | failed | ~np.isfinite(df), 0, df).astype(np.int64)
    n_used = np.where(done | end_point, np.minimum(n_fit, 2), np.nan_to_num(n_used)).astype(np.int64)

    # deactivation: short of first-order depletion from the fitted initial rate (towards the main
    # product's share of the substrate when by-products take the rest)
    with np.errstate(invalid="ignore", over="ignore", divide="ignore"):
        fo_last = share * -np.expm1(-np.maximum(r0, 0.0) / share * t_last)
        deact = (fittable & capped & np.isfinite(r0) & (r0 > 0) & (t_last > t1)
                 & ((fo_last - y_last) > np.maximum(FLAG_SIGMAS * np.sqrt(2.0) * noise, 0.1 * fo_last)))
    max_slope = max_slope * scale_mM

    method_words = np.array(all_laws + ["end_point", "first_reading", "no_data"], dtype=object)
    m_code = np.where(law_i >= 0, law_i, len(all_laws) + 2)
    m_code = np.where(end_point, len(all_laws), np.where(done, len(all_laws) + 1, m_code))
    q = t_quantile(settings.confidence, df)             # once per distinct df (uncertainty.t_ppf)
    with np.errstate(invalid="ignore"):
        half = np.where((df > 0) & np.isfinite(rate_se), q * rate_se, np.nan)
        ci_low = np.where(done, rate, rate - half)
        ci_high = np.where(done, np.nan, rate + half)
        k_out = rate / theo
        plateau = np.where(law_i == laws.index("first_order_plateau"), p1 * scale_mM,
                           np.where(capped, theo, np.nan))
        noise_ratio = resid / noise
    last_prod = y_last * scale_mM
    flags = {
        "no_readings": ~(fittable | end_point | done),
        "end_point_only": end_point,
        "done_at_first_reading": done,
        "induction": induction,
        "deactivation": deact,
        "product_decline": decline,
        "law_misfit": fittable & generic_group[group] & misfit[group] & (law_i == gen),
        "own_rate_law": own,
        "fit_failed": failed,
        "few_points": fittable & (n_used < 4) & ~failed,
        "negative_rate": np.nan_to_num(rate, nan=0.0) < 0,
        "baseline_first_reading": first_reading_base,
        "no_substrate": ~capped & (n_points > 0),
        "above_full_scale": above_full,
        "above_linear_range": above_lin,
        "reading_spike": spiked,
    }
    flag_words, flag_codes = _flag_codes(flags, G)
    censored = np.where(done, "lower", "")
    return frame_of(wells, cols, None if G == len(wells) else rows, {
        "n_points": n_points,
        "method": pd.array(method_words.astype(str), dtype="string").take(m_code),
        "rate_mM_per_h": rate,
        "rate_se_mM_per_h": rate_se,
        "rate_df": df,
        "k_per_h": k_out,
        "last_time_h": t_last,
        "last_product_mM": last_prod,
        "last_conversion_pct": np.where(capped, y_last * 100.0, np.nan),
        "flags": text_array(flag_words, flag_codes),
        "censored": pd.array(censored.astype(str), dtype="string"),
        "rate_ci_low_mM_per_h": ci_low,
        "rate_ci_high_mM_per_h": ci_high,
        "window_points": n_used,
        "law_p1": p1,
        "law_p2": p2,
        "law_capped": capped,
        "plateau_mM": plateau,
        "resid_sd_mM": resid * scale_mM,
        "noise_ratio": noise_ratio,
        "max_rate_mM_per_h": max_slope,
        "has_t0": has_t0,
        "first_time_h": t1,
        "first_conversion_pct": np.where(capped, y1 * 100.0, np.nan),
        "fit_points": n_fit,
        "substrate_integral_h": substrate_h,
    })


def _baseline_offset(c: ratelaws.Courses, baselined: np.ndarray, rounds: int = 3) -> ratelaws.Courses:
    """Courses read against the well's own first reading (absorbance minus its baseline reading):
    that reading is zero by construction, and its noise is a common offset of every later reading,
    which a law through the origin would read as curvature. The baseline reading is left out of the
    fits, and the offset is estimated with the course: a few rounds of alternating least squares,
    the better of the zero- and first-order laws fitted to the readings less the offset, then the
    offset as the mean residual. The courses come back with the offset taken off."""
    rows = np.flatnonzero(baselined)
    sub = c.subset(rows)
    fitted = sub.w > 0
    first = np.argmax(fitted, axis=1)
    w = sub.w.copy()
    w[np.arange(len(rows)), first] = 0.0                       # the baseline reading itself
    n = w.sum(axis=1)
    delta = np.zeros(len(rows))
    for _ in range(rounds):                                    # a few rounds, vectorised over wells
        shifted = ratelaws.Courses(t=sub.t, y=sub.y - delta[:, None] * (w > 0), w=w, n=n.astype(np.int64),
                                   capped=sub.capped, t_first=sub.t_first, t_max=sub.t_max)
        zero = ratelaws.fit_zero_order(shifted)
        first_order = ratelaws.fit_first_order(shifted)
        pz = ratelaws.predict("zero_order", zero.p1[:, None], np.nan, sub.t)
        pz = np.where(sub.capped[:, None], pz, zero.p1[:, None] * sub.t)
        pf = ratelaws.predict("first_order", first_order.p1[:, None], np.nan, sub.t)
        use_f = np.isfinite(first_order.rss) & (first_order.rss < np.where(np.isfinite(zero.rss), zero.rss, np.inf))
        pred = np.where(use_f[:, None], pf, pz)
        res = np.where(w > 0, sub.y - pred, 0.0)
        step = np.where(n > 1, res.sum(axis=1) / np.maximum(n, 1), 0.0)
        delta = np.nan_to_num(step, nan=0.0)
    y = c.y.copy()
    wt = c.w.copy()
    y[rows] = sub.y - delta[:, None] * (w > 0)
    wt[rows] = w
    return ratelaws.Courses(t=c.t, y=y, w=wt, n=wt.sum(axis=1).astype(np.int64), capped=c.capped,
                            t_first=c.t_first, t_max=c.t_max)


def _main_share(data, amounts: pd.DataFrame, rows: np.ndarray, g: np.ndarray, t: np.ndarray, prod: np.ndarray,
                G: int) -> np.ndarray:
    """Per well: the main product's share of all products at its last reading, main / (main +
    by-products), from the campaign's declared by-products (1 without them, or where unknown).
    Parallel pathways keep this share through the course, so the substrate converted is the main
    product over its share."""
    byp = tuple(getattr(data.manifest, "byproducts", ()) or ())
    share = np.ones(G)
    if not byp or not g.size:
        return share
    wells = data.wells
    code = well_index(amounts["plate"], amounts["well"], wells["plate"].iloc[rows], wells["well"].iloc[rows])
    tb = amounts["time_h"].to_numpy(dtype=float)
    pb = amounts["product_mM"].to_numpy(dtype=float)
    total = np.zeros(G)
    for j, name in enumerate(byp):                 # a loop over the declared by-products (a few)
        on = _equals(amounts["analyte"], name) & (code >= 0) & np.isfinite(tb) & np.isfinite(pb)
        cb, tt, pp = code[on], tb[on], pb[on]
        if not cb.size:
            continue
        order = np.lexsort((tt, cb))
        cb, pp = cb[order], pp[order]
        last = np.ones(cb.size, dtype=bool)
        last[:-1] = cb[1:] != cb[:-1]
        total += np.bincount(cb[last], weights=np.maximum(pp[last], 0.0), minlength=G)
    last_main = np.zeros(G)
    lm = np.ones(g.size, dtype=bool)
    lm[:-1] = g[1:] != g[:-1]
    np.put(last_main, g[lm], np.maximum(prod[lm], 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        sh = last_main / (last_main + total)
    return np.where(np.isfinite(sh) & (sh > 0.05) & (total > 0), np.minimum(sh, 1.0), 1.0)


def _substrate_integral(t, y, g, G: int, capped: np.ndarray) -> np.ndarray:
    """Per well: the integral from 0 to its last reading of the substrate left, ``1 - X(t)`` (X
    clipped to 0..1), by the trapezoid rule over its readings (from X = 0 at t = 0 when there is
    no reading at t = 0), in h. The background's product in a catalysed well is its pseudo-first-
    order constant times this (times the initial substrate). NaN without substrate."""
    if not g.size:
        return np.full(G, np.nan)
    s = 1.0 - np.clip(np.nan_to_num(y, nan=0.0), 0.0, 1.0)
    same = g[1:] == g[:-1]
    area = np.where(same, (t[1:] - t[:-1]) * (s[1:] + s[:-1]) / 2.0, 0.0)
    out = np.bincount(g[1:], weights=area, minlength=G)
    first = np.concatenate(([True], ~same))
    head = np.where(t[first] > 0, t[first] * (1.0 + s[first]) / 2.0, 0.0)
    out += np.bincount(g[first], weights=head, minlength=G)
    return np.where(capped, out, np.nan)
