"""Arrhenius and Eyring fits per catalyst, the uncatalysed background, and TOF at any temperature.

For each catalyst, the rows of the rates table at its standard condition (``is_standard``) give
one point per temperature: y = ln TOF (TOF in h-1) against x = 1/T, T = t + 273.15 K.

* **Weights**: 1/var(ln TOF) with var(ln TOF) = (tof_se/tof)^2 (delta method) when every point
  has a finite positive SE; otherwise an unweighted fit (``fit_weighted`` False).
* **Weights in the table** (:func:`arrhenius_table`): each point's variance is its replicate
  variance plus the campaign's plate-to-plate variance tau^2 (:func:`plate_scatter`).
* **Covariance**: (X'WX)^-1, scaled by max(1, chi^2/df) (the Birge ratio / Particle Data Group
  "scale factor" rule): the SEs follow the actual scatter about the line where it exceeds what the
  point variances predict, but never shrink below what they imply (with 3-4 temperatures, a line
  that happens to pass through its points would otherwise claim an Ea known to a fraction of a
  kJ/mol). Scaled, the intervals use Student t on n_T - 2 df (statsmodels WLS's default
  covariance). Unscaled, they use t on the Welch-Satterthwaite effective df of the point
  variances (a replicate variance from three wells rests on about 2 df, tau^2 on its pooled df;
  GUM, JCGM 100:2008, G.4), of the slope and of the line at the reference temperature, the
  smaller (``fit_df``). Without the table's tau^2 (a bare :func:`fit_temperature_series`) the
  point variances count as exact, ``fit_df`` = inf when unscaled. Unweighted fits use the
  residual variance (OLS) and t with df = n_T - 2. With two temperatures the line goes through
  both points: estimates without SE or CI (flag ``two_temperatures``); with one there is no
  estimate (``one_temperature``).
* Ea = -slope x R (R = N_A k_B, exact in the 2019 SI: :data:`screenlab.units.R_J_MOL_K`), ln A = intercept (A in h-1).
* **Eyring** (transition-state theory, transmission coefficient kappa = 1): ln(TOF/T) with TOF in
  s-1 against 1/T, same weights: dH = -slope x R, dS = R (intercept - ln(kB/h)),
  dG(T_ref) = dH - T_ref dS, SEs from the parameter covariance. TOF is treated as a first-order
  rate constant per site, so the standard state is the site itself (no concentration term); for a
  bimolecular step the usual convention c = 1 mol/L would add R ln(c) terms, which are not
  applied here.
* **Curvature**: with >= 4 temperatures, a 1/T^2 term is added (same weights); its two-sided t-test
  p-value is ``curvature_p``; flag ``curvature`` when p < 0.05.
* Temperatures where the group's net TOF is <= 0 or its CI reaches 0 are left out and flagged
  ``no_activity`` (the whole row when no temperature remains active).
* The ``(uncatalysed)`` row fits ln(blank rate, mM/h) on 1/T from the blanks table (plates at the
  same temperature pooled by well count); blanks below their detection limit are left out. Its
  ``ln_a`` and ``tof_ref_*`` are of the blank rate in mM/h (not a TOF: there are no sites), but
  its Eyring dS and dG are of the pseudo-first-order constant k = rate / (pps [S]) (h-1, [S] the
  blanks' substrate level, pps the manifest's product per substrate, as for the wells' k_per_h),
  since a rate in mM/h is no rate constant and would shift dS by R ln(pps [S]/mM)
  (flag ``eyring_pseudo_first_order``); dH is the same either way.
  ``delta_ea_kj_mol`` = Ea(uncatalysed) - Ea(catalyst); SE in quadrature (independent fits) and
  a t interval with Welch-Satterthwaite df.
* ``low_ea``: Ea below settings.low_ea_kj_mol (transport control likely; common practice, no
  source).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import special

from screenlab import _groups as grp
from screenlab import units
from screenlab.kinetics.sites import has_flag, join_flags
from screenlab.uncertainty import t_quantile, welch_df
from screenlab.settings import AnalysisSettings

from screenlab.model import UNCATALYSED  # noqa: E402  (the one reserved name)

FLAGS: dict[str, str] = {
    "two_temperatures": "Only two temperatures: Ea is estimated but has no standard error or interval.",
    "one_temperature": "Only one temperature: no Arrhenius estimate.",
    "curvature": "A 1/T^2 term is significant (p < 0.05): the Arrhenius plot is curved (changing mechanism "
                 "or transport limits).",
    "no_activity": "At some temperature the net TOF is not above the blank; those points are left out of the fit.",
    "left_out_irregular": "Some temperatures have courses that are not initial-rate kinetics (induction, product "
                          "decline, deactivation); they are left out of the fit (see left_out).",
    "left_out_bound": "At some temperature the catalyst was faster than the first reading allows (a lower bound); "
                      "that point is left out of the fit.",
    "left_out_below_lod": "At some temperature the blank is below its detection limit; that point is left out of "
                          "the uncatalysed fit.",
    "arrhenius_scatter": "The points scatter about the line more than their replicate errors and the campaign's "
                         "plate-to-plate scatter explain (chi-square p < 0.01).",
    "low_ea": "The apparent Ea is below the low-Ea limit: transport (diffusion) control is likely.",
    "unweighted": "Some points had no standard error, so the Arrhenius fit is unweighted.",
    "eyring_pseudo_first_order": "The uncatalysed row's Eyring dS and dG are of k = blank rate / substrate "
                                 "concentration (a pseudo-first-order constant); its TOF columns hold the blank "
                                 "rate in mM/h.",
}

COLUMNS = ["catalyst", "role", "n_temperatures", "t_min_c", "t_max_c", "ea_kj_mol", "ea_se", "ea_ci_low",
           "ea_ci_high", "ln_a", "ln_a_se", "dh_kj_mol", "dh_se", "ds_j_mol_k", "ds_se", "dg_ref_kj_mol",
           "tof_ref_per_h", "tof_ref_ci_low", "tof_ref_ci_high", "delta_ea_kj_mol", "delta_ea_ci_low",
           "delta_ea_ci_high", "curvature_p", "fit_intercept", "fit_slope_k", "cov_ii", "cov_is", "cov_ss",
           "fit_df", "flags", "dg_ref_se", "fit_weighted", "reference_temperature_c", "chi2_per_df",
           "plate_scatter_ln", "left_out"]

LN_KB_OVER_H = float(np.log(units.KB_J_K / units.H_J_S))


def fit_temperature_batch(group_codes, n_groups: int, temperature_c, value_per_h, se_per_h=None, *,
                          confidence=0.95, reference_temperature_c=60.0, low_ea_kj_mol=None,
                          tau2: float | None = None, tau2_df: float = np.inf, se_df=None) -> dict:
    """Arrhenius + Eyring fits of many series at once: point i belongs to series ``group_codes[i]``.

    The same definitions as :func:`fit_temperature_series` (module docstring), computed for all
    series together: each series' weighted least-squares line comes from closed-form 2x2 normal
    equations on per-series sums (``np.bincount``, centred on the weighted mean of 1/T for
    accuracy), the curvature term from batched 3x3 normal equations, the Eyring line from the same
    sums, and one vectorised t-quantile call. ``se_per_h`` None = unweighted (no flag); otherwise a
    series is weighted when every one of its points has a finite positive SE, else unweighted with
    flag ``unweighted``. Returns a dict of arrays of length ``n_groups`` keyed like :data:`COLUMNS`
    (except catalyst/role/delta_ea*); ``flags`` is an object array of str.

    ``tau2`` (the campaign's plate-to-plate variance of ln value, see :func:`plate_scatter`): when
    given, every point's variance is ``(se/value)^2 + tau2`` and the covariance is (X'WX)^-1,
    scaled up by the series' chi^2/(n - 2) where its points scatter more than those variances say
    (the Birge ratio rule; then Student t on n - 2 df). Otherwise the error scale is taken as known,
    but not as exact: each point's replicate variance rests on ``se_df`` degrees of freedom
    (about 2 for three wells) and ``tau2`` on ``tau2_df``, so the intervals use Student t on the
    Welch-Satterthwaite effective df of the slope's variance and of the line's variance at the
    reference temperature, the smaller of the two (``fit_df``; GUM, JCGM 100:2008, G.4). Treated as
    exact (df = ``tau2_df``), variances from three wells gave 95 % intervals of TOF at the reference
    temperature that held 87-90 % of the time in the truth-recovery study. A point without a finite
    ``se_df`` counts as exact. ``chi2_per_df`` is the series' weighted residual sum of squares over
    n - 2 either way.
    """
    g = np.asarray(group_codes, dtype=np.int64)
    t_c = np.asarray(temperature_c, float)
    v = np.asarray(value_per_h, float)
    G = int(n_groups)
    nan = np.full(G, np.nan)
    R = units.R_J_MOL_K
    out = {c: nan.copy() for c in COLUMNS if c not in ("catalyst", "role", "flags", "fit_weighted",
                                                        "n_temperatures")}
    out["reference_temperature_c"] = np.full(G, float(reference_temperature_c))
    # distinct temperatures per series (rounded to 1e-6 degC, as the single-series fit counts them)
    tkey = np.round(t_c, 6)
    n_pts = np.bincount(g, minlength=G)
    if len(g):
        nt = grp.count_distinct(g, tkey, G)
        t_min = np.full(G, np.inf)
        t_max = np.full(G, -np.inf)
        np.minimum.at(t_min, g, t_c)
        np.maximum.at(t_max, g, t_c)
        has = n_pts > 0
        out["t_min_c"] = np.where(has, t_min, np.nan)
        out["t_max_c"] = np.where(has, t_max, np.nan)
    else:
        nt = np.zeros(G, np.int64)
    out["n_temperatures"] = nt.astype(np.int64)
    fit = nt >= 2                                   # series with a line

    # weights: 1/var(ln v) = (v/se)^2 when every point of the series has a finite positive SE
    if se_per_h is None:
        weighted = np.zeros(G, bool)
        unweighted_flag = np.zeros(G, bool)
        w = np.ones(len(g))
    else:
        se = np.asarray(se_per_h, float)
        ok = np.isfinite(se) & (se > 0)
        weighted = np.bincount(g, weights=~ok, minlength=G) == 0
        unweighted_flag = ~weighted
        with np.errstate(invalid="ignore", divide="ignore"):
            if tau2 is not None:
                # a series with a point of unknown SE is fitted unweighted (flag unweighted)
                var_ln = np.where(ok, (se / v) ** 2, np.nan) + float(tau2)
                w = np.where(weighted[g], 1.0 / np.where(ok, var_ln, 1.0), 1.0)
            else:
                w = np.where(weighted[g], (v / np.where(ok, se, 1.0)) ** 2, 1.0)
    weighted &= fit
    unweighted_flag &= fit
    out["fit_weighted"] = weighted

    T = units.c_to_k(t_c)
    with np.errstate(invalid="ignore", divide="ignore"):
        x = 1.0 / T
        y = np.log(v)
        ye = y - np.log(3600.0) - np.log(T)        # Eyring: ln(k/T), k in s-1
        s0 = grp.group_sum(g, G, w)
        xbar = grp.group_sum(g, G, w * x) / s0
        ybar = grp.group_sum(g, G, w * y) / s0
        yebar = grp.group_sum(g, G, w * ye) / s0
        dx = x - xbar[g]
        dy = y - ybar[g]
        dye = ye - yebar[g]
        sxx = grp.group_sum(g, G, w * dx * dx)
        b1 = grp.group_sum(g, G, w * dx * dy) / sxx
        e1 = grp.group_sum(g, G, w * dx * dye) / sxx
        b0 = ybar - b1 * xbar
        e0 = yebar - e1 * xbar
        rss = grp.group_sum(g, G, w * (dy - b1[g] * dx) ** 2)
        rss_e = grp.group_sum(g, G, w * (dye - e1[g] * dx) ** 2)
        df = (n_pts - 2).astype(float)
        pos = fit & (df > 0)
        s2 = np.where(pos, rss / np.where(pos, df, 1.0), np.nan)
        s2e = np.where(pos, rss_e / np.where(pos, df, 1.0), np.nan)
        out["chi2_per_df"] = np.where(pos & weighted, s2, np.nan)
        if tau2 is not None:
            # the error scale of the replicate SEs plus the campaign's plate scatter, scaled up where
            # the series' own scatter exceeds it (then t on n - 2); else t on the effective df
            known = pos & weighted
            birge = known & (s2 > 1.0)
            birge_e = known & (s2e > 1.0)
            var_rep = np.where(ok, (se / v) ** 2, 0.0) if se_per_h is not None else np.zeros(len(g))
            eff = _effective_df(g, G, w, dx, sxx, s0, xbar, 1.0 / units.c_to_k(float(reference_temperature_c)),
                                var_rep, se_df, float(tau2), float(tau2_df))
            df = np.where(known, np.where(birge, df, eff), df)
            s2 = np.where(known & ~birge, 1.0, s2)
            s2e = np.where(known & ~birge_e, 1.0, s2e)
        else:
            # covariance scale floored at 1 for weighted fits (then the error scale is the
            # replicates' and the df infinite); the Eyring line's own scale is floored the same way
            floor = pos & weighted & (s2 < 1.0)
            s2 = np.where(floor, 1.0, s2)
            df = np.where(floor, np.inf, df)
            s2e = np.where(pos & weighted & (s2e < 1.0), 1.0, s2e)
        # (X'WX)^-1 for X = [1, x]: var b1 = 1/Sxx, var b0 = 1/S0 + xbar^2/Sxx, cov = -xbar/Sxx
        inv_ss = 1.0 / sxx
        inv_ii = 1.0 / s0 + xbar ** 2 / sxx
        inv_is = -xbar / sxx
        cov_ii, cov_is, cov_ss = inv_ii * s2, inv_is * s2, inv_ss * s2
        ecov_ii, ecov_is, ecov_ss = inv_ii * s2e, inv_is * s2e, inv_ss * s2e

    out["fit_intercept"] = np.where(fit, b0, np.nan)
    out["fit_slope_k"] = np.where(fit, b1, np.nan)
    out["cov_ii"], out["cov_is"], out["cov_ss"] = cov_ii, cov_is, cov_ss
    out["fit_df"] = np.where(fit, df, np.nan)
    ea = np.where(fit, -b1 * R / 1000.0, np.nan)
    out["ea_kj_mol"] = ea
    out["ln_a"] = out["fit_intercept"]
    q = t_quantile(confidence, np.where(pos, df, np.nan))
    t_ref = float(units.c_to_k(reference_temperature_c))
    x0 = 1.0 / t_ref
    with np.errstate(invalid="ignore"):
        ea_se = np.sqrt(cov_ss) * R / 1000.0
        out["ea_se"] = np.where(pos, ea_se, np.nan)
        out["ln_a_se"] = np.where(pos, np.sqrt(cov_ii), np.nan)
        out["ea_ci_low"] = np.where(pos, ea - q * ea_se, np.nan)
        out["ea_ci_high"] = np.where(pos, ea + q * ea_se, np.nan)
        dh = -e1 * R / 1000.0
        ds = R * (e0 - LN_KB_OVER_H)
        out["dh_kj_mol"] = np.where(fit, dh, np.nan)
        out["ds_j_mol_k"] = np.where(fit, ds, np.nan)
        out["dg_ref_kj_mol"] = np.where(fit, dh - t_ref * ds / 1000.0, np.nan)
        out["dh_se"] = np.where(pos, np.sqrt(ecov_ss) * R / 1000.0, np.nan)
        out["ds_se"] = np.where(pos, np.sqrt(ecov_ii) * R, np.nan)
        # dG = -R (e1 + T e0) + const  ->  var = R^2 (var e1 + 2 T cov + T^2 var e0)
        out["dg_ref_se"] = np.where(pos, R / 1000.0 * np.sqrt(ecov_ss + 2 * t_ref * ecov_is
                                                              + t_ref ** 2 * ecov_ii), np.nan)
        ln_ref = b0 + b1 * x0
        out["tof_ref_per_h"] = np.where(fit, np.exp(ln_ref), np.nan)
        s_ref = np.sqrt(cov_ii + 2 * x0 * cov_is + x0 ** 2 * cov_ss)
        out["tof_ref_ci_low"] = np.where(pos, np.exp(ln_ref - q * s_ref), np.nan)
        out["tof_ref_ci_high"] = np.where(pos, np.exp(ln_ref + q * s_ref), np.nan)

    curv = _curvature_batch(g, G, x, y, w, n_pts, nt >= 4)
    out["curvature_p"] = curv
    low = np.zeros(G, bool) if low_ea_kj_mol is None else fit & (ea < float(low_ea_kj_mol))
    scatter = np.zeros(G, bool)
    if tau2 is not None:
        with np.errstate(invalid="ignore"):
            dfc = (n_pts - 2).astype(float)
            p_chi = np.where(pos & weighted, special.chdtrc(np.where(dfc > 0, dfc, 1.0), np.nan_to_num(rss)), np.nan)
        scatter = np.nan_to_num(p_chi, nan=1.0) < 0.01
    out["flags"] = _flag_text(G, [("one_temperature", nt == 1), ("unweighted", unweighted_flag),
                                  ("two_temperatures", fit & ~pos), ("curvature", (nt >= 4) & (curv < 0.05)),
                                  ("low_ea", low), ("arrhenius_scatter", scatter)])
    return out


def _effective_df(g, G, w, dx, sxx, s0, xbar, x_ref, var_rep, se_df, tau2: float, tau2_df: float) -> np.ndarray:
    """Per series: the Welch-Satterthwaite df of the variance of its slope and of its line at
    ``x_ref`` (the smaller), each a sum ``sum a_i^2 (var_rep_i + tau2)`` over its points with the
    weighted least-squares coefficients ``a_i`` of that estimate; ``var_rep_i`` rests on
    ``se_df_i`` df (inf where not finite and positive), ``tau2`` on ``tau2_df``."""
    if se_df is None:
        dfi = np.full(len(g), np.inf)
    else:
        dfi = np.asarray(se_df, float)
        dfi = np.where(np.isfinite(dfi) & (dfi > 0), dfi, np.inf)
    with np.errstate(invalid="ignore", divide="ignore"):
        a_slope = w * dx / sxx[g]
        a_ref = w * (1.0 / s0[g] + (x_ref - xbar[g]) * dx / sxx[g])
        out = []
        for a in (a_slope, a_ref):
            a2 = a * a
            total = grp.group_sum(g, G, a2 * (var_rep + tau2))
            rep_part = grp.group_sum(g, G, (a2 * var_rep) ** 2 / dfi)
            tau_part = grp.group_sum(g, G, a2 * tau2) ** 2 / tau2_df if np.isfinite(tau2_df) else 0.0
            out.append(total ** 2 / (rep_part + tau_part))
        eff = np.fmin(out[0], out[1])
    return np.where(np.isnan(eff), np.inf, eff)       # 0/0: no uncertain part at all, the variance is exact


def _curvature_batch(g, G, x, y, w, n_pts, mask) -> np.ndarray:
    """Two-sided p-value of the 1/T^2 term per series (``y = b0 + b1 x + b2 x^2``, same weights, the
    series' own residual scale, Student t on n - 3 df); NaN where not ``mask``.

    Per series, x is centred on its (unweighted) mean and scaled by its SD, then the weighted 3x3
    normal equations of [1, xc, xc^2] are solved for all series at once.
    """
    p = np.full(G, np.nan)
    if not mask.any():
        return p
    keep = mask[g]
    g, x, y, w = g[keep], x[keep], y[keep], w[keep]
    n = n_pts.astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = grp.group_sum(g, G, x) / n
        d = x - mean[g]
        sd = np.sqrt(grp.group_sum(g, G, d * d) / n)
        sd = np.where(np.isfinite(sd) & (sd > 0), sd, 1.0)
        xc = d / sd[g]
        pw = [grp.group_sum(g, G, w * xc ** k) for k in range(5)]             # sum w xc^k, k = 0..4
        m = np.empty((G, 3, 3))
        for i in range(3):
            for j in range(3):
                m[:, i, j] = pw[i + j]
        rhs = np.stack([grp.group_sum(g, G, w * y * xc ** k) for k in range(3)], axis=1)
        m[~mask] = np.eye(3)
        rhs[~mask] = 0.0
        good = mask & np.isfinite(m).all(axis=(1, 2)) & np.isfinite(rhs).all(axis=1)
        m[~good] = np.eye(3)
        rhs[~good] = 0.0
        inv = np.linalg.inv(m)
        beta = np.einsum("gij,gj->gi", inv, rhs)
        res = y - (beta[g, 0] + beta[g, 1] * xc + beta[g, 2] * xc ** 2)
        df = n - 3
        s2 = grp.group_sum(g, G, w * res * res) / np.where(mask, df, 1.0)
        se = np.sqrt(inv[:, 2, 2] * s2)
        b2 = beta[:, 2]
        tstat = np.abs(b2 / np.where(np.isfinite(se) & (se > 0), se, 1.0))
        pv = 2 * special.stdtr(np.where(mask, df, 1.0), -tstat)          # two-sided Student t tail
        pv = np.where(np.isfinite(se) & (se > 0), pv, np.where(b2 != 0, 0.0, 1.0))
    return np.where(good, pv, np.nan)


def _flag_text(n: int, codes) -> np.ndarray:
    """``;``-joined flag strings (object array of str) from (code, mask) pairs, in the given order."""
    out = np.full(n, "", dtype=object)
    for code, mask in codes:                     # a loop over a few codes, not over rows
        mask = np.asarray(mask, bool)
        if mask.any():
            out = np.where(mask, np.where(out == "", code, out + ";" + code), out)
    return out


def fit_temperature_series(temperature_c, value_per_h, se_per_h=None, *, confidence=0.95,
                           reference_temperature_c=60.0, low_ea_kj_mol=None, tau2: float | None = None,
                           tau2_df: float = np.inf, se_df=None) -> dict:
    """Arrhenius + Eyring fit of one series of positive rates (TOF in h-1, or mM/h for blanks).

    Returns a dict with the keys of :data:`COLUMNS` (except catalyst/role/delta_ea*). The single-
    series form of :func:`fit_temperature_batch` (same definitions, one code path).
    """
    t_c = np.asarray(temperature_c, float).ravel()
    r = fit_temperature_batch(np.zeros(len(t_c), np.int64), 1, t_c, value_per_h, se_per_h, confidence=confidence,
                              reference_temperature_c=reference_temperature_c, low_ea_kj_mol=low_ea_kj_mol,
                              tau2=tau2, tau2_df=tau2_df, se_df=se_df)
    out = {k: float(a[0]) for k, a in r.items() if k not in ("n_temperatures", "flags", "fit_weighted", "left_out")}
    out.update(n_temperatures=int(r["n_temperatures"][0]), flags=str(r["flags"][0]),
               fit_weighted=bool(r["fit_weighted"][0]))
    return out


def plate_scatter(group_codes, n_groups: int, temperature_c, value, se) -> tuple[float, float]:
    """The campaign's plate-to-plate (temperature-block) variance of ln TOF, from every series'
    scatter about its own Arrhenius line beyond what its replicate SEs explain.

    Method-of-moments estimator of the between-point variance of a weighted regression
    (DerSimonian & Laird 1986, extended to meta-regression: Thompson & Sharp, Stat. Med. 1999, 18,
    2693), pooled over series with three or more temperatures: with weights w = 1/v,
    v = (se/value)^2, ``Q = sum of w r^2`` about each series' WLS line,
    ``tau^2 = max(0, (sum Q - sum (n - 2)) / sum (S0 - tr(M^-1 N)))`` where M = X'WX and N = X'W^2X.
    Returns (tau^2, its df = sum (n - 2)); (0, inf) when no series has three temperatures.
    """
    g = np.asarray(group_codes, dtype=np.int64)
    v_val = np.asarray(value, dtype=float)
    se = np.asarray(se, dtype=float)
    x = 1.0 / units.c_to_k(np.asarray(temperature_c, dtype=float))
    with np.errstate(invalid="ignore", divide="ignore"):
        y = np.log(v_val)
        v = (se / v_val) ** 2
    ok = np.isfinite(y) & np.isfinite(v) & (v > 0)
    g, x, y, v = g[ok], x[ok], y[ok], v[ok]
    G = int(n_groups)
    n = np.bincount(g, minlength=G)
    use = n >= 3
    keep = use[g]
    g, x, y, v = g[keep], x[keep], y[keep], v[keep]
    if not g.size:
        return 0.0, np.inf
    w = 1.0 / v
    s0 = grp.group_sum(g, G, w)
    with np.errstate(invalid="ignore", divide="ignore"):
        xbar = grp.group_sum(g, G, w * x) / s0
        ybar = grp.group_sum(g, G, w * y) / s0
        dx = x - xbar[g]
        sxx = grp.group_sum(g, G, w * dx * dx)
        b1 = grp.group_sum(g, G, w * dx * (y - ybar[g])) / sxx
        r = y - ybar[g] - b1[g] * dx
        q = grp.group_sum(g, G, w * r * r)
        # tr(M^-1 N) in centred coordinates: M = diag(S0, Sxx), N = [[sum w^2, sum w^2 dx], [., sum w^2 dx^2]]
        tr = grp.group_sum(g, G, w * w) / s0 + grp.group_sum(g, G, w * w * dx * dx) / sxx
    good = use & np.isfinite(q) & np.isfinite(tr)
    df = float(np.sum(n[good] - 2))
    denom = float(np.sum((s0 - tr)[good]))
    if df <= 0 or not denom > 0:
        return 0.0, np.inf
    return max(0.0, (float(np.sum(q[good])) - df) / denom), df


def uncatalysed_points(blanks: pd.DataFrame) -> pd.DataFrame:
    """The points of the uncatalysed Arrhenius line: one per plate x temperature at the blanks'
    most used substrate level (``temperature_c, rate`` in mM/h, ``se``, ``df`` of that SE,
    ``active``, ``plate``, ``conc_mM`` that level), the blank mean and its SE. Only ``active``
    points (blank above its detection limit) are fitted. Levels scaled from another level (flag
    ``blank_scaled``) are not points of their own, nor are other substrate levels: a background
    rate at another concentration is not on this line."""
    b = blanks[blanks["n_blanks"] > 0].copy()
    if "flags" in b.columns:
        b = b[~has_flag(b["flags"], "blank_scaled")]
    if b.empty:
        return pd.DataFrame(columns=["temperature_c", "rate", "se", "df", "active", "plate", "conc_mM"])
    level = np.nan
    if "substrate_conc_mM" in b.columns:
        conc = pd.to_numeric(b["substrate_conc_mM"], errors="coerce")
        counts = b.assign(_c=conc).groupby("_c", dropna=False)["n_blanks"].sum()
        level = counts.idxmax() if len(counts) else np.nan
        b = b[(conc == level) | (conc.isna() & pd.isna(level))]
    det = b["blank_detected"].to_numpy(bool) if "blank_detected" in b else np.ones(len(b), bool)
    rate = b["blank_rate_mM_per_h"].to_numpy(float)
    return pd.DataFrame({"temperature_c": b["temperature_c"].to_numpy(float), "rate": rate,
                         "se": b["blank_se_mM_per_h"].to_numpy(float),
                         "df": (b["blank_df"].to_numpy(float) if "blank_df" in b else np.full(len(b), np.inf)),
                         "active": det & (rate > 0),
                         "plate": b["plate"].to_numpy(dtype=object), "conc_mM": float(level)})


#: group flags of the rates table whose courses are not initial-rate kinetics: kept out of the
#: Arrhenius fit unless settings.include_irregular_courses
IRREGULAR = ("induction", "product_decline", "deactivation")


def arrhenius_points(groups: pd.DataFrame, settings: AnalysisSettings | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Which rates rows enter their catalyst's Arrhenius fit, and why the others do not.

    Returns ``(in_fit, reason)`` per row of ``groups``: a row enters when it is at its catalyst's
    standard condition, catalysed, with sites, a measured (not censored) TOF above the blank, and a
    regular course (no group flag of :data:`IRREGULAR`, unless
    ``settings.include_irregular_courses``). ``reason`` names the first rule a left-out row breaks
    ("" for the others and for rows that are not at the standard condition)."""
    settings = settings or AnalysisSettings()
    n = len(groups)
    if not n:
        return np.zeros(0, dtype=bool), np.zeros(0, dtype=object)
    std = groups["is_standard"].astype(bool).to_numpy()
    tof = pd.to_numeric(groups["tof_per_h"], errors="coerce").to_numpy(float)
    lo = pd.to_numeric(groups["tof_ci_low"], errors="coerce").to_numpy(float)
    cens = (groups["censored"].astype("string").fillna("").to_numpy(dtype=object) if "censored" in groups
            else np.full(n, "", dtype=object))
    flags = groups["flags"] if "flags" in groups else pd.Series([""] * n)
    rules = [
        ("no sites", has_flag(flags, "no_sites")),
        ("faster than the first reading (lower bound)", cens == "lower"),
        ("not above the blank (upper bound)", (cens == "upper") | ~(np.isfinite(tof) & (tof > 0))
         | (np.isfinite(lo) & (lo <= 0))),
    ]
    if not getattr(settings, "include_irregular_courses", False):
        rules += [(code.replace("_", " "), has_flag(flags, code)) for code in IRREGULAR]
    reason = np.full(n, "", dtype=object)
    for text, mask in rules:                      # a loop over a few rules
        reason = np.where((reason == "") & std & np.asarray(mask, bool), text, reason)
    if not getattr(settings, "include_irregular_courses", False):
        # a catalyst whose courses are irregular at half or more of its temperatures is irregular at the
        # others too, only less visibly (slower there): all its points are left out
        irregular = np.isin(reason, [c.replace("_", " ") for c in IRREGULAR])
        cat, _ = pd.factorize(groups["catalyst"])
        cat = np.asarray(cat, dtype=np.int64)
        ok_cat = (cat >= 0) & std
        k = int(cat.max()) + 1 if n else 0
        n_std = np.bincount(cat[ok_cat], minlength=k)
        n_irr = np.bincount(cat[ok_cat & irregular], minlength=k)
        most = ((2 * n_irr >= n_std) & (n_irr > 0))[np.maximum(cat, 0)] & ok_cat if k else np.zeros(n, bool)
        reason = np.where(most & (reason == ""), "irregular courses at half or more of the temperatures", reason)
    return std & (reason == ""), np.where(std, reason, "")


def _left_out_text(codes, k: int, temps, reasons) -> np.ndarray:
    """Per series: "40 C: <reason>; 70 C: <reason>" over its left-out points (a loop over left-out
    points only)."""
    out = np.full(k, "", dtype=object)
    order = np.lexsort((temps, codes))
    for i in order:
        text = f"{temps[i]:g} C: {reasons[i]}"
        out[codes[i]] = text if out[codes[i]] == "" else out[codes[i]] + "; " + text
    return out


def arrhenius_table(groups: pd.DataFrame, blanks: pd.DataFrame,
                    settings: AnalysisSettings | None = None, product_per_substrate: float = 1.0) -> pd.DataFrame:
    """One row per catalyst (at its standard condition) plus the ``(uncatalysed)`` row.

    Columns: see :data:`COLUMNS` (the contract's, plus ``dg_ref_se``, ``fit_weighted``,
    ``reference_temperature_c``, ``chi2_per_df``, ``plate_scatter_ln`` and ``left_out``). TOF in
    h-1; the uncatalysed row is in mM/h. ``t_min_c`` / ``t_max_c`` and ``n_temperatures`` count the
    temperatures actually fitted; ``left_out`` says which were left out and why
    (:func:`arrhenius_points`). Every point's variance is its replicate variance plus the
    campaign's plate-to-plate variance (:func:`plate_scatter`), the same for the uncatalysed line.
    """
    settings = settings or AnalysisSettings()
    conf = settings.confidence
    in_fit, reason = arrhenius_points(groups, settings)
    std_mask = groups["is_standard"].astype(bool).to_numpy() if len(groups) else np.zeros(0, bool)
    std = groups[std_mask] if len(groups) else groups
    parts = []
    tau2, tau2_df = 0.0, np.inf
    if len(std):
        codes, cats = pd.factorize(std["catalyst"], sort=True)
        keep = codes >= 0                                   # rows without a catalyst name are not fitted
        codes = codes[keep]
        t_c = pd.to_numeric(std["temperature_c"], errors="coerce").to_numpy(float)[keep]
        tof = pd.to_numeric(std["tof_per_h"], errors="coerce").to_numpy(float)[keep]
        se_col = "tof_rep_se_per_h" if "tof_rep_se_per_h" in std.columns else "tof_se_per_h"
        se = pd.to_numeric(std[se_col], errors="coerce").to_numpy(float)[keep]
        se_df = (pd.to_numeric(std["tof_df"], errors="coerce").to_numpy(float)[keep] if "tof_df" in std.columns
                 else np.full(len(se), np.inf))              # the df the replicate SE rests on
        active = in_fit[std_mask][keep]
        why = reason[std_mask][keep]
        k = len(cats)
        tau2, tau2_df = plate_scatter(codes[active], k, t_c[active], tof[active], se[active])
        r = fit_temperature_batch(codes[active], k, t_c[active], tof[active], se[active], confidence=conf,
                                  reference_temperature_c=settings.reference_temperature_c,
                                  low_ea_kj_mol=settings.low_ea_kj_mol, tau2=tau2, tau2_df=tau2_df,
                                  se_df=se_df[active])
        left = ~active
        fl = r["flags"]
        no_act = np.bincount(codes[left & np.char.startswith(why.astype(str), "not above")], minlength=k) > 0
        irregular = np.bincount(codes[left & np.isin(why, [c.replace("_", " ") for c in IRREGULAR]
                                                      + ["irregular courses at half or more of the temperatures"])],
                                minlength=k) > 0
        bound = np.bincount(codes[left & np.char.startswith(why.astype(str), "faster")], minlength=k) > 0
        for code, mask in (("no_activity", no_act), ("left_out_irregular", irregular), ("left_out_bound", bound)):
            fl = np.where(mask, np.where(fl == "", code, fl + ";" + code), fl)
        r["flags"] = fl
        r["left_out"] = _left_out_text(codes[left], k, t_c[left], why[left])
        r["plate_scatter_ln"] = np.full(k, np.sqrt(tau2))
        first = np.unique(codes, return_index=True)[1]
        r["catalyst"] = np.asarray(cats, dtype=object)
        r["role"] = std["role"].to_numpy(dtype=object)[keep][first].astype(str)
        parts.append(pd.DataFrame(r, columns=COLUMNS))
    pts = uncatalysed_points(blanks)
    if len(pts):
        act = pts["active"].to_numpy(bool)
        r = fit_temperature_series(pts["temperature_c"].to_numpy(float)[act], pts["rate"].to_numpy(float)[act],
                                   pts["se"].to_numpy(float)[act], confidence=conf,
                                   reference_temperature_c=settings.reference_temperature_c, low_ea_kj_mol=None,
                                   tau2=tau2, tau2_df=tau2_df, se_df=pts["df"].to_numpy(float)[act])
        t_out = pts["temperature_c"].to_numpy(float)[~act]
        r["left_out"] = "; ".join(f"{t:g} C: blank below its detection limit"
                                  for t in sorted(set(np.round(t_out, 6)))) if (~act).any() else ""
        if (~act).any():
            r["flags"] = ";".join([c for c in [*r["flags"].split(";"), "left_out_below_lod"] if c])
        r["plate_scatter_ln"] = float(np.sqrt(tau2))
        # Eyring of k = rate / (pps [S]) (h-1; pps the product per substrate, as for k_per_h):
        # ln k = ln rate - ln(pps [S]/mM), so dS moves by -R ln(pps [S]/mM)
        conc = float(pts["conc_mM"].iloc[0]) * float(product_per_substrate)
        shift = np.log(conc) if np.isfinite(conc) and conc > 0 else np.nan
        r["ds_j_mol_k"] = r["ds_j_mol_k"] - units.R_J_MOL_K * shift
        t_ref = float(units.c_to_k(settings.reference_temperature_c))
        r["dg_ref_kj_mol"] = r["dg_ref_kj_mol"] + t_ref * units.R_J_MOL_K * shift / 1000.0
        if np.isfinite(r["ds_j_mol_k"]):
            r["flags"] = ";".join([c for c in [*r["flags"].split(";"), "eyring_pseudo_first_order"] if c])
        r.update(catalyst=UNCATALYSED, role="blank")
        parts.append(pd.DataFrame([r], columns=COLUMNS))
    out = pd.concat(parts, ignore_index=True) if len(parts) > 1 else (parts[0] if parts else
                                                                     pd.DataFrame(columns=COLUMNS))
    # delta Ea = Ea(uncatalysed) - Ea(catalyst)
    blank = out[out["catalyst"] == UNCATALYSED]
    if len(blank) and len(out):
        eb = float(blank["ea_kj_mol"].iloc[0])
        sb = float(blank["ea_se"].iloc[0])
        dfb = float(blank["fit_df"].iloc[0])
        ec = out["ea_kj_mol"].to_numpy(float)
        sc = out["ea_se"].to_numpy(float)
        dfc = out["fit_df"].to_numpy(float)
        cat_rows = (out["catalyst"] != UNCATALYSED).to_numpy()
        with np.errstate(invalid="ignore"):
            d = np.where(cat_rows, eb - ec, np.nan)
            sd = np.sqrt(sb ** 2 + sc ** 2)
            dfd = welch_df(sb ** 2, dfb, sc ** 2, dfc)
            q = t_quantile(conf, np.where(np.isfinite(sd), dfd, np.nan))
        out["delta_ea_kj_mol"] = d
        out["delta_ea_ci_low"] = np.where(cat_rows, d - q * sd, np.nan)
        out["delta_ea_ci_high"] = np.where(cat_rows, d + q * sd, np.nan)
    out["n_temperatures"] = out["n_temperatures"].astype(np.int64) if len(out) else out["n_temperatures"]
    out["flags"] = join_flags(out["flags"], {}, index=out.index).to_numpy(dtype=object) if len(out) else out["flags"]
    out["left_out"] = out["left_out"].fillna("").astype(str) if len(out) else out["left_out"]
    out = out.reset_index(drop=True)
    out.attrs["plate_scatter_ln"] = float(np.sqrt(tau2))
    out.attrs["plate_scatter_df"] = float(tau2_df)
    return out


def predict_tof(arr: pd.DataFrame, temperature_c, confidence: float = 0.95) -> pd.DataFrame:
    """TOF (h-1) predicted from each row's Arrhenius fit at ``temperature_c`` (scalar or array).

    One row per catalyst x temperature: ``catalyst, temperature_c, tof_per_h, tof_ci_low,
    tof_ci_high, ln_tof_se, df``. The interval is exp(ln TOF +/- t(df) x SE) with
    SE^2 = cov_ii + 2 x cov_is + x^2 cov_ss, x = 1/T; NaN where the fit has no covariance
    (two temperatures) and everything NaN where there is no fit.
    """
    temps = np.atleast_1d(np.asarray(temperature_c, float))
    a = arr.reset_index(drop=True)
    n, m = len(a), len(temps)
    b0 = np.repeat(pd.to_numeric(a["fit_intercept"], errors="coerce").to_numpy(float), m)
    b1 = np.repeat(pd.to_numeric(a["fit_slope_k"], errors="coerce").to_numpy(float), m)
    cii = np.repeat(pd.to_numeric(a["cov_ii"], errors="coerce").to_numpy(float), m)
    cis = np.repeat(pd.to_numeric(a["cov_is"], errors="coerce").to_numpy(float), m)
    css = np.repeat(pd.to_numeric(a["cov_ss"], errors="coerce").to_numpy(float), m)
    df = np.repeat(pd.to_numeric(a["fit_df"], errors="coerce").to_numpy(float), m)
    tt = np.tile(temps, n)
    x = 1.0 / units.c_to_k(tt)
    with np.errstate(invalid="ignore", over="ignore"):
        ln = b0 + b1 * x
        se = np.sqrt(cii + 2 * x * cis + x ** 2 * css)
        q = t_quantile(confidence, df)
        return pd.DataFrame({
            "catalyst": np.repeat(a["catalyst"].to_numpy(dtype=object), m),
            "temperature_c": tt,
            "tof_per_h": np.exp(ln),
            "tof_ci_low": np.exp(ln - q * se),
            "tof_ci_high": np.exp(ln + q * se),
            "ln_tof_se": se,
            "df": df,
        })
