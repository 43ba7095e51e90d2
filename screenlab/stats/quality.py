"""Plate quality: Z'-factor, replicate CVs, blank trend, B-scores and edge effects, control chart.

Conventions (each chosen once, here):

* **Z'-factor** (Zhang, Chung & Oldenburg 1999, *J. Biomol. Screen.* 4, 67; IUPAC Gold Book
  "Z' factor") between the plate's reference (benchmark) wells, the positive control, and its
  blank wells, the negative control, on their rates: ``Z' = 1 - 3 (sd+ + sd-) / |mu+ - mu-|``
  with the *sample* SD (ddof = 1). Every control well with a finite rate counts, replicate
  outliers included: Z' is meant to show the spread the screen really has. Both SDs zero and
  the means apart gives 1; equal means give ``-inf`` (no separation at all), never a division
  error.
* **B-score** (Brideau et al. 2003, *J. Biomol. Screen.* 8, 634): the residual of a per-plate
  Tukey median polish (a port of R's ``stats::medpolish``: eps 0.01, maxiter 10, rows first,
  ``na.rm = TRUE``) divided by the plate's MAD of residuals. We scale the MAD by 1.4826 (R's
  ``mad()`` default), which makes the MAD a consistent estimate of the SD for normal noise, so
  |B| > 3 reads like a z-score. Brideau's paper divides by the raw MAD (from memory); pass
  ``mad_scale=1`` to get that. The polish runs over the *sample* wells only (blanks, references
  and empty wells are missing cells), on the initial rate by default or on the last conversion.
* **Edge effect**: a two-sided Mann-Whitney U test (scipy.stats.mannwhitneyu) of sample wells
  on the outer ring against interior ones, flagged ``edge_effect`` when p < :data:`EDGE_ALPHA`
  with at least :data:`EDGE_MIN_WELLS` wells on each side (all plates at once by
  :func:`mannwhitneyu_grouped`: scipy's statistic and p-value for each plate). The values
  compared are, by preference, each well's ``ln(rate / median rate of its replicate group on the plate)``
  (basis ``replicates``: a ring well against its own replicates elsewhere, whatever the
  catalyst). The additive median polish cannot serve here on its own: a uniform ring offset is
  almost exactly a row effect for rows A and H plus a column effect for the first and last
  columns, so it vanishes from the residuals except at the corners. Only when a plate has too
  few replicated wells on either side are the median-polish residuals compared instead
  (basis ``bscore``), which still catches ring patterns that are not additive.
* **Blank trend**: each plate's blank rate against the campaign's blank Arrhenius line (the
  ``(uncatalysed)`` row of the Arrhenius table) at the plate's temperature, as a ratio and a z
  on the log scale, ``z = (ln observed - ln predicted) / sqrt(se_obs_ln^2 + se_pred_ln^2)``.
* **Control chart**: see :func:`control_chart`.

* **Plates without a benchmark** (fewer than two usable reference wells) have no Z'. Their quality
  comes from what they do have: the blank wells' scatter and detection limit
  (``blank_lod_mM_per_h``, the kinetics' 3 x SE of the blank mean), the share of sample wells
  detectably above the blank (``sample_active_pct``: net rate above 3 x the blank wells' SD and 4 x
  its own SE, the
  3-sigma criterion of Long & Winefordner 1983 applied to a single well), the replicate CVs, the
  blank trend and the edge test, and a separation statistic between the blanks and the plate's
  *upper quartile* of sample wells (the wells at or above the 75th percentile of the plate's
  sample rates), which on a plate of candidates stands in for the positive control a benchmark
  would be. Its centre m_u is the median of those wells; its spread s_u is their replicate
  scatter, m_u x the pooled CV of their replicate groups (``upper_cv_pct``; basis
  ``replicates``), as if the upper quartile were one replicated positive control. The spread of
  the upper quartile itself would mostly measure how different the candidates are, not how noisy
  the plate is; only when those wells are not replicated is 1.4826 x their MAD used instead
  (basis ``upper_quartile``, which understates the plate's quality). The blanks' centre m_b and
  spread s_b are their median and 1.4826 x MAD. Then

  - ``robust_zprime`` = 1 - 3 (s_u + s_b) / |m_u - m_b|: the Z'-factor of Zhang, Chung & Oldenburg
    1999 with medians and the normal-consistent MAD in place of means and SDs, so that a stray
    well does not decide it (common practice, e.g. Birmingham et al., Nat. Methods 2009, 6, 569,
    from memory);
  - ``ssmd`` = (m_u - m_b) / sqrt(s_u^2 + s_b^2), the strictly standardised mean difference of
    Zhang (Genomics 2007, 89, 552) in robust form. For two normal groups Phi(SSMD) is the
    probability that a well of the first reads above one of the second (the "d+-probability",
    Zhang et al., J. Biomol. Screen. 2007, 12, 497), so SSMD >= 2 means an active well beats a
    blank in about 98 % of pairs. A plate without a benchmark is flagged ``low_separation``
    below :data:`SSMD_MIN`.

  Both are given on every plate (they can be set beside the benchmark's Z') with at least
  :data:`SEP_MIN_BLANKS` blanks and :data:`SEP_MIN_UPPER` upper-quartile wells whose median is
  above the blank's detection limit: where nothing is active there is nothing to separate
  (``no_detectable_activity`` on a plate without a benchmark).

Status, one per plate: ``failed`` when a benchmark plate's Z' is below 0 (Gold Book: "useful
range 0 (very poor) to +1") or the plate has fewer than two usable blank wells (no background,
no detection limit: ``no_controls``); ``unchecked`` when the plate has blanks but no benchmark
(flag ``no_benchmark``: judged only by the checks above, which the other flags report);
``flagged`` when any other flag is set; else ``ok``. The ranking treats candidates measured only
on failed plates as unrankable and flags those on failed or unchecked plates.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy import special as _sp_special

from screenlab import _groups, schema
from screenlab.errors import DataQualityWarning
from screenlab.model import UNCATALYSED
from screenlab.plates import format_dims, is_edge
from screenlab.uncertainty import t_ppf

#: Flag codes set by this module (code -> one plain sentence).
FLAGS: dict[str, str] = {
    "zprime_low": "Z' between benchmark and blank wells is below the accepted minimum (settings.zprime_min).",
    "failed": "The plate cannot be trusted: Z' below 0, or fewer than two usable blank wells.",
    "no_controls": "Fewer than two usable blank wells on the plate: no background rate or detection limit, so "
                   "nothing on it can be checked.",
    "no_benchmark": "Fewer than two usable benchmark wells, so no Z': the plate is judged on its blanks, replicate "
                    "CVs, edge test and the separation of its upper-quartile wells from the blanks (status unchecked).",
    "low_separation": "No benchmark, and the plate's upper-quartile sample wells are not clearly separated from its "
                      "blanks (robust SSMD below 2).",
    "no_detectable_activity": "No benchmark, and no sample well on the plate is detectably above the blank: "
                              "nothing shows the reaction worked on this plate.",
    "edge_effect": "Sample wells on the outer ring differ from the interior after row/column correction.",
    "high_cv": "The median CV of replicate groups on the plate exceeds 20 %.",
    "blank_off_trend": "The plate's blank rate is more than 3 standard errors off the campaign's blank Arrhenius line.",
    "reference_out_of_limits": "The benchmark's TOF on this plate lies outside the control limits set by the other plates.",
    "bscore_undefined": "The MAD of the median-polish residuals is zero, so B-scores are undefined.",
}

#: significance level of the edge-versus-interior test (common practice, no source)
EDGE_ALPHA = 0.01
#: fewest sample wells on each side (ring / interior) for the edge test
EDGE_MIN_WELLS = 4
#: median replicate CV above which a plate is flagged high_cv, percent. Plate-uniformity limits
#: of 20 % CV are often quoted for screening assays (from memory; Assay Guidance Manual)
CV_MAX_PCT = 20.0
#: |z| above which a plate's blank is off the campaign's blank Arrhenius line
BLANK_Z_MAX = 3.0
#: two-sided tail probability of Shewhart 3-sigma limits, 2 (1 - Phi(3))
SHEWHART_TAIL = 0.0026997960632601866
#: consistency constant of the MAD for normal data, 1 / Phi^-1(3/4) (R's mad() default)
MAD_NORMAL = 1.4826
#: robust SSMD below which a plate without a benchmark is flagged low_separation: Phi(2) = 0.977
#: of (upper-quartile well, blank) pairs in the right order (the d+-probability link; our choice)
SSMD_MIN = 2.0
#: fewest blank wells and upper-quartile sample wells for the separation statistics
SEP_MIN_BLANKS = 3
SEP_MIN_UPPER = 4
#: share of the plate's sample wells (by rate) that form its upper distribution
UPPER_QUANTILE = 0.75


# --------------------------------------------------------------------------- Z'-factor
def zprime(positive, negative, ddof: int = 1) -> float:
    """Z'-factor of two control groups (NaN values ignored); see the module docstring.

    Returns NaN when either group has fewer than ``ddof + 1`` values, ``1.0`` when both SDs are
    zero and the means differ, ``-inf`` when the means are equal.
    """
    p = np.asarray(positive, dtype=float)
    n = np.asarray(negative, dtype=float)
    p, n = p[np.isfinite(p)], n[np.isfinite(n)]
    if p.size <= ddof or n.size <= ddof:
        return float("nan")
    return float(_zprime_from_moments(p.mean(), p.std(ddof=ddof), n.mean(), n.std(ddof=ddof)))


def z_factor(samples, control, ddof: int = 1) -> float:
    """Z-factor of library samples against a control (same formula on samples; Gold Book 'Z factor')."""
    return zprime(samples, control, ddof=ddof)


def robust_zprime(positive, negative) -> float:
    """Z'-factor with medians and 1.4826 x MAD in place of means and SDs (NaN values ignored).

    NaN when either group has fewer than two values; the edge cases of :func:`zprime` otherwise.
    """
    p, n = _finite(positive), _finite(negative)
    if p.size < 2 or n.size < 2:
        return float("nan")
    return float(_zprime_from_moments(np.median(p), _mad(p), np.median(n), _mad(n)))


def ssmd(positive, negative, *, robust: bool = False) -> float:
    """Strictly standardised mean difference (Zhang, Genomics 2007, 89, 552) of two independent groups:
    ``(mean1 - mean2) / sqrt(sd1^2 + sd2^2)`` (sample SDs, ddof 1), or with ``robust`` medians and
    1.4826 x MAD. NaN with fewer than two values in a group; +/-inf when both spreads are zero and
    the centres differ.
    """
    p, n = _finite(positive), _finite(negative)
    if p.size < 2 or n.size < 2:
        return float("nan")
    if robust:
        return float(_ssmd_from_moments(np.median(p), _mad(p), np.median(n), _mad(n)))
    return float(_ssmd_from_moments(p.mean(), p.std(ddof=1), n.mean(), n.std(ddof=1)))


def _finite(x) -> np.ndarray:
    a = np.asarray(x, dtype=float)
    return a[np.isfinite(a)]


def _mad(a: np.ndarray) -> float:
    return float(MAD_NORMAL * np.median(np.abs(a - np.median(a))))


def _ssmd_from_moments(m1, s1, m2, s2):
    m1, s1, m2, s2 = (np.asarray(v, dtype=float) for v in (m1, s1, m2, s2))
    with np.errstate(divide="ignore", invalid="ignore"):
        b = (m1 - m2) / np.sqrt(s1 ** 2 + s2 ** 2)
    return np.where((m1 == m2) & ~(np.sqrt(s1 ** 2 + s2 ** 2) > 0), 0.0, b)


def _zprime_from_moments(mu_p, sd_p, mu_n, sd_n):
    """Vectorised Z' from means and SDs with the edge cases of :func:`zprime`."""
    mu_p, sd_p, mu_n, sd_n = (np.asarray(v, dtype=float) for v in (mu_p, sd_p, mu_n, sd_n))
    gap = np.abs(mu_p - mu_n)
    spread = 3.0 * (sd_p + sd_n)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = 1.0 - spread / gap
    z = np.where(gap == 0, -np.inf, z)
    return np.where(np.isfinite(mu_p) & np.isfinite(mu_n) & np.isfinite(spread), z, np.nan)


# --------------------------------------------------------------------------- median polish
def _nanmedian(a: np.ndarray, axis: int) -> np.ndarray:
    """Median along ``axis`` ignoring NaN, NaN for an all-NaN slice (no warning).

    The same numbers as ``np.nanmedian`` (mean of the two middle values of the sorted finite
    values, ``(low + high) / 2``) from one ``np.sort`` (NaN sorts last), without its masked-array
    detour, which dominated the median polish of a few hundred plates.
    """
    a = np.asarray(a, dtype=float)
    if a.shape[axis] == 0:
        return np.full(np.delete(a.shape, axis), np.nan)
    srt = np.sort(a, axis=axis)
    n = np.count_nonzero(~np.isnan(a), axis=axis, keepdims=True)
    hi = n // 2
    lo = np.where(n % 2 == 1, hi, hi - 1).clip(min=0)
    low = np.take_along_axis(srt, lo, axis=axis)
    high = np.take_along_axis(srt, hi, axis=axis)
    med = np.squeeze((low + high) / 2.0, axis=axis)
    return np.where(np.squeeze(n, axis=axis) > 0, med, np.nan)


def median_polish(x, eps: float = 0.01, maxiter: int = 10):
    """Tukey median polish of a matrix (2-D) or a stack of plates (3-D, plates first).

    A port of R ``stats::medpolish(x, eps, maxiter, na.rm = TRUE)``: rows first, the median of
    the column effects moved into the overall term, then columns, then the median of the row
    effects; stops when the sum of |residuals| is 0 or changes by less than ``eps`` x the sum.
    NaN cells are missing (so plates of different formats can be stacked with NaN padding).
    Each plate of a stack converges on its own.

    Returns ``(overall, row, col, residuals, iterations, converged)`` with the plate axis kept
    when the input is 3-D.
    """
    z = np.array(x, dtype=float, copy=True)
    squeeze = z.ndim == 2
    if squeeze:
        z = z[None]
    n_p, n_r, n_c = z.shape
    t = np.zeros(n_p)
    r = np.zeros((n_p, n_r))
    c = np.zeros((n_p, n_c))
    oldsum = np.zeros(n_p)
    active = np.ones(n_p, dtype=bool)
    converged = np.zeros(n_p, dtype=bool)
    iters = np.zeros(n_p, dtype=int)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows/columns: their effect stays NaN
        for _ in range(maxiter):
            a = active[:, None]
            rdelta = _nanmedian(z, axis=2)
            z_new = z - rdelta[:, :, None]
            r_new = r + rdelta
            delta = _nanmedian(c, axis=1)
            c_new = c - delta[:, None]
            t_new = t + delta
            cdelta = _nanmedian(z_new, axis=1)
            z_new = z_new - cdelta[:, None, :]
            c_new = c_new + cdelta
            delta = _nanmedian(r_new, axis=1)
            r_new = r_new - delta[:, None]
            t_new = t_new + delta
            z = np.where(a[:, :, None], z_new, z)
            r = np.where(a, r_new, r)
            c = np.where(a, c_new, c)
            t = np.where(active, t_new, t)
            iters = iters + active
            newsum = np.nansum(np.abs(z), axis=(1, 2))
            done = active & ((newsum == 0) | (np.abs(newsum - oldsum) < eps * newsum))
            converged |= done
            oldsum = np.where(active, newsum, oldsum)
            active &= ~done
            if not active.any():
                break
    if squeeze:
        return float(t[0]), r[0], c[0], z[0], int(iters[0]), bool(converged[0])
    return t, r, c, z, iters, converged


def _residual_mad(stack: np.ndarray) -> np.ndarray:
    """Each plate's (unscaled) MAD over the non-missing cells of a 3-D residual stack."""
    flat = stack.reshape(stack.shape[0], -1)
    med = _nanmedian(flat, axis=1)
    return _nanmedian(np.abs(flat - med[:, None]), axis=1)


def bscores(residuals, mad_scale: float = MAD_NORMAL):
    """B-scores of a residual matrix or stack (plates first): residual / (mad_scale x MAD).

    The MAD is taken over each plate's non-missing residuals. A plate whose MAD is 0 gets NaN
    B-scores and a :class:`DataQualityWarning`.
    """
    res = np.asarray(residuals, dtype=float)
    stack = res if res.ndim == 3 else res[None]
    out, mad = _bscores_and_mad(stack, mad_scale)
    if np.any(~(mad > 0) & np.isfinite(mad)):
        warnings.warn("median-polish residual MAD is 0 on a plate; its B-scores are undefined (NaN)",
                      DataQualityWarning, stacklevel=2)
    return out if res.ndim == 3 else out[0]


def _bscores_and_mad(stack: np.ndarray, mad_scale: float):
    mad = _residual_mad(stack)
    scale = np.where(~(mad > 0), np.nan, mad * mad_scale)
    return stack / scale[:, None, None], mad


def _well_values(w: pd.DataFrame, value: str) -> pd.Series:
    col = {"rate": "rate_mM_per_h", "conversion": "last_conversion_pct"}.get(value)
    if col is None:
        raise ValueError(f"value must be 'rate' or 'conversion', not {value!r}")
    return pd.to_numeric(w[col], errors="coerce")


def _bscore_cube(w: pd.DataFrame, data, value: str, mad_scale: float) -> dict:
    """Median polish of every plate at once on a (plates x rows x cols) stack of sample wells.

    Returns the plate index (``plates``: data.plates order, as text), per-well arrays aligned
    with ``kin.wells`` (``p_i`` plate position or -1, ``rows, cols, vals, use, fmt``), the
    residual and B-score stacks and each plate's residual MAD (NaN for a plate without cells).
    ``w`` is ``kin.wells`` or the rate step's ``kin.per_well`` (the same wells, rates and layout).
    """
    plates = data.plates[["plate", "format", "n_rows", "n_cols"]].drop_duplicates("plate")
    pidx = pd.Index(plates["plate"].astype(str))
    n_r = int(plates["n_rows"].max()) if len(plates) else 0
    n_c = int(plates["n_cols"].max()) if len(plates) else 0
    vals = _well_values(w, value).to_numpy(dtype=float)
    p_i = pidx.get_indexer(w["plate"].astype(str))
    rows = w["row"].to_numpy(dtype=np.int64)
    cols = w["col"].to_numpy(dtype=np.int64)
    use = (w["role"].astype(str).to_numpy() == "sample") & np.isfinite(vals) & (p_i >= 0)
    cube = np.full((len(pidx), max(n_r, 1), max(n_c, 1)), np.nan)
    cube[p_i[use], rows[use], cols[use]] = vals[use]
    if len(pidx):
        _, _, _, res, _, _ = median_polish(cube)
        b, mad = _bscores_and_mad(res, mad_scale)
    else:
        res = b = cube
        mad = np.full(0, np.nan)
    fmt_by_plate = plates["format"].to_numpy()
    fmt = np.where(p_i >= 0, fmt_by_plate[np.maximum(p_i, 0)] if len(pidx) else 0, 0)
    fmt = np.where(pd.isna(fmt), 0, fmt).astype(np.int64)
    return {"plates": pidx, "p_i": p_i, "rows": rows, "cols": cols, "vals": vals, "use": use,
            "fmt": fmt, "res": res, "b": b, "mad": mad}


def well_bscores(kin, data, *, value: str = "rate", mad_scale: float = MAD_NORMAL) -> pd.DataFrame:
    """B-score of every sample well, per plate (for the edge map).

    Columns: ``plate, well, row, col, role, catalyst, is_edge, value, residual, bscore`` where
    ``value`` is the well's initial rate (mM/h) or last conversion (%) per ``value``; non-sample
    wells are listed with NaN residual and B-score.
    """
    w = kin.wells
    cb = _bscore_cube(w, data, value, mad_scale)
    resid, bs = _cells_at_wells(cb)
    return pd.DataFrame({
        "plate": w["plate"].to_numpy(), "well": w["well"].to_numpy(), "row": cb["rows"], "col": cb["cols"],
        "role": w["role"].to_numpy(), "catalyst": w["catalyst"].to_numpy(),
        "is_edge": is_edge(cb["rows"], cb["cols"], cb["fmt"]), "value": cb["vals"], "residual": resid, "bscore": bs,
    })


def _cells_at_wells(cb: dict) -> tuple[np.ndarray, np.ndarray]:
    """Residual and B-score of each well of kin.wells (NaN off the stack)."""
    use, p_i, rows, cols = cb["use"], cb["p_i"], cb["rows"], cb["cols"]
    resid = np.full(len(use), np.nan)
    bs = np.full(len(use), np.nan)
    resid[use] = cb["res"][p_i[use], rows[use], cols[use]]
    bs[use] = cb["b"][p_i[use], rows[use], cols[use]]
    return resid, bs


# --------------------------------------------------------------------------- Mann-Whitney U
def mannwhitneyu_grouped(values, in_x, group, n_groups: int) -> tuple[np.ndarray, np.ndarray]:
    """Two-sided Mann-Whitney U test of ``x`` against ``y`` inside each group, all groups at once.

    ``values`` are pooled observations, ``in_x`` marks those of the first sample and ``group``
    (ints in ``0 .. n_groups-1``) the test each belongs to. Returns ``(u1, p)`` per group (NaN
    where a side is empty), the statistic and p-value that ``scipy.stats.mannwhitneyu(x, y,
    alternative="two-sided")`` gives for that group on its own with its defaults (scipy 1.7+):
    the exact null distribution when a side has at most 8 values and there are no ties,
    otherwise the normal approximation with tie correction and continuity correction. Ranks
    are mid-ranks within each group from one sort of (group, value); the exact p-values come
    from scipy itself, batched over groups of the same sizes (a loop over size pairs, not over
    groups). NaN values are not allowed.
    """
    v = np.asarray(values, dtype=float)
    x = np.asarray(in_x, dtype=bool)
    g = np.asarray(group, dtype=np.int64)
    if np.isnan(v).any():
        raise ValueError("mannwhitneyu_grouped: values must not contain NaN")
    n1 = np.bincount(g[x], minlength=n_groups).astype(float)
    n2 = np.bincount(g[~x], minlength=n_groups).astype(float)
    u1 = np.full(n_groups, np.nan)
    p = np.full(n_groups, np.nan)
    if v.size == 0:
        return u1, p
    order = np.lexsort((v, g))
    vs, gs, xs = v[order], g[order], x[order]
    n = v.size
    new_run = np.ones(n, dtype=bool)
    new_run[1:] = (gs[1:] != gs[:-1]) | (vs[1:] != vs[:-1])
    run_start = np.flatnonzero(new_run)
    run_len = np.diff(np.append(run_start, n))
    group_start = np.searchsorted(gs, gs, side="left")
    ordinal = (np.arange(n) - group_start + 1).astype(float)
    rank = np.repeat(ordinal[run_start] + (run_len - 1) / 2.0, run_len)
    r1 = np.bincount(gs[xs], weights=rank[xs], minlength=n_groups)
    tie_term = np.bincount(gs[run_start], weights=(run_len.astype(float) ** 3 - run_len), minlength=n_groups)
    ties = np.bincount(gs[run_start], weights=(run_len > 1), minlength=n_groups) > 0
    ok = (n1 > 0) & (n2 > 0)
    u1 = np.where(ok, r1 - n1 * (n1 + 1) / 2, np.nan)
    u = np.maximum(u1, n1 * n2 - u1)
    # normal approximation, scipy.stats._mannwhitneyu._get_mwu_z (tie-corrected SD, continuity 0.5)
    nn = n1 + n2
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.sqrt(n1 * n2 / 12 * ((nn + 1) - tie_term / (nn * (nn - 1))))
        z = (u - n1 * n2 / 2 - 0.5) / s
    p = np.where(ok, np.clip(2 * _sp_special.ndtr(-z), 0.0, 1.0), np.nan)
    exact = ok & ~((n1 > 8) & (n2 > 8)) & ~ties
    if exact.any():
        from scipy import stats as _st  # only here: a command without an exact test never loads scipy.stats

        ex_x = exact[gs] & xs
        ex_y = exact[gs] & ~xs
        sizes = pd.DataFrame({"n1": n1[exact], "n2": n2[exact], "g": np.flatnonzero(exact)})
        for (a, b), part in sizes.groupby(["n1", "n2"], sort=False):  # a loop over size pairs
            sel = np.zeros(n_groups, dtype=bool)
            sel[part["g"].to_numpy()] = True
            xa = vs[ex_x & sel[gs]].reshape(len(part), int(a))
            ya = vs[ex_y & sel[gs]].reshape(len(part), int(b))
            res = _st.mannwhitneyu(xa, ya, alternative="two-sided", method="exact", axis=1)
            p[part["g"].to_numpy()] = res.pvalue
    return u1, p


# --------------------------------------------------------------------------- Arrhenius prediction
def predict_ln(arr: pd.DataFrame, catalyst: str, temperature_c) -> tuple[np.ndarray, np.ndarray]:
    """ln of one catalyst's Arrhenius prediction and its SE at temperatures (degC), via
    :func:`screenlab.kinetics.arrhenius.predict_tof`; NaN when the catalyst has no fitted row."""
    from screenlab.kinetics.arrhenius import predict_tof

    t = np.atleast_1d(np.asarray(temperature_c, dtype=float))
    if arr is None or arr.empty or "catalyst" not in arr:
        return np.full(t.shape, np.nan), np.full(t.shape, np.nan)
    row = arr[arr["catalyst"].astype(str) == catalyst].head(1)
    if row.empty:
        return np.full(t.shape, np.nan), np.full(t.shape, np.nan)
    p = predict_tof(row, t)
    return np.log(p["tof_per_h"].to_numpy(dtype=float)), p["ln_tof_se"].to_numpy(dtype=float)


# --------------------------------------------------------------------------- control chart
def control_chart(kin, data=None) -> pd.DataFrame:
    """The benchmark's TOF per plate with Shewhart centre line and limits.

    Rates depend on temperature, so plates are made comparable by the benchmark's own
    Arrhenius line: each plate's value is ``log_ratio = ln(TOF on plate / TOF predicted at the
    plate's temperature)`` (basis ``arrhenius``). When the benchmark has no Arrhenius fit (one
    temperature), the prediction is the geometric mean of the plates at the same temperature
    (basis ``per_temperature``). The chart's centre line is the mean log ratio and its limits
    mean +/- 3 SD (Shewhart) over all plates of that benchmark (``centre, lower, upper``, on
    the log-ratio scale; ``lower_tof_per_h, upper_tof_per_h`` on the plate's own scale).

    With a handful of plates a bad plate inflates the SD it is judged by (with n points, no
    point can lie more than (n-1)/sqrt(n) sample SDs from their mean: under 3 for n <= 10), so
    the flag ``reference_out_of_limits`` uses leave-one-out limits: the plate against the mean
    ``m_o`` and SD ``s_o`` of the *other* plates as a new observation,
    ``loo_t = (x - m_o) / (s_o sqrt(1 + 1/n_o))``, flagged when |loo_t| exceeds the Student t
    quantile with the 3-sigma tail rate (two-sided 0.27 %, the Shewhart false-alarm rate) on
    the others' degrees of freedom (``loo_limit``; needs at least 4 plates). TOF is used when
    the benchmark wells have one, else the rate in mM/h.

    Columns: ``plate, run_date, catalyst, temperature_c, n_wells, value, value_unit,
    expected, log_ratio, centre, lower, upper, lower_tof_per_h, upper_tof_per_h, loo_t,
    loo_limit, basis, flags`` (``value``/``expected`` in ``value_unit``: h-1 for TOF, mM/h for rate).
    """
    cols = ["plate", "run_date", "catalyst", "temperature_c", "n_wells", "value", "value_unit", "expected",
            "log_ratio", "centre", "lower", "upper", "lower_tof_per_h", "upper_tof_per_h", "loo_t", "loo_limit", "basis", "flags"]
    w = kin.wells
    need = [c for c in ("catalyst", "plate", "temperature_c", "rate_mM_per_h", "tof_per_h") if c in w]
    ref = w.loc[(w["role"].astype(str) == "reference").to_numpy(), need]  # only the columns used below
    if ref.empty:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in cols})
    tof = pd.to_numeric(ref.get("tof_per_h", pd.Series(np.nan, index=ref.index)), errors="coerce")
    use_tof = bool(np.isfinite(tof).any())
    val = tof if use_tof else pd.to_numeric(ref["rate_mM_per_h"], errors="coerce")
    v = val.where(val > 0)
    ref = ref.assign(_v=v, _ln=np.log(v))  # geometric mean per plate: mean of the logs (NaN skipped)
    by = ref.groupby(["catalyst", "plate"], sort=True)   # one reduction each: cheaper than a named .agg
    per = pd.DataFrame({"temperature_c": by["temperature_c"].median(), "n_wells": by["_v"].count(),
                        "_lnv": by["_ln"].mean()}).reset_index()
    lnv = per["_lnv"].to_numpy(dtype=float)
    temp = per["temperature_c"].to_numpy(dtype=float)
    n_rows = len(per)
    lnexp, log_ratio, loo_t = (np.full(n_rows, np.nan) for _ in range(3))
    centre, lower, upper, loo_limit = (np.full(n_rows, np.nan) for _ in range(4))
    basis = np.full(n_rows, "", dtype=object)
    cat_text = per["catalyst"].astype(str).to_numpy(dtype=object)
    starts = _groups.first_rows(_groups.factorize(cat_text)[0])    # rows come sorted by benchmark
    for a, b in zip(starts, np.append(starts[1:], n_rows)):   # a loop over benchmarks (one or two)
        t = temp[a:b]
        ln_pred = predict_ln(kin.arrhenius, cat_text[a], t)[0] if use_tof else np.full(b - a, np.nan)
        t1 = np.round(t, 1)
        if use_tof and np.isfinite(ln_pred).all():
            basis[a:b] = "arrhenius"
            lnexp[a:b] = ln_pred
        else:
            basis[a:b] = "per_temperature"
            lnexp[a:b] = pd.Series(lnv[a:b]).groupby(t1).transform("mean").to_numpy(dtype=float)
        x = lnv[a:b] - lnexp[a:b]
        log_ratio[a:b] = x
        ok = np.isfinite(x)
        n = int(ok.sum())
        # per_temperature: each temperature's mean was used up, so the SD has n - (groups) df
        n_groups = (int(pd.Series(t1[ok]).nunique()) if basis[a] == "per_temperature" else 1)
        dof = n - n_groups
        c = float(np.nanmean(x)) if n else np.nan
        sd = float(np.sqrt(np.nansum((x - c) ** 2) / dof)) if dof >= 1 else np.nan
        centre[a:b], lower[a:b], upper[a:b] = c, c - 3 * sd, c + 3 * sd
        # leave-one-out mean and SD from running sums (vectorised over plates)
        s1, s2 = np.nansum(x), np.nansum(x * x)
        m = n - 1
        loo_mean = (s1 - x) / m if m >= 1 else np.full_like(x, np.nan)
        loo_dof = m - n_groups
        with np.errstate(invalid="ignore", divide="ignore"):
            loo_var = (s2 - x * x - m * loo_mean ** 2) / loo_dof if loo_dof >= 2 else np.full_like(x, np.nan)
            loo_t[a:b] = (x - loo_mean) / np.sqrt(np.where(loo_var > 0, loo_var, np.nan) * (1 + 1 / max(m, 1)))
        loo_limit[a:b] = float(t_ppf(1 - SHEWHART_TAIL / 2, loo_dof)) if loo_dof >= 2 else np.nan
    expected = np.exp(lnexp)
    with np.errstate(invalid="ignore"):
        beyond = np.abs(loo_t) > loo_limit
    res = pd.DataFrame({
        "plate": per["plate"].array, "catalyst": per["catalyst"].array, "temperature_c": temp,
        "n_wells": per["n_wells"].to_numpy(), "value": np.exp(lnv),
        "value_unit": pd.array(["h-1" if use_tof else "mM/h"] * n_rows, dtype="str"), "expected": expected,
        "log_ratio": log_ratio, "centre": centre, "lower": lower, "upper": upper,
        "lower_tof_per_h": expected * np.exp(lower) if use_tof else np.full(n_rows, np.nan),
        "upper_tof_per_h": expected * np.exp(upper) if use_tof else np.full(n_rows, np.nan),
        "loo_t": loo_t, "loo_limit": loo_limit, "basis": pd.array(basis, dtype="str"),
        "flags": pd.array(np.where(beyond, "reference_out_of_limits", ""), dtype="str")})
    if data is not None and "run_date" in data.plates:
        rd = data.plates.drop_duplicates("plate").set_index("plate")["run_date"]
        res["run_date"] = res["plate"].map(rd)
    else:
        res["run_date"] = pd.NA
    return res[cols].sort_values(["catalyst", "run_date", "plate"], na_position="last").reset_index(drop=True)


# --------------------------------------------------------------------------- per-plate summary
def _replicate_groups(w: pd.DataFrame, data, p_i: np.ndarray, role: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The sample wells on known plates (a mask over ``w``'s rows) and their replicate groups: same
    plate, catalyst, loading, substrate concentration, temperature and factor levels (NaN a level
    of its own), as one integer id per sample well."""
    keys = ["plate", "catalyst", "loading", "substrate_conc_mM", "temperature_c", *data.factor_names]
    keys = [k for k in keys if k in w]
    is_samp = (p_i >= 0) & (role == "sample")
    gid = _groups.group_index([w["plate"].astype(str)] + [w[k] for k in keys if k != "plate"],
                              np.flatnonzero(is_samp))
    return is_samp, gid


#: the edge test's columns of the plate-quality table
EDGE_COLUMNS = ("edge_basis", "edge_n", "interior_n", "edge_shift_pct", "edge_p", "bscore_max_abs")


def _edge_test(cb: dict, rate: np.ndarray, n_pl: int, is_samp: np.ndarray, gid: np.ndarray) -> dict[str, np.ndarray]:
    """The edge-versus-interior test of every plate at once (module docstring), with the largest
    |B-score| and the plates whose residual MAD is zero. Only the sample wells' values and
    positions enter it: blanks and references do not."""
    p_i = cb["p_i"]
    s_rate, s_plate = rate[is_samp], p_i[is_samp]
    resid, _ = _cells_at_wells(cb)
    edge = is_edge(cb["rows"], cb["cols"], cb["fmt"])
    bw = np.isfinite(resid)                                  # wells with a residual (all on known plates)
    has_res = np.bincount(p_i[bw], minlength=n_pl) > 0      # plates with at least one residual
    mad_zero = has_res & ~(cb["mad"] > 0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)      # all-NaN plates stay NaN
        bmax = np.nanmax(np.abs(cb["b"]).reshape(n_pl, -1), axis=1) if n_pl else np.full(0, np.nan)
    # replicate deviations ln(rate / median of the well's replicate group on the plate), over
    # positive rates, kept for groups of two or more
    pos = s_rate > 0
    grp = pd.Series(s_rate[pos]).groupby(gid[pos])
    rep_dev = np.log(s_rate[pos] / grp.transform("median").to_numpy())
    keep = grp.transform("count").to_numpy() >= 2
    rep_p = s_plate[pos][keep]
    rep_edge = edge[is_samp][pos][keep]
    rep_dev = rep_dev[keep]
    ne_rep = np.bincount(rep_p[rep_edge], minlength=n_pl)
    ni_rep = np.bincount(rep_p[~rep_edge], minlength=n_pl)
    use_rep = (ne_rep >= EDGE_MIN_WELLS) & (ni_rep >= EDGE_MIN_WELLS)
    ne_b = np.bincount(p_i[bw & edge], minlength=n_pl)
    ni_b = np.bincount(p_i[bw & ~edge], minlength=n_pl)
    edge_n = np.where(has_res, np.where(use_rep, ne_rep, ne_b), 0)
    interior_n = np.where(has_res, np.where(use_rep, ni_rep, ni_b), 0)
    tested = has_res & (edge_n >= EDGE_MIN_WELLS) & (interior_n >= EDGE_MIN_WELLS)
    by_rep = tested & use_rep
    by_b = tested & ~use_rep
    with np.errstate(divide="ignore", invalid="ignore"):
        mean_e = np.bincount(rep_p[rep_edge], weights=rep_dev[rep_edge], minlength=n_pl) / ne_rep
        mean_i = np.bincount(rep_p[~rep_edge], weights=rep_dev[~rep_edge], minlength=n_pl) / ni_rep
    shift = np.where(by_rep, 100 * (np.exp(mean_e - mean_i) - 1), np.nan)
    # pooled values of the tested plates: replicate deviations or median-polish residuals
    rsel = by_rep[rep_p]
    bsel = bw & (p_i >= 0)
    bsel[bsel] = by_b[p_i[bsel]]
    t_val = np.concatenate([rep_dev[rsel], resid[bsel]])
    t_edge = np.concatenate([rep_edge[rsel], edge[bsel]])
    t_p = np.concatenate([rep_p[rsel], p_i[bsel]])
    # a plate whose values are all equal (or not all finite) gets no p-value, as np.ptp(...) > 0
    vmin = np.full(n_pl, np.inf)
    vmax = np.full(n_pl, -np.inf)
    np.minimum.at(vmin, t_p, t_val)
    np.maximum.at(vmax, t_p, t_val)
    spread = tested & (vmax - vmin > 0)
    rows_ok = spread[t_p]
    _, edge_p = mannwhitneyu_grouped(t_val[rows_ok], t_edge[rows_ok], t_p[rows_ok], n_pl)
    return {"edge_basis": np.where(by_rep, "replicates", np.where(by_b, "bscore", "")),
            "edge_n": edge_n.astype(np.int64), "interior_n": interior_n.astype(np.int64),
            "edge_shift_pct": shift, "edge_p": np.where(spread, edge_p, np.nan),
            "bscore_max_abs": np.where(has_res, bmax, np.nan), "bscore_undefined": mad_zero}


def edge_test(wells: pd.DataFrame, data, *, bscore_value: str = "rate") -> pd.DataFrame:
    """The edge test of :func:`plate_quality` on its own: one row per plate of ``data.plates``
    (first occurrence, as text) with ``plate, edge_basis, edge_n, interior_n, edge_shift_pct,
    edge_p, bscore_max_abs``, ``bscore_undefined`` (the residual MAD is zero) and ``edge_effect``
    (``edge_p`` < :data:`EDGE_ALPHA`), the same values as ``plate_quality``'s columns and flags.

    It reads only the sample wells' rates and positions, so it can run on the rate step's
    per-well frame (``kin.per_well``) before the blank step: :func:`screenlab.pipeline.analyse`
    decides so which ring blanks to leave out without a second pass over blanks and turnover.
    """
    role = wells["role"].astype(str).to_numpy()
    rate = pd.to_numeric(wells["rate_mM_per_h"], errors="coerce").to_numpy(dtype=float)
    cb = _bscore_cube(wells, data, bscore_value, MAD_NORMAL)
    n_pl = len(cb["plates"])
    is_samp, gid = _replicate_groups(wells, data, cb["p_i"], role)
    e = _edge_test(cb, rate, n_pl, is_samp, gid)
    out = pd.DataFrame({"plate": cb["plates"].to_numpy()})
    for c in EDGE_COLUMNS:
        out[c] = e[c]
    out["bscore_undefined"] = e["bscore_undefined"]
    out["edge_effect"] = out["edge_p"] < EDGE_ALPHA
    return out


def plate_quality(kin, data, settings=None, *, bscore_value: str = "rate", control=None,
                  edge=None) -> pd.DataFrame:
    """One row per plate: Z', replicate CVs, blank trend, edge effect, control chart, status.

    Columns:
    ``plate, format, temperature_c, n_sample, n_reference, n_blank,
    reference_mean_mM_per_h, reference_sd_mM_per_h, blank_mean_mM_per_h, blank_sd_mM_per_h,
    zprime`` (ddof 1), ``signal_window`` ((|mu+ - mu-| - 3(sd+ + sd-)) / sd+, from memory),
    ``n_replicate_groups, replicate_cv_median_pct`` (median CV of the plate's sample replicate
    groups: same catalyst, loading, substrate concentration, temperature and factor levels;
    groups of 2 or more wells), ``reference_cv_pct``, ``blank_expected_mM_per_h,
    blank_ratio, blank_z`` (the plate's blank against the blank Arrhenius line; the worst
    temperature on a gradient plate, largest |z|, the last in the blanks table's order among
    equals, e.g. temperatures without a z), ``edge_basis`` (replicates | bscore | '' when untested),
    ``edge_n, interior_n``, ``edge_shift_pct`` (replicates basis: how much higher ring wells
    run than interior ones relative to their replicate groups, geometric mean, percent), ``edge_p`` (Mann-Whitney U),
    ``bscore_max_abs``, ``reference_loo_t`` (control chart), ``blank_lod_mM_per_h`` (detection limit
    of the blank mean), ``sample_active_pct`` (sample wells detectably above the blank),
    ``upper_n, upper_median_mM_per_h, upper_cv_pct, separation_basis`` (the upper-quartile sample
    wells), ``robust_zprime``,
    ``ssmd`` (between those and the blanks; see the module docstring), ``status`` (ok | flagged |
    unchecked | failed) and ``flags`` (see :data:`FLAGS`). ``control``: the benchmark's control
    chart when it is already made (:func:`control_chart` of the same ``kin`` and ``data``);
    ``edge``: the edge test when it is already made (:func:`edge_test` of the same sample wells'
    values, e.g. on ``kin.per_well``, and ``bscore_value``).
    """
    from screenlab.model import CampaignData
    from screenlab.settings import AnalysisSettings

    if isinstance(kin, CampaignData):  # the order before (data, kin) would fail far from here
        raise TypeError("plate_quality(kin, data, settings): the kinetics result comes first, as in control_chart")
    settings = settings or getattr(kin, "settings", None) or AnalysisSettings()
    w = kin.wells
    role = w["role"].astype(str).to_numpy()
    rate = pd.to_numeric(w["rate_mM_per_h"], errors="coerce").to_numpy(dtype=float)
    finite = np.isfinite(rate)
    plates = data.plates.drop_duplicates("plate")
    index = pd.Index(plates["plate"].astype(str), name="plate")   # the plates, first occurrence, as text
    n_pl = len(index)
    p_i = index.get_indexer(w["plate"].astype(str))   # each well's plate position, -1 for an unknown plate
    known = p_i >= 0
    # the table's columns, one array per column (one frame built at the end: a column set on a
    # frame costs more than the arithmetic behind it)
    out: dict = {"format": plates["format"].array, "temperature_c": plates["temperature_c"].array}

    for r in ("sample", "reference", "blank"):
        out[f"n_{r}"] = np.bincount(p_i[known & finite & (role == r)], minlength=n_pl).astype(np.int64)
    ctrl = known & np.isin(role, ["reference", "blank"])
    ctrl_role = np.where(role[ctrl] == "reference", 0, 1)
    by = pd.Series(np.where(finite, rate, np.nan)[ctrl]).groupby([p_i[ctrl], ctrl_role])
    mom = pd.DataFrame({"mean": by.mean(), "std": by.std()})
    for code, name in ((0, "reference"), (1, "blank")):
        sub = mom.xs(code, level=1) if code in mom.index.get_level_values(1) else pd.DataFrame(columns=["mean", "std"])
        out[f"{name}_mean_mM_per_h"] = sub["mean"].reindex(range(n_pl)).to_numpy(dtype=float)
        out[f"{name}_sd_mM_per_h"] = sub["std"].reindex(range(n_pl)).to_numpy(dtype=float)
    mp, sp = out["reference_mean_mM_per_h"], out["reference_sd_mM_per_h"]
    mn, sn = out["blank_mean_mM_per_h"], out["blank_sd_mM_per_h"]
    has_ref = out["n_reference"] >= 2
    has_blank = out["n_blank"] >= 2
    enough = has_ref & has_blank
    out["zprime"] = np.where(enough, _zprime_from_moments(mp, sp, mn, sn), np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        out["signal_window"] = np.where(enough, (np.abs(mp - mn) - 3 * (sp + sn)) / sp, np.nan)
        out["reference_cv_pct"] = np.where(has_ref, 100 * sp / np.abs(mp), np.nan)

    is_samp, gid = _replicate_groups(w, data, p_i, role)
    s_rate, s_plate = rate[is_samp], p_i[is_samp]
    # replicate CVs
    has = ~np.isnan(s_rate)
    if has.any():
        by = pd.Series(s_rate[has]).groupby(gid[has])
        g = pd.DataFrame({"mean": by.mean(), "std": by.std(), "count": by.count()})
        g_plate = np.zeros(int(gid.max()) + 1, dtype=np.int64)
        g_plate[gid] = s_plate
        g = g.assign(plate=g_plate[g.index.to_numpy()])
        g = g[(g["count"] >= 2) & (g["mean"] > 0)]
        by = (100 * g["std"] / g["mean"]).groupby(g["plate"])
        cv = pd.DataFrame({"median": by.median(), "count": by.count()})
        out["n_replicate_groups"] = cv["count"].reindex(range(n_pl)).fillna(0).astype(int).to_numpy()
        out["replicate_cv_median_pct"] = cv["median"].reindex(range(n_pl)).to_numpy(dtype=float)
    else:
        out["n_replicate_groups"] = np.zeros(n_pl, dtype=np.int64)
        out["replicate_cv_median_pct"] = np.full(n_pl, np.nan)

    # blank against the campaign's blank Arrhenius line
    for c in ("blank_expected_mM_per_h", "blank_ratio", "blank_z"):
        out[c] = np.full(n_pl, np.nan)
    bl = getattr(kin, "blanks", None)
    if bl is not None and len(bl):
        from screenlab.kinetics.arrhenius import uncatalysed_points

        # the points the line is fitted on: the main substrate level, no level scaled from another
        # (a gradient plate's 50 mM blanks are not on the 200 mM line)
        pts = uncatalysed_points(bl)
        obs = pd.to_numeric(pts["rate"], errors="coerce").to_numpy(dtype=float)
        se = pd.to_numeric(pts["se"], errors="coerce").to_numpy(dtype=float)
        ln_pred, ln_pred_se = predict_ln(kin.arrhenius, UNCATALYSED, pts["temperature_c"].to_numpy(dtype=float))
        with np.errstate(divide="ignore", invalid="ignore"):
            ln_obs = np.log(np.where(obs > 0, obs, np.nan))
            z = (ln_obs - ln_pred) / np.sqrt((se / obs) ** 2 + ln_pred_se ** 2)
        # each plate's worst temperature (largest |z|; the last of equals, a missing z below any)
        at = index.get_indexer(pts["plate"].astype(str))
        row = _last_of_largest(at, np.where(np.isnan(z), -1.0, np.abs(z)), n_pl)
        hit = row >= 0
        for c, v in (("blank_expected_mM_per_h", np.exp(ln_pred)), ("blank_ratio", obs / np.exp(ln_pred)),
                     ("blank_z", z)):
            out[c][hit] = v[row[hit]]

    # the blanks' detection limit, the share of detectably active sample wells, and the separation
    # of the upper-quartile sample wells from the blanks (robust Z', robust SSMD)
    sep = _separation(w, role, rate, p_i, n_pl, getattr(kin, "blanks", None), index, is_samp, gid)
    for c in ("blank_lod_mM_per_h", "sample_active_pct", "upper_n", "upper_median_mM_per_h", "upper_cv_pct",
              "separation_basis", "robust_zprime", "ssmd"):
        out[c] = sep[c]

    # B-scores and the edge test, every plate at once (the B-score stack indexes plates as
    # ``index``: data.plates' plates, first occurrence, as text)
    if edge is None:
        cb = _bscore_cube(w, data, bscore_value, MAD_NORMAL)
        e = _edge_test(cb, rate, n_pl, is_samp, gid)
    else:
        e = edge.set_index("plate").reindex(index)
    for c in EDGE_COLUMNS:
        out[c] = np.asarray(e[c])
    bscore_undefined = np.asarray(e["bscore_undefined"], dtype=bool)

    # control chart of the benchmark
    cc = control if control is not None else control_chart(kin, data)
    out["reference_loo_t"] = np.full(n_pl, np.nan)
    out_of_limits = np.zeros(n_pl, dtype=bool)
    if len(cc):
        # each plate's worst benchmark (largest |loo_t| / limit; the last of equals)
        with np.errstate(invalid="ignore", divide="ignore"):
            a = np.abs(cc["loo_t"].to_numpy(dtype=float)) / cc["loo_limit"].to_numpy(dtype=float)
        row = _last_of_largest(index.get_indexer(cc["plate"].astype(str)), np.where(np.isnan(a), -1.0, a), n_pl)
        hit = row >= 0
        out["reference_loo_t"][hit] = cc["loo_t"].to_numpy(dtype=float)[row[hit]]
        cc_flags = cc["flags"].fillna("").astype(str).to_numpy(dtype=object)
        out_of_limits[hit] = ["reference_out_of_limits" in f for f in cc_flags[row[hit]]]   # a few plates

    zp = out["zprime"]
    no_ctrl = ~has_blank
    unchecked = has_blank & ~has_ref
    failed = no_ctrl | (enough & (zp < 0))
    with np.errstate(invalid="ignore"):
        fl = {"no_controls": no_ctrl, "no_benchmark": ~has_ref, "failed": failed,
              "zprime_low": zp < settings.zprime_min,
              "edge_effect": out["edge_p"].astype(float) < EDGE_ALPHA,
              "high_cv": out["replicate_cv_median_pct"] > CV_MAX_PCT,
              "blank_off_trend": np.abs(out["blank_z"]) > BLANK_Z_MAX,
              "reference_out_of_limits": out_of_limits, "bscore_undefined": bscore_undefined,
              "low_separation": unchecked & (out["ssmd"] < SSMD_MIN),
              "no_detectable_activity": unchecked & (out["n_sample"] > 0) & (out["sample_active_pct"] == 0)}
    m = np.column_stack([np.asarray(v, dtype=bool) for v in fl.values()]) if n_pl else np.zeros((0, len(fl)), bool)
    flags = np.full(n_pl, "", dtype=object)
    for j, code in enumerate(fl):  # a loop over the flag codes
        flags = np.where(m[:, j], np.where(flags == "", code, flags + ";" + code), flags)
    out["flags"] = flags
    out["status"] = np.where(failed, "failed", np.where(unchecked, "unchecked",
                                                         np.where(m.any(axis=1), "flagged", "ok")))
    return pd.DataFrame({"plate": index, **{c: out[c] for c in schema.QUALITY.names[1:]}})


def blank_trend_gaps(kin, quality: pd.DataFrame) -> pd.DataFrame:
    """The plates with blank wells whose blank is not checked against the campaign's blank
    Arrhenius line (``blank_z`` missing in ``quality``, from :func:`plate_quality`), each with the
    reason in words. Columns ``plate, reason``; no rows when every such plate was checked."""
    from screenlab.kinetics.arrhenius import uncatalysed_points
    from screenlab.kinetics.sites import has_flag

    empty = pd.DataFrame({"plate": pd.Series(dtype=object), "reason": pd.Series(dtype=object)})
    if quality is None or quality.empty:
        return empty
    n_blank = pd.to_numeric(quality["n_blank"], errors="coerce").to_numpy(dtype=float)
    untested = quality.loc[(n_blank > 0) & quality["blank_z"].isna().to_numpy(), "plate"].astype(str).tolist()
    if not untested:
        return empty
    ln_pred, ln_se = predict_ln(kin.arrhenius, UNCATALYSED, [25.0])   # is there a line, with an error?
    why = None
    if not np.isfinite(ln_pred).all():
        why = ("no blank Arrhenius line to compare with (blanks above their detection limit at fewer than two "
               "temperatures)")
    elif not np.isfinite(ln_se).all():
        why = ("the blank Arrhenius line is drawn through two temperatures only: it has no error to judge a "
               "plate's blank by")
    if why is not None:
        return pd.DataFrame({"plate": untested, "reason": [why] * len(untested)})
    bl = kin.blanks
    pts = uncatalysed_points(bl)
    on_line = set(pts["plate"].astype(str).tolist())
    level = float(pts["conc_mM"].iloc[0]) if len(pts) else np.nan
    own = bl[bl["n_blanks"] > 0]
    if "flags" in own:
        own = own[~has_flag(own["flags"], "blank_scaled")]
    reasons = []
    for plate in untested:                                   # a loop over the few plates not checked
        if plate in on_line:
            reasons.append("its blank rate is not positive, or has no standard error")
            continue
        conc = pd.to_numeric(own.loc[own["plate"].astype(str) == plate, "substrate_conc_mM"], errors="coerce")
        levels = ", ".join(f"{c:g}" for c in sorted(conc.dropna().unique()))
        reasons.append(f"its blanks are at {levels or 'an unknown'} mM substrate, the blank line at {level:g} mM (the "
                       f"level most blanks have): a background rate at another level is not on that line")
    return pd.DataFrame({"plate": untested, "reason": reasons})


def _last_of_largest(pos: np.ndarray, key: np.ndarray, n: int) -> np.ndarray:
    """For positions ``0 .. n-1``: the row (into ``pos``/``key``) with the largest ``key`` among the
    rows at that position, the last of equal keys (a stable sort by key, then the last row of each
    position), -1 where no row is there; rows at position -1 are left out."""
    order = np.lexsort((key, pos))                 # by position, then key; equal keys keep their order
    p = pos[order]
    last = np.append(p[1:] != p[:-1], True) & (p >= 0)
    best = np.full(n, -1, dtype=np.int64)
    best[p[last]] = order[last]
    return best


def _separation(w, role, rate, p_i, n_pl: int, blanks, plate_index, is_samp, gid) -> dict[str, np.ndarray]:
    """Per plate (positions 0..n_pl-1): detection limit, share of active sample wells, and the
    robust Z' / SSMD between the upper-quartile sample wells and the blanks (module docstring).

    ``is_samp`` marks the sample wells among ``w``'s rows and ``gid`` numbers their replicate groups.
    Vectorised over plates with group-bys on the plate position; NaN where a plate lacks the wells.
    """
    idx = range(n_pl)
    ok = (p_i >= 0) & np.isfinite(rate)
    bl = ok & (role == "blank")
    b_rate, b_p = rate[bl], p_i[bl]
    b_med = pd.Series(b_rate).groupby(b_p).median().reindex(idx).to_numpy(float)
    b_mad = MAD_NORMAL * pd.Series(np.abs(b_rate - b_med[b_p])).groupby(b_p).median().reindex(idx).to_numpy(float)
    b_sd = pd.Series(b_rate).groupby(b_p).std().reindex(idx).to_numpy(float)
    b_n = np.bincount(b_p, minlength=n_pl)
    # the kinetics' detection limit of the blank mean (the plate's worst temperature), else 3 SE here
    lod = np.full(n_pl, np.nan)
    if blanks is not None and len(blanks) and "blank_lod_mM_per_h" in blanks:
        per = (pd.to_numeric(blanks["blank_lod_mM_per_h"], errors="coerce")
               .groupby(blanks["plate"].astype(str).to_numpy()).max())
        lod = per.reindex(plate_index).to_numpy(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        lod = np.where(np.isfinite(lod), lod, 3 * b_sd / np.sqrt(b_n))
    # sample wells (in the order of is_samp, as gid) with a rate
    s_all = rate[is_samp]
    s_ok = np.isfinite(s_all)
    s_rate, s_p, s_g = s_all[s_ok], p_i[is_samp][s_ok], gid[s_ok]
    # a sample well is detectably active when its net rate exceeds 3 x the blank wells' SD
    if "net_rate_mM_per_h" in w:
        net = pd.to_numeric(w["net_rate_mM_per_h"], errors="coerce").to_numpy(float)[is_samp][s_ok]
    else:
        net = s_rate - b_med[s_p]
    n_s = np.bincount(s_p, minlength=n_pl)
    # ... and above its own error by 4 SE: with ~90 sample wells on a plate, 3 x a four-blank SD
    # alone lets a few dead wells through by chance (the SD of four values is itself uncertain)
    net_se = (pd.to_numeric(w["net_rate_se_mM_per_h"], errors="coerce").to_numpy(float)[is_samp][s_ok]
              if "net_rate_se_mM_per_h" in w else np.full(len(net), np.nan))
    with np.errstate(invalid="ignore", divide="ignore"):
        active = np.isfinite(net) & (net > 3 * b_sd[s_p]) & ~(net <= 4 * net_se)
        active_pct = np.where((n_s > 0) & np.isfinite(b_sd), 100.0 * np.bincount(s_p[active], minlength=n_pl) / n_s,
                              np.nan)
    # the upper quartile of each plate's sample rates: its median, and its spread as the replicate
    # scatter of those wells (pooled CV of their replicate groups) when they are replicated
    q = pd.Series(s_rate).groupby(s_p).quantile(UPPER_QUANTILE).reindex(idx).to_numpy(float)
    up = s_rate >= q[s_p]
    u_rate, u_p, u_g = s_rate[up], s_p[up], s_g[up]
    u_med = pd.Series(u_rate).groupby(u_p).median().reindex(idx).to_numpy(float)
    u_mad = MAD_NORMAL * pd.Series(np.abs(u_rate - u_med[u_p])).groupby(u_p).median().reindex(idx).to_numpy(float)
    u_n = np.bincount(u_p, minlength=n_pl)
    by = pd.DataFrame({"p": u_p, "v": u_rate}).groupby(u_g)
    g = pd.DataFrame({"p": by["p"].first(), "n": by["v"].count(), "mean": by["v"].mean(), "sd": by["v"].std()})
    g = g[(g["n"] >= 2) & (g["mean"] > 0)]
    dof = (g["n"] - 1).groupby(g["p"]).sum()
    ss = ((g["n"] - 1) * (g["sd"] / g["mean"]) ** 2).groupby(g["p"]).sum()
    wells_rep = g["n"].groupby(g["p"]).sum().reindex(idx).fillna(0).to_numpy(int)
    cv = np.sqrt(ss / dof).reindex(idx).to_numpy(float)
    by_rep = (wells_rep >= SEP_MIN_UPPER) & np.isfinite(cv)
    s_u = np.where(by_rep, cv * u_med, u_mad)
    with np.errstate(invalid="ignore"):
        makes_sense = ((b_n >= SEP_MIN_BLANKS) & (u_n >= SEP_MIN_UPPER) & (u_med - b_med > lod)
                       & (np.nan_to_num(active_pct) > 0))          # something on the plate is active
    rz = np.where(makes_sense, _zprime_from_moments(u_med, s_u, b_med, b_mad), np.nan)
    sd = np.where(makes_sense, _ssmd_from_moments(u_med, s_u, b_med, b_mad), np.nan)
    basis = np.where(makes_sense, np.where(by_rep, "replicates", "upper_quartile"), "")
    return {"blank_lod_mM_per_h": lod, "sample_active_pct": active_pct, "upper_n": u_n.astype(np.int64),
            "upper_median_mM_per_h": np.where(u_n > 0, u_med, np.nan),
            "upper_cv_pct": np.where(makes_sense & by_rep, 100 * cv, np.nan), "separation_basis": basis,
            "robust_zprime": rz, "ssmd": sd}


__all__ = [
    "FLAGS", "blank_trend_gaps", "zprime", "z_factor", "robust_zprime", "ssmd", "median_polish", "bscores",
    "well_bscores", "mannwhitneyu_grouped", "predict_ln", "control_chart", "plate_quality"
]
