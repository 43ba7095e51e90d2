"""Arrhenius and Eyring fits per catalyst, the uncatalysed background, and TOF at any temperature.

For each catalyst, the rows of the rates table at its standard condition (``is_standard``) give
one point per temperature: y = ln TOF (TOF in h-1) against x = 1/T, T = t + 273.15 K.

* **Weights**: 1/var(ln TOF) with var(ln TOF) = (tof_se/tof)^2 (delta method) when every point
  has a finite positive SE; otherwise an unweighted fit (``fit_weighted`` False).
* **Covariance**: for a weighted fit, scaled by max(1, chi^2/df) (the Birge ratio / Particle Data
  Group "scale factor" rule): the reported SEs reflect the actual scatter about the line when it
  exceeds what the replicate SEs predict (plate-to-plate and temperature errors that replicates
  miss), but never shrink below what the replicate SEs imply — with 3-4 temperatures and df of
  1-2, a line that happens to pass through its points would otherwise claim an Ea known to a
  fraction of a kJ/mol. When chi^2/df > 1 this is exactly statsmodels WLS's default covariance
  and intervals use Student t with df = n_T - 2; when the floor applies the error scale is the
  replicates' and intervals use the normal quantile (``fit_df`` = inf). Unweighted fits use the
  residual variance (OLS) and t with df = n_T - 2. With two temperatures the line goes through both points: estimates
  without SE or CI (flag ``two_temperatures``); with one there is no estimate (``one_temperature``).
* Ea = -slope x R (R from scipy.constants), ln A = intercept (A in h-1).
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
  same temperature pooled by well count); blanks below their detection limit are left out.
  ``delta_ea_kj_mol`` = Ea(uncatalysed) - Ea(catalyst); SE in quadrature (independent fits) and
  a t interval with Welch-Satterthwaite df.
* ``low_ea``: Ea below settings.low_ea_kj_mol (transport control likely; common practice, no
  source).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from screenlab import units
from screenlab.kinetics.sites import has_flag, join_flags
from screenlab.kinetics.turnover import t_quantile, welch_df
from screenlab.settings import AnalysisSettings

UNCATALYSED = "(uncatalysed)"

FLAGS: dict[str, str] = {
    "two_temperatures": "Only two temperatures: Ea is estimated but has no standard error or interval.",
    "one_temperature": "Only one temperature: no Arrhenius estimate.",
    "curvature": "A 1/T^2 term is significant (p < 0.05): the Arrhenius plot is curved (changing mechanism "
                 "or transport limits).",
    "no_activity": "At some temperature the net TOF is not above the blank; those points are left out of the fit.",
    "low_ea": "The apparent Ea is below the low-Ea limit: transport (diffusion) control is likely.",
    "unweighted": "Some points had no standard error, so the Arrhenius fit is unweighted.",
}

COLUMNS = ["catalyst", "role", "n_temperatures", "t_min_c", "t_max_c", "ea_kj_mol", "ea_se", "ea_ci_low",
           "ea_ci_high", "ln_a", "ln_a_se", "dh_kj_mol", "dh_se", "ds_j_mol_k", "ds_se", "dg_ref_kj_mol",
           "tof_ref_per_h", "tof_ref_ci_low", "tof_ref_ci_high", "delta_ea_kj_mol", "delta_ea_ci_low",
           "delta_ea_ci_high", "curvature_p", "fit_intercept", "fit_slope_k", "cov_ii", "cov_is", "cov_ss",
           "fit_df", "flags", "dg_ref_se", "fit_weighted", "reference_temperature_c"]

LN_KB_OVER_H = float(np.log(units.KB_J_K / units.H_J_S))


def wls_line(x, y, var=None, *, floor_scale: bool = True):
    """Weighted least squares of y on x (weights 1/var; None = unweighted).

    Returns (intercept, slope, cov 2x2, df). The covariance is (X'WX)^-1 times chi^2/df, floored
    at 1 when ``var`` is given and ``floor_scale`` (see the module docstring) — then the returned
    df is ``inf`` (normal quantiles: the error scale comes from the replicates, not the residuals);
    unweighted, it is the OLS covariance. With df = 0 the covariance is NaN. With ``floor_scale=False`` it matches
    statsmodels ``WLS(y, [1, x], weights=1/var).fit().cov_params()``.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    w = np.ones_like(x) if var is None else 1.0 / np.asarray(var, float)
    X = np.column_stack([np.ones_like(x), x])
    sw = np.sqrt(w)
    Xw, yw = X * sw[:, None], y * sw
    beta, *_ = np.linalg.lstsq(Xw, yw, rcond=None)
    df = len(x) - 2
    if df > 0:
        res = yw - Xw @ beta
        s2 = float(res @ res) / df
        if var is not None and floor_scale and s2 < 1.0:
            # the replicate SEs set the error scale: treated as known, so the effective df is infinite
            s2, df = 1.0, np.inf
        cov = np.linalg.inv(Xw.T @ Xw) * s2
    else:
        cov = np.full((2, 2), np.nan)
    return float(beta[0]), float(beta[1]), cov, df


def curvature_p(x, y, var=None) -> float:
    """Two-sided p-value of the 1/T^2 term in y = b0 + b1 x + b2 x^2 (weights 1/var); NaN if n < 4."""
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = len(x)
    if n < 4:
        return float("nan")
    w = np.ones_like(x) if var is None else 1.0 / np.asarray(var, float)
    xc = (x - x.mean()) / (x.std() or 1.0)          # centred and scaled: same p-value, better conditioning
    X = np.column_stack([np.ones(n), xc, xc ** 2])
    sw = np.sqrt(w)
    Xw, yw = X * sw[:, None], y * sw
    beta, *_ = np.linalg.lstsq(Xw, yw, rcond=None)
    df = n - 3
    res = yw - Xw @ beta
    s2 = float(res @ res) / df
    cov = np.linalg.inv(Xw.T @ Xw) * s2
    se = np.sqrt(cov[2, 2])
    if not np.isfinite(se) or se == 0:
        return 0.0 if beta[2] != 0 else 1.0
    return float(2 * stats.t.sf(abs(beta[2] / se), df))


def fit_temperature_series(temperature_c, value_per_h, se_per_h=None, *, confidence=0.95,
                           reference_temperature_c=60.0, low_ea_kj_mol=None) -> dict:
    """Arrhenius + Eyring fit of one series of positive rates (TOF in h-1, or mM/h for blanks).

    Returns a dict with the keys of :data:`COLUMNS` (except catalyst/role/delta_ea*).
    """
    t_c = np.asarray(temperature_c, float)
    v = np.asarray(value_per_h, float)
    se = None if se_per_h is None else np.asarray(se_per_h, float)
    out = {c: np.nan for c in COLUMNS if c not in ("catalyst", "role", "flags", "fit_weighted")}
    out.update(n_temperatures=int(len(np.unique(np.round(t_c, 6)))), flags="", fit_weighted=False,
               reference_temperature_c=float(reference_temperature_c))
    flags = []
    if len(t_c):
        out["t_min_c"], out["t_max_c"] = float(t_c.min()), float(t_c.max())
    nt = out["n_temperatures"]
    if nt < 2:
        if nt == 1:
            flags.append("one_temperature")
        out["flags"] = ";".join(flags)
        return out
    T = units.c_to_k(t_c)
    x = 1.0 / T
    y = np.log(v)
    var = None
    if se is not None and np.all(np.isfinite(se) & (se > 0)):
        var = (se / v) ** 2
        out["fit_weighted"] = True
    elif se is not None:
        flags.append("unweighted")
    b0, b1, cov, df = wls_line(x, y, var)
    R = units.R_J_MOL_K
    out.update(fit_intercept=b0, fit_slope_k=b1, cov_ii=cov[0, 0], cov_is=cov[0, 1], cov_ss=cov[1, 1],
               fit_df=float(df))
    out["ea_kj_mol"] = -b1 * R / 1000.0
    out["ln_a"] = b0
    q = float(t_quantile(confidence, df)) if df > 0 else np.nan
    if df > 0:
        out["ea_se"] = np.sqrt(cov[1, 1]) * R / 1000.0
        out["ln_a_se"] = np.sqrt(cov[0, 0])
        out["ea_ci_low"] = out["ea_kj_mol"] - q * out["ea_se"]
        out["ea_ci_high"] = out["ea_kj_mol"] + q * out["ea_se"]
    else:
        flags.append("two_temperatures")
    # Eyring: ln(k/T) with k in s-1 = ln(TOF_h) - ln 3600 - ln T
    ye = y - np.log(3600.0) - np.log(T)
    e0, e1, ecov, _ = wls_line(x, ye, var)
    t_ref = float(units.c_to_k(reference_temperature_c))
    out["dh_kj_mol"] = -e1 * R / 1000.0
    out["ds_j_mol_k"] = R * (e0 - LN_KB_OVER_H)
    out["dg_ref_kj_mol"] = out["dh_kj_mol"] - t_ref * out["ds_j_mol_k"] / 1000.0
    if df > 0:
        out["dh_se"] = np.sqrt(ecov[1, 1]) * R / 1000.0
        out["ds_se"] = np.sqrt(ecov[0, 0]) * R
        # dG = -R (e1 + T e0) + const  ->  var = R^2 (var e1 + 2 T cov + T^2 var e0)
        out["dg_ref_se"] = R / 1000.0 * np.sqrt(ecov[1, 1] + 2 * t_ref * ecov[0, 1] + t_ref ** 2 * ecov[0, 0])
    # prediction at the reference temperature
    x0 = 1.0 / t_ref
    ln_ref = b0 + b1 * x0
    out["tof_ref_per_h"] = float(np.exp(ln_ref))
    if df > 0:
        s = np.sqrt(cov[0, 0] + 2 * x0 * cov[0, 1] + x0 ** 2 * cov[1, 1])
        out["tof_ref_ci_low"] = float(np.exp(ln_ref - q * s))
        out["tof_ref_ci_high"] = float(np.exp(ln_ref + q * s))
    if nt >= 4:
        p = curvature_p(x, y, var)
        out["curvature_p"] = p
        if p < 0.05:
            flags.append("curvature")
    if low_ea_kj_mol is not None and out["ea_kj_mol"] < float(low_ea_kj_mol):
        flags.append("low_ea")
    out["flags"] = ";".join(flags)
    return out


def _uncatalysed_points(blanks: pd.DataFrame) -> pd.DataFrame:
    b = blanks[blanks["n_blanks"] > 0].copy()
    if b.empty:
        return pd.DataFrame(columns=["temperature_c", "rate", "se", "active"])
    det = b["blank_detected"].to_numpy(bool) if "blank_detected" in b else np.ones(len(b), bool)
    b["active"] = det & (b["blank_rate_mM_per_h"].to_numpy(float) > 0)
    b["tkey"] = np.round(b["temperature_c"].to_numpy(float), 6)
    b["n"] = b["n_blanks"].astype(float)
    b["nm"] = b["n"] * b["blank_rate_mM_per_h"]
    b["n2se2"] = (b["n"] * b["blank_se_mM_per_h"]) ** 2
    g = b[b["active"]].groupby("tkey")
    agg = g.agg(n=("n", "sum"), nm=("nm", "sum"), n2se2=("n2se2", "sum"), temperature_c=("temperature_c", "mean"))
    pts = pd.DataFrame({"temperature_c": agg["temperature_c"].to_numpy(float),
                        "rate": (agg["nm"] / agg["n"]).to_numpy(float),
                        "se": (np.sqrt(agg["n2se2"]) / agg["n"]).to_numpy(float), "active": True})
    inactive = sorted(set(b.loc[~b["active"], "tkey"]) - set(agg.index))
    if inactive:
        pts = pd.concat([pts, pd.DataFrame({"temperature_c": inactive, "rate": np.nan, "se": np.nan,
                                            "active": False})], ignore_index=True)
    return pts


def arrhenius_table(groups: pd.DataFrame, blanks: pd.DataFrame,
                    settings: AnalysisSettings | None = None) -> pd.DataFrame:
    """One row per catalyst (at its standard condition) plus the ``(uncatalysed)`` row.

    Columns: see :data:`COLUMNS` (the contract's, plus ``dg_ref_se``, ``fit_weighted`` and
    ``reference_temperature_c``). TOF in h-1; the uncatalysed row is in mM/h.
    """
    settings = settings or AnalysisSettings()
    conf = settings.confidence
    rows = []
    std = groups[groups["is_standard"].astype(bool)] if len(groups) else groups
    for cat, g in std.groupby("catalyst", sort=True):           # a loop over catalysts
        tof = g["tof_per_h"].to_numpy(float)
        lo = g["tof_ci_low"].to_numpy(float)
        se = g["tof_se_per_h"].to_numpy(float)
        active = np.isfinite(tof) & (tof > 0) & ~(np.isfinite(lo) & (lo <= 0))
        active &= ~has_flag(g["flags"], "no_sites")
        r = fit_temperature_series(g["temperature_c"].to_numpy(float)[active], tof[active], se[active],
                                   confidence=conf, reference_temperature_c=settings.reference_temperature_c,
                                   low_ea_kj_mol=settings.low_ea_kj_mol)
        fl = r["flags"]
        if (~active).any():
            fl = ";".join([c for c in ["no_activity", *fl.split(";")] if c])
        if len(g):
            r["t_min_c"] = float(g["temperature_c"].min())
            r["t_max_c"] = float(g["temperature_c"].max())
        r["flags"] = fl
        r.update(catalyst=cat, role=str(g["role"].iloc[0]))
        rows.append(r)
    pts = _uncatalysed_points(blanks)
    if len(pts):
        act = pts["active"].to_numpy(bool)
        r = fit_temperature_series(pts["temperature_c"].to_numpy(float)[act], pts["rate"].to_numpy(float)[act],
                                   pts["se"].to_numpy(float)[act], confidence=conf,
                                   reference_temperature_c=settings.reference_temperature_c, low_ea_kj_mol=None)
        if (~act).any():
            r["flags"] = ";".join([c for c in ["no_activity", *r["flags"].split(";")] if c])
        r["t_min_c"] = float(pts["temperature_c"].min())
        r["t_max_c"] = float(pts["temperature_c"].max())
        r.update(catalyst=UNCATALYSED, role="blank")
        rows.append(r)
    out = pd.DataFrame(rows, columns=COLUMNS) if rows else pd.DataFrame(columns=COLUMNS)
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
    return out.reset_index(drop=True)


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
