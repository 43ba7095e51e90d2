"""Blanks, blank-corrected rates, TOF/TON, rate enhancement and the per-group ("rates") table.

Definitions used here (all rates in mM/h, amounts in umol, TOF in h-1):

* **Blank rate** per plate x temperature (a well's own temperature_c, which may override the
  plate's): mean, SD (ddof = 1), SE = SD/sqrt(n) of the blank wells' rates. With a single blank
  the SE is that well's own fit SE (no scatter to estimate). **Detection limit** of the blank
  mean: ``blank_lod_mM_per_h = 3 x SD / sqrt(n) = 3 x SE`` (the 3-sigma criterion, Long &
  Winefordner, Anal. Chem. 1983, 55, 712A, applied to the mean of the n blank wells that serves
  as the denominator; common practice); with one blank, 3 x its fit SE. A blank mean below its
  LOD means "background not distinguishable from zero" (flag ``blank_below_lod``).
* **Net rate** = well rate - blank rate (same plate and temperature); SE in quadrature:
  ``sqrt(se_well^2 + se_blank^2)``. Without a blank the rate is *not* corrected (flag ``no_blank``).
* **TOF (h-1)** = net rate x volume_uL x 1e-3 / sites_umol (mM/h x uL x 1e-3 = umol/h). It is an
  initial TOF when the well's method is an initial slope or first-order fit; for an end point it
  is an average TOF over the reaction time. ``tof_per_s`` = tof_per_h / 3600.
* **TON** at the last reading = (last_product_mM - blank rate x last_time_h) x volume x 1e-3 /
  sites (the blank's product at that time estimated from its rate).
* **Rate enhancement** E = well rate / blank rate with a CI on the log scale by the delta method,
  ``var(ln E) = (se_w/r_w)^2 + (se_b/r_b)^2``, t quantile with Welch-Satterthwaite df. When the
  blank mean is below its LOD the LOD is the denominator: E is a lower bound (flag
  ``enhancement_lower_bound``), the lower CI uses the well's SE only and the upper limit is +inf.
* **Outliers**: modified z = 0.6745 |x - median| / MAD > settings.outlier_z (Iglewicz & Hoaglin,
  "How to Detect and Handle Outliers", ASQC 1993) over the replicates of a group (>= 3 wells),
  on TOF (rate when sites are unknown). When MAD = 0 the mean absolute deviation is used,
  z = |x - median| / (1.253314 x MeanAD) (common practice, no source). Active groups are judged
  on the log scale against the campaign's pooled replicate scatter instead (see ``_robust_z``),
  so that three replicates of which two agree by chance do not flag the third. Wells are
  flagged, never dropped.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from screenlab import units
from screenlab.kinetics import selectivity as _selectivity
from screenlab.kinetics import sites as _sites
from screenlab.kinetics.sites import FlagIndex, join_flags
from screenlab.settings import AnalysisSettings

#: flag codes set here (code -> one plain sentence); the site codes of screenlab.kinetics.sites included
FLAGS: dict[str, str] = {
    "no_blank": "No blank well on this plate at this temperature: the rate is not blank-corrected and no "
                "enhancement is given.",
    "single_blank": "Only one blank well: its SE is the well's own fit SE and the detection limit rests on it.",
    "blank_below_lod": "The blank rate is below its detection limit (3 x SE of the blank mean): background not "
                       "distinguishable from zero.",
    "enhancement_lower_bound": "The blank is below its detection limit, so the enhancement uses the detection limit "
                               "as denominator and is a lower bound.",
    "below_blank": "The well's rate is not above its blank (net rate <= 0).",
    "no_sites": "The active-site count is unknown, so TOF and TON are not given.",
    "outlier": "This replicate lies further from its group's median than the outlier limit allows (robust z "
               "against the campaign's pooled replicate scatter); kept, not deleted.",
    "has_outlier": "At least one replicate of this group is flagged as an outlier.",
    "failed_well": "No product above the blank while this well's replicates are active (e.g. a dispensing "
                   "failure): left out of the group statistics, kept in the per-well table.",
    "excluded_failed_well": "One or more failed wells (flag failed_well) were left out of this group's statistics.",
    "single_well": "Only one well in this group: its SE is the well's own fit SE.",
    "not_above_blank": "The group's net TOF confidence interval reaches zero or below: no activity shown over "
                       "the blank.",
    **_sites.FLAGS,
    **_selectivity.FLAGS,
}

#: extra columns of the per-well turnover frame beyond the contract
TURNOVER_EXTRA = ("site_basis", "blank_lod_mM_per_h", "blank_df", "tof_per_s", "ln_enhancement_se",
                  "enhancement_df")

# columns that are never factor columns (used when factor names are not given)
_KNOWN = {
    "plate", "well", "row", "col", "role", "catalyst", "temperature_c", "loading", "loading_unit",
    "substrate_conc_mM", "volume_uL", "n_points", "method", "rate_mM_per_h", "rate_se_mM_per_h", "rate_df",
    "k_per_h", "last_time_h", "last_product_mM", "last_conversion_pct", "flags", "sites_umol", "site_basis",
    "blank_rate_mM_per_h", "blank_se_mM_per_h", "blank_lod_mM_per_h", "blank_df", "net_rate_mM_per_h",
    "net_rate_se_mM_per_h", "tof_per_h", "tof_se_per_h", "tof_per_s", "ton", "enhancement", "enhancement_ci_low",
    "enhancement_ci_high", "ln_enhancement_se", "enhancement_df", "outlier", "analyte", "format", "n_rows",
    "n_cols", "run_date", "notes", "plate_temperature_c",
}


def tof_per_s(tof_per_h):
    """TOF in s-1 from TOF in h-1 (1 h-1 = 1/3600 s-1)."""
    return units.per_h_to_per_s(tof_per_h)


def _tkey(t) -> np.ndarray:
    """Temperature key for matching wells to blanks (rounded to 1e-6 degC)."""
    return np.round(np.asarray(t, dtype=float), 6)


def t_quantile(confidence: float, df) -> np.ndarray:
    """Two-sided Student-t quantile; df = inf gives the normal quantile, df <= 0 or NaN gives NaN."""
    df = np.asarray(df, dtype=float)
    q = 0.5 + float(confidence) / 2.0
    with np.errstate(invalid="ignore"):
        out = np.where(np.isfinite(df) & (df > 0), stats.t.ppf(q, np.where(df > 0, df, 1.0)), np.nan)
        out = np.where(np.isposinf(df), stats.norm.ppf(q), out)
    return out


def welch_df(var_a, df_a, var_b, df_b) -> np.ndarray:
    """Welch-Satterthwaite df of var_a + var_b (a term with zero variance contributes nothing)."""
    va, vb = np.asarray(var_a, float), np.asarray(var_b, float)
    da, db = np.asarray(df_a, float), np.asarray(df_b, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        ta = np.where(va > 0, va ** 2 / da, 0.0)
        tb = np.where(vb > 0, vb ** 2 / db, 0.0)
        den = ta + tb
        out = np.where(den > 0, (va + vb) ** 2 / den, np.inf)
    return out


def _f(frame: pd.DataFrame, col: str) -> np.ndarray:
    if col not in frame.columns:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=float)


def _role(frame: pd.DataFrame) -> np.ndarray:
    return frame["role"].astype(object).where(frame["role"].notna(), "").astype(str).to_numpy(dtype=object)


# the flag column parsed once per distinct string (shared with sites.py)
_FlagIndex = FlagIndex


def blank_rates(wells: pd.DataFrame, settings: AnalysisSettings | None = None) -> pd.DataFrame:
    """One row per plate x temperature that has any non-empty well.

    Columns: ``plate, temperature_c, n_blanks, blank_rate_mM_per_h, blank_sd_mM_per_h,
    blank_se_mM_per_h, blank_lod_mM_per_h, flags`` plus ``blank_df`` (df of the blank SE: n - 1,
    or the single blank's fit df) and ``blank_detected`` (mean >= LOD). Plates x temperatures
    without blanks get NaN and flag ``no_blank``. Blank wells without a finite rate are ignored.
    """
    del settings  # the definition has no tunable part; kept for a uniform signature
    role = _role(wells)
    keep = role != "empty"
    w = pd.DataFrame({
        "plate": wells["plate"].to_numpy(dtype=object)[keep],
        "temperature_c": _f(wells, "temperature_c")[keep],
        "is_blank": (role == "blank")[keep],
        "rate": _f(wells, "rate_mM_per_h")[keep],
        "se": _f(wells, "rate_se_mM_per_h")[keep],
        "df": _f(wells, "rate_df")[keep],
    })
    w["tkey"] = _tkey(w["temperature_c"])
    keys = w.drop_duplicates(["plate", "tkey"])[["plate", "tkey", "temperature_c"]]
    b = w[w["is_blank"] & np.isfinite(w["rate"])]
    g = b.groupby(["plate", "tkey"], sort=False)
    agg = g.agg(n_blanks=("rate", "size"), blank_rate_mM_per_h=("rate", "mean"),
                blank_sd_mM_per_h=("rate", "std"), one_se=("se", "first"), one_df=("df", "first")).reset_index()
    out = keys.merge(agg, on=["plate", "tkey"], how="left")
    n = out["n_blanks"].fillna(0).to_numpy(dtype=float)
    sd = out["blank_sd_mM_per_h"].to_numpy(dtype=float)
    one_se = out["one_se"].to_numpy(dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        se = np.where(n >= 2, sd / np.sqrt(n), np.where(n == 1, one_se, np.nan))
        lod = 3.0 * se
    dfb = np.where(n >= 2, n - 1, np.where(n == 1, out["one_df"].to_numpy(dtype=float), np.nan))
    mean = out["blank_rate_mM_per_h"].to_numpy(dtype=float)
    detected = np.isfinite(mean) & (~np.isfinite(lod) | (mean >= lod))
    flags = join_flags(None, {
        "no_blank": n == 0,
        "single_blank": n == 1,
        "blank_below_lod": (n >= 1) & np.isfinite(lod) & (mean < lod),
    }, index=out.index)
    res = pd.DataFrame({
        "plate": out["plate"].to_numpy(dtype=object),
        "temperature_c": out["temperature_c"].to_numpy(dtype=float),
        "n_blanks": n.astype(np.int64),
        "blank_rate_mM_per_h": mean,
        "blank_sd_mM_per_h": np.where(n >= 2, sd, np.nan),
        "blank_se_mM_per_h": se,
        "blank_lod_mM_per_h": lod,
        "flags": flags.to_numpy(dtype=object),
        "blank_df": dfb,
        "blank_detected": detected & (n >= 1),
    })
    return res.sort_values(["plate", "temperature_c"], kind="stable").reset_index(drop=True)


# ----------------------------------------------------------------------------------------- per well

def _group_keys(frame: pd.DataFrame, factor_names) -> list[str]:
    return ["catalyst", "role", "temperature_c", "loading", "loading_unit", "substrate_conc_mM", *factor_names]


def _infer_factors(frame: pd.DataFrame, factor_names=None) -> tuple[str, ...]:
    if factor_names is not None:
        return tuple(f for f in factor_names if f in frame.columns)
    attr = frame.attrs.get("factor_names")
    if attr is not None:
        return tuple(f for f in attr if f in frame.columns)
    out = []
    for c in frame.columns:
        if c in _KNOWN:
            continue
        dt = frame[c].dtype
        if pd.api.types.is_string_dtype(dt) or dt == object:
            out.append(c)
    return tuple(out)


def _robust_z(values: np.ndarray, group_codes: np.ndarray, se: np.ndarray | None = None) -> np.ndarray:
    """Robust z of each value within its replicate group (NaN for groups with < 3 finite values).

    * Groups whose median is positive (active catalysts) are judged on the log scale with a
      scale pooled over the campaign: z = 0.6745 |ln x - median_g ln x| / M, where M is the
      median of the non-zero |ln x - median_g ln x| over all such groups — the modified z of
      Iglewicz & Hoaglin (1993) with the MAD pooled across groups. With three replicates a
      group's own MAD is tiny whenever two wells agree by chance, which would flag the third;
      the pooled scale does not. A non-positive value in an active group (a dead well) has
      z = inf.
    * Other groups (blanks, inactive catalysts, scattering about zero) use the group's own
      modified z = 0.6745 |x - median| / MAD; when MAD = 0, |x - median| / (1.253314 x mean
      absolute deviation) (common practice, no source).
    * With ``se`` (each value's own standard error) z is capped at |x - median| / se: a replicate
      is an outlier only when its departure is large against both the replicate scatter and its
      own measurement error (so wells near the noise floor are not flagged for noise).
    """
    values = np.asarray(values, dtype=float)
    s = pd.Series(values)
    g = pd.Series(group_codes)
    ok = np.isfinite(values) & (group_codes >= 0)
    s = s.where(ok)
    med = s.groupby(g).transform("median")
    dev = (s - med).abs()
    mad = dev.groupby(g).transform("median")
    mean_ad = dev.groupby(g).transform("mean")
    cnt = s.groupby(g).transform("count").to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.where(mad > 0, 0.6745 * dev / mad,
                     np.where(mean_ad > 0, dev / (1.253314 * mean_ad), 0.0))
        active = (med > 0).to_numpy() & ok & (cnt >= 3)
        ln = pd.Series(np.where(active & (values > 0), np.log(np.abs(values) + (values <= 0)), np.nan))
        dev_ln = (ln - ln.groupby(g).transform("median")).abs().to_numpy()
        pool = dev_ln[np.isfinite(dev_ln) & (dev_ln > 0)]
        if pool.size:
            z_ln = np.where(values > 0, 0.6745 * dev_ln / np.median(pool), np.inf)
            z = np.where(active, z_ln, z)
        if se is not None:
            se = np.asarray(se, dtype=float)
            cap = np.where(np.isfinite(se) & (se > 0), dev.to_numpy() / se, np.inf)
            z = np.minimum(z, cap)
    return np.where(ok & (cnt >= 3), z, np.nan)


def well_turnover(data, wells: pd.DataFrame, blanks: pd.DataFrame,
                  settings: AnalysisSettings | None = None) -> pd.DataFrame:
    """The well_rates columns plus sites, blank correction, TOF, TON, enhancement and outliers.

    ``data`` is the :class:`CampaignData` (its ``catalysts`` give the site counts; a bare
    catalysts frame is accepted too). Adds ``sites_umol, blank_rate_mM_per_h, blank_se_mM_per_h,
    net_rate_mM_per_h, net_rate_se_mM_per_h, tof_per_h, tof_se_per_h, ton, enhancement,
    enhancement_ci_low, enhancement_ci_high, outlier`` and also ``site_basis,
    blank_lod_mM_per_h, blank_df, tof_per_s, ln_enhancement_se, enhancement_df``. Blank and empty
    wells keep NaN TOF. ``flags`` gains this module's codes. A new frame is returned.
    """
    settings = settings or AnalysisSettings()
    catalysts = data if isinstance(data, pd.DataFrame) else data.catalysts
    factor_names = _infer_factors(wells, getattr(data, "factor_names", None))
    out = wells.copy()
    out.attrs["factor_names"] = factor_names
    role = _role(out)
    catalysed = np.isin(role, ["sample", "reference"])

    st = _sites.active_sites(out, catalysts)
    sites = np.where(catalysed, st["sites_umol"].to_numpy(dtype=float), np.nan)

    bl = blanks[["plate", "temperature_c", "n_blanks", "blank_rate_mM_per_h", "blank_se_mM_per_h",
                 "blank_lod_mM_per_h", "blank_df", "blank_detected"]].copy()
    bl["tkey"] = _tkey(bl["temperature_c"])
    bl = bl.drop(columns="temperature_c").drop_duplicates(["plate", "tkey"])
    keyed = pd.DataFrame({"plate": out["plate"].to_numpy(dtype=object), "tkey": _tkey(_f(out, "temperature_c"))})
    m = keyed.merge(bl.astype({"plate": object}), on=["plate", "tkey"], how="left", validate="many_to_one")
    n_bl = m["n_blanks"].fillna(0).to_numpy(dtype=float)
    b_rate = m["blank_rate_mM_per_h"].to_numpy(dtype=float)
    b_se = m["blank_se_mM_per_h"].to_numpy(dtype=float)
    b_lod = m["blank_lod_mM_per_h"].to_numpy(dtype=float)
    b_df = m["blank_df"].to_numpy(dtype=float)
    b_det = m["blank_detected"].fillna(False).to_numpy(dtype=bool)
    has_blank = n_bl >= 1

    rate = _f(out, "rate_mM_per_h")
    se_w = _f(out, "rate_se_mM_per_h")
    df_w = _f(out, "rate_df")
    vol = _f(out, "volume_uL")
    with np.errstate(invalid="ignore", divide="ignore"):
        b_rate_c = np.where(has_blank, b_rate, 0.0)
        b_se_c = np.where(has_blank, np.nan_to_num(b_se, nan=0.0), 0.0)
        net = np.where(catalysed, rate - b_rate_c, np.nan)
        net_se = np.where(catalysed, np.sqrt(se_w ** 2 + b_se_c ** 2), np.nan)
        amount_per_mM = units.amount_umol(1.0, vol)          # umol per mM in this well
        tof = net * amount_per_mM / sites
        tof_se = net_se * amount_per_mM / sites
        blank_product = b_rate_c * _f(out, "last_time_h")
        ton = (_f(out, "last_product_mM") - blank_product) * amount_per_mM / sites

        # enhancement: measured blank, or the LOD as denominator (lower bound)
        lower = catalysed & has_blank & ~b_det & np.isfinite(b_lod) & (b_lod > 0)
        denom = np.where(lower, b_lod, b_rate)
        usable = catalysed & has_blank & np.isfinite(denom) & (denom > 0) & np.isfinite(rate)
        enh = np.where(usable, rate / denom, np.nan)
        rel_w = (se_w / rate) ** 2
        rel_b = np.where(lower, 0.0, (b_se / b_rate) ** 2)
        ln_se = np.sqrt(rel_w + rel_b)
        enh_df = welch_df(rel_w, df_w, rel_b, b_df)
        q = t_quantile(settings.confidence, enh_df)
        ok_ci = usable & (rate > 0) & np.isfinite(ln_se)
        ln_e = np.log(np.where(ok_ci, enh, 1.0))
        e_lo = np.where(ok_ci, np.exp(ln_e - q * ln_se), np.nan)
        e_hi = np.where(ok_ci, np.where(lower, np.inf, np.exp(ln_e + q * ln_se)), np.nan)

    # outliers among replicates (catalysed wells by condition; blanks by plate x temperature)
    metric = np.where(np.isfinite(tof), tof, rate)
    keys = _group_keys(out, factor_names)
    kf = out[keys].copy()
    kf["temperature_c"] = _tkey(kf["temperature_c"])
    codes_cat = kf.groupby(keys, dropna=False, sort=False).ngroup().to_numpy()
    codes_cat = np.where(catalysed, codes_cat, -1)
    codes_bl = pd.DataFrame({"p": out["plate"].to_numpy(dtype=object), "t": keyed["tkey"]}).groupby(
        ["p", "t"], sort=False).ngroup().to_numpy()
    codes_bl = np.where(role == "blank", codes_bl, -1)
    # each well's own measurement error (the shared blank's error is common to its replicates)
    with np.errstate(invalid="ignore", divide="ignore"):
        own_se = np.where(np.isfinite(tof), se_w * amount_per_mM / sites, se_w)
    z = np.where(catalysed, _robust_z(metric, codes_cat, own_se), _robust_z(rate, codes_bl, se_w))
    outlier = ~np.isnan(z) & (z > float(settings.outlier_z))   # z = inf: a dead well among active ones

    # flag columns are factorised: each distinct flag string is parsed once (no regex per row)
    fi = _FlagIndex(out["flags"] if "flags" in out else None, n=len(out))
    base = np.asarray(fi.uniques, dtype=object)[fi.codes] if len(out) else np.zeros(0, dtype=object)
    site_flag_text = st["site_flags"].where(catalysed, "").to_numpy(dtype=object)
    base = np.where(site_flag_text == "", base, np.where(base == "", site_flag_text, base + ";" + site_flag_text))
    flags = _FlagIndex(base).join({
        "no_blank": (catalysed | (role == "blank")) & ~has_blank,
        "no_sites": catalysed & ~np.isfinite(sites),
        "below_blank": catalysed & has_blank & np.isfinite(net) & (net <= 0),
        "enhancement_lower_bound": lower & np.isfinite(enh),
        "outlier": outlier,
        # an outlier with no net activity among active replicates: a failed well, not chemistry
        "failed_well": catalysed & outlier & ~(metric > 0),
    })

    out["sites_umol"] = sites
    out["site_basis"] = np.where(catalysed, st["site_basis"].to_numpy(dtype=object), "")
    out["blank_rate_mM_per_h"] = b_rate
    out["blank_se_mM_per_h"] = b_se
    out["blank_lod_mM_per_h"] = b_lod
    out["blank_df"] = b_df
    out["net_rate_mM_per_h"] = net
    out["net_rate_se_mM_per_h"] = net_se
    out["tof_per_h"] = tof
    out["tof_se_per_h"] = tof_se
    out["tof_per_s"] = tof_per_s(tof)
    out["ton"] = ton
    out["enhancement"] = enh
    out["enhancement_ci_low"] = e_lo
    out["enhancement_ci_high"] = e_hi
    out["ln_enhancement_se"] = np.where(ok_ci, ln_se, np.nan)
    out["enhancement_df"] = np.where(ok_ci, enh_df, np.nan)
    out["outlier"] = outlier
    out["flags"] = flags
    return out


# ---------------------------------------------------------------------------------------- per group

def _standard_conditions(groups: pd.DataFrame, cond_cols: list[str]) -> np.ndarray:
    """True for rows at their catalyst's most-used condition (most wells, then most temperatures,
    then lowest loading and concentration, for a deterministic choice)."""
    c = groups[["catalyst", *cond_cols]].copy()
    c["_n"] = groups["n_wells"].to_numpy()
    cond_id = c.groupby(["catalyst", *cond_cols], dropna=False, sort=False).ngroup()
    c["_cond"] = cond_id.to_numpy()
    per = c.groupby("_cond", sort=False).agg(catalyst=("catalyst", "first"), n=("_n", "sum"),
                                              n_t=("_n", "size"), loading=("loading", "first"),
                                              conc=("substrate_conc_mM", "first")).reset_index()
    per["loading"] = per["loading"].fillna(np.inf)
    per["conc"] = per["conc"].fillna(np.inf)
    per = per.sort_values(["catalyst", "n", "n_t", "loading", "conc", "_cond"],
                          ascending=[True, False, False, True, True, True], kind="stable")
    best = per.drop_duplicates("catalyst")["_cond"].to_numpy()
    return np.isin(c["_cond"].to_numpy(), best)


def _plate_lists(group_codes: np.ndarray, n_groups: int, plate: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per group: the number of distinct plates and their sorted names joined with ``;``.

    Vectorised: distinct (group, plate) pairs sorted by group then plate name, then one
    ``np.add.reduceat`` of the (separator-prefixed) names per group.
    """
    if not len(group_codes):
        return np.zeros(n_groups, np.int64), np.full(n_groups, "", dtype=object)
    pcode, pnames = pd.factorize(plate, sort=True)          # codes in sorted name order
    pair = np.unique(group_codes.astype(np.int64) * (len(pnames) + 1) + pcode)
    pg, pp = pair // (len(pnames) + 1), pair % (len(pnames) + 1)
    n_plates = np.bincount(pg, minlength=n_groups).astype(np.int64)
    names = np.asarray(pnames, dtype=object)[pp]
    start = np.ones(len(pg), bool)
    start[1:] = pg[1:] != pg[:-1]
    names = np.where(start, names, ";" + names)
    joined = np.full(n_groups, "", dtype=object)
    joined[pg[start]] = np.add.reduceat(names, np.flatnonzero(start))
    return n_plates, joined


def group_rates(turnover: pd.DataFrame, settings: AnalysisSettings | None = None,
                factor_names=None, selectivity: pd.DataFrame | None = None) -> pd.DataFrame:
    """The "rates" table: one row per catalyst x temperature x condition (sample and reference wells).

    Columns: ``catalyst, role, temperature_c, loading, loading_unit, substrate_conc_mM,
    <factor columns>, n_wells, rate_mM_per_h, rate_sd_mM_per_h, tof_per_h, tof_sd_per_h,
    tof_se_per_h, tof_df, tof_ci_low, tof_ci_high, ton, ton_se, enhancement,
    enhancement_ci_low, enhancement_ci_high, is_standard, plates, flags`` plus ``tof_per_s,
    n_plates, n_outliers, rate_se_mM_per_h`` and the selectivity / ee columns
    ``selectivity_pct, selectivity_se, selectivity_df, selectivity_ci_low, selectivity_ci_high,
    ee_pct, ee_se, ee_df, ee_ci_low, ee_ci_high`` (NaN unless ``selectivity``, the per-well frame of
    :func:`screenlab.kinetics.selectivity.well_selectivity`, is given and the campaign declares
    by-products / enantiomers; group statistics by
    :func:`screenlab.kinetics.selectivity.summarise_groups`, whose group flags join ``flags``).

    * n_wells counts the wells with a finite rate; TOF statistics use wells with a finite TOF.
    * TOF SE of the mean: ``sqrt(SD^2/n + b^2/k)`` where b is the mean blank-SE contribution in
      TOF units and k the number of plates (the replicates on one plate share one blank mean, so
      its error does not average out); df by Welch-Satterthwaite from n - 1 and the blank df.
      Single well: the well's own TOF SE and fit df (flag ``single_well``).
    * CI: mean +/- t(conf, df) x SE (settings.confidence).
    * Enhancement: geometric mean of the replicates' enhancements; CI on the log scale with
      var = SD(ln E)^2/n + mean relative blank variance / k, or the single well's CI. A lower
      bound if any replicate's is (upper limit +inf).
    * Outliers stay in every statistic; the group carries ``has_outlier``. Failed wells (flag
      ``failed_well``: no product above the blank among active replicates) are left out of the
      statistics, counted out of ``n_wells`` and named by the group flag ``excluded_failed_well``.
    """
    settings = settings or AnalysisSettings()
    factors = _infer_factors(turnover, factor_names)
    role = _role(turnover)
    t = turnover[np.isin(role, ["sample", "reference"])].copy()
    t = t[np.isfinite(_f(t, "rate_mM_per_h"))]
    fi = _FlagIndex(t["flags"])                      # the flag column parsed once per distinct string
    failed = fi.has("failed_well")
    keys = _group_keys(t, factors)
    cond_cols = ["loading", "loading_unit", "substrate_conc_mM", *factors]
    if t.empty:
        cols = [*keys, "n_wells", "rate_mM_per_h", "rate_sd_mM_per_h", "tof_per_h", "tof_sd_per_h",
                "tof_se_per_h", "tof_df", "tof_ci_low", "tof_ci_high", "ton", "ton_se", "enhancement",
                "enhancement_ci_low", "enhancement_ci_high", "is_standard", "plates", "flags", "tof_per_s",
                "n_plates", "n_outliers", "rate_se_mM_per_h", *_selectivity.GROUP_COLUMNS]
        return pd.DataFrame(columns=cols)

    t["temperature_c"] = _tkey(t["temperature_c"])
    tof = _f(t, "tof_per_h")
    amount_per_site = units.amount_umol(1.0, _f(t, "volume_uL")) / _f(t, "sites_umol")
    with np.errstate(invalid="ignore"):
        b_tof = np.nan_to_num(_f(t, "blank_se_mM_per_h"), nan=0.0) * amount_per_site
        enh = _f(t, "enhancement")
        ln_enh = np.where(np.isfinite(enh) & (enh > 0) & np.isfinite(_f(t, "enhancement_ci_low")), np.log(
            np.where(enh > 0, enh, 1.0)), np.nan)
        rel_b = (_f(t, "blank_se_mM_per_h") / _f(t, "blank_rate_mM_per_h")) ** 2
    lb_flag = fi.has("enhancement_lower_bound")
    work = pd.DataFrame({
        "_g": t.groupby(keys, dropna=False, sort=False).ngroup().to_numpy(),
        "rate": _f(t, "rate_mM_per_h"),
        "tof": np.where(np.isfinite(tof), tof, np.nan),
        "tof_se1": _f(t, "tof_se_per_h"),
        "rate_df1": _f(t, "rate_df"),
        "b_tof2": np.where(np.isfinite(tof), b_tof ** 2, np.nan),
        "blank_df": _f(t, "blank_df"),
        "ton": _f(t, "ton"),
        "ln_e": ln_enh,
        "rel_b": np.where(np.isfinite(ln_enh) & ~lb_flag, rel_b, np.nan),
        "e_lo1": _f(t, "enhancement_ci_low"),
        "e_hi1": _f(t, "enhancement_ci_high"),
        "lb": lb_flag,
        "nb": fi.has("no_blank"),
        "ns": fi.has("no_sites"),
        "outlier": t["outlier"].to_numpy(dtype=bool) if "outlier" in t else np.zeros(len(t), bool),
        "failed": failed,
    })
    # failed wells (flag failed_well) are shown per well but left out of every group statistic
    stat_cols = ["rate", "tof", "tof_se1", "rate_df1", "b_tof2", "ton", "ln_e", "rel_b", "e_lo1", "e_hi1"]
    work.loc[work["failed"].to_numpy(), stat_cols] = np.nan
    g = work.groupby("_g", sort=True)
    a = g.agg(n_wells=("rate", "count"), n_failed=("failed", "sum"), rate_mean=("rate", "mean"), rate_sd=("rate", "std"),
              n_tof=("tof", "count"), tof_mean=("tof", "mean"), tof_sd=("tof", "std"),
              tof_se1=("tof_se1", "first"), rate_df1=("rate_df1", "first"), b2=("b_tof2", "mean"),
              blank_df=("blank_df", "min"), ton_mean=("ton", "mean"), ton_sd=("ton", "std"),
              n_ton=("ton", "count"), n_e=("ln_e", "count"), ln_e_mean=("ln_e", "mean"), ln_e_sd=("ln_e", "std"),
              rel_b=("rel_b", "mean"), e_lo1=("e_lo1", "first"), e_hi1=("e_hi1", "first"), lb=("lb", "any"),
              nb=("nb", "any"), ns=("ns", "all"), n_out=("outlier", "sum"))
    gcode = work["_g"].to_numpy()
    n_plates, plates = _plate_lists(gcode, len(a), t["plate"].astype(str).to_numpy(dtype=object))
    # the group keys from each group's first row (keys are equal within a group)
    first_row = np.unique(gcode, return_index=True)[1]
    first = t[keys].iloc[first_row]

    n = a["n_tof"].to_numpy(dtype=float)
    k = n_plates.astype(float)
    sd = a["tof_sd"].to_numpy(dtype=float)
    b2 = np.nan_to_num(a["b2"].to_numpy(dtype=float), nan=0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        v_rep = np.where(n >= 2, sd ** 2 / n, np.nan)
        v_blank = np.where(n >= 2, b2 / k, 0.0)
        se = np.where(n >= 2, np.sqrt(v_rep + v_blank), np.where(n == 1, a["tof_se1"].to_numpy(float), np.nan))
        df = np.where(n >= 2, welch_df(v_rep, n - 1, v_blank, a["blank_df"].to_numpy(float)),
                      np.where(n == 1, a["rate_df1"].to_numpy(float), np.nan))
        q = t_quantile(settings.confidence, df)
        mean = a["tof_mean"].to_numpy(dtype=float)
        lo = mean - q * se
        hi = mean + q * se
        nt = a["n_ton"].to_numpy(dtype=float)
        ton_se = np.where(nt >= 2, a["ton_sd"].to_numpy(float) / np.sqrt(nt), np.nan)

        ne = a["n_e"].to_numpy(dtype=float)
        lnm = a["ln_e_mean"].to_numpy(dtype=float)
        v_ln = np.where(ne >= 2, a["ln_e_sd"].to_numpy(float) ** 2 / ne, np.nan)
        v_lb = np.where(ne >= 2, np.nan_to_num(a["rel_b"].to_numpy(float), nan=0.0) / k, 0.0)
        qe = t_quantile(settings.confidence, np.where(ne >= 2, welch_df(v_ln, ne - 1, v_lb,
                                                                        a["blank_df"].to_numpy(float)), np.nan))
        lb = a["lb"].to_numpy(dtype=bool)
        e_mean = np.where(ne >= 1, np.exp(lnm), np.nan)
        e_lo = np.where(ne >= 2, np.exp(lnm - qe * np.sqrt(v_ln + v_lb)),
                        np.where(ne == 1, a["e_lo1"].to_numpy(float), np.nan))
        e_hi = np.where(ne >= 2, np.where(lb, np.inf, np.exp(lnm + qe * np.sqrt(v_ln + v_lb))),
                        np.where(ne == 1, a["e_hi1"].to_numpy(float), np.nan))

    res = first.reset_index(drop=True)
    res["n_wells"] = a["n_wells"].to_numpy(dtype=np.int64)
    res["rate_mM_per_h"] = a["rate_mean"].to_numpy(dtype=float)
    res["rate_sd_mM_per_h"] = a["rate_sd"].to_numpy(dtype=float)
    res["tof_per_h"] = mean
    res["tof_sd_per_h"] = np.where(n >= 2, sd, np.nan)
    res["tof_se_per_h"] = se
    res["tof_df"] = df
    res["tof_ci_low"] = lo
    res["tof_ci_high"] = hi
    res["ton"] = a["ton_mean"].to_numpy(dtype=float)
    res["ton_se"] = ton_se
    res["enhancement"] = e_mean
    res["enhancement_ci_low"] = e_lo
    res["enhancement_ci_high"] = e_hi
    res["is_standard"] = _standard_conditions(res, cond_cols)
    res["plates"] = plates
    res["flags"] = _FlagIndex(None, n=len(res)).join({
        "single_well": n == 1,
        "has_outlier": a["n_out"].to_numpy() > 0,
        "excluded_failed_well": a["n_failed"].to_numpy() > 0,
        "no_blank": a["nb"].to_numpy(dtype=bool),
        "no_sites": a["ns"].to_numpy(dtype=bool),
        "enhancement_lower_bound": lb & np.isfinite(e_mean),
        "not_above_blank": (n >= 1) & ~a["nb"].to_numpy(dtype=bool) & (
            (mean <= 0) | (np.isfinite(lo) & (lo <= 0))),
    })
    res["tof_per_s"] = tof_per_s(mean)
    res["n_plates"] = n_plates
    res["n_outliers"] = a["n_out"].to_numpy(dtype=np.int64)
    with np.errstate(invalid="ignore"):
        res["rate_se_mM_per_h"] = np.where(a["n_wells"].to_numpy() >= 2,
                                           res["rate_sd_mM_per_h"] / np.sqrt(a["n_wells"].to_numpy(float)), np.nan)
    n_groups = len(res)
    if selectivity is not None and len(selectivity):
        sel_cols = [c for c in selectivity.columns if c not in ("role", "catalyst", "temperature_c")]
        aligned = t[["plate", "well"]].astype(object).merge(
            selectivity[sel_cols].astype({"plate": object, "well": object}), on=["plate", "well"], how="left")
        sel = _selectivity.summarise_groups(aligned, work["_g"].to_numpy(), n_groups, settings.confidence)
    else:
        sel = _selectivity.summarise_groups(pd.DataFrame({"flags": []}), np.zeros(0, dtype=np.int64), n_groups,
                                            settings.confidence)
    for c in _selectivity.GROUP_COLUMNS:
        res[c] = sel[c].to_numpy(dtype=float)
    sel_flags = sel["flags"].to_numpy(dtype=object)
    cur = res["flags"].to_numpy(dtype=object)
    res["flags"] = np.where(sel_flags == "", cur, np.where(cur == "", sel_flags, cur + ";" + sel_flags))
    res.attrs["factor_names"] = factors
    res = res.sort_values(["catalyst", "temperature_c", "loading", "substrate_conc_mM"],
                          kind="stable", na_position="last").reset_index(drop=True)
    return res
