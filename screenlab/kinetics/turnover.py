"""Blanks, blank-corrected rates, TOF/TON, rate enhancement and the per-group ("rates") table.

Definitions used here (all rates in mM/h, amounts in umol, TOF in h-1):

* **Blank rate** per plate x temperature x substrate level (a well's own temperature_c, which may
  override the plate's): mean, SD (ddof = 1) and SE = max(SD, RMS of the wells' fit SEs)/sqrt(n)
  of the blank wells' rates (the fit errors are a floor under a chance agreement of few blanks); its
  df is n - 1, or the fits' summed df where their errors set it (checked against the truth: the
  enhancement intervals cover 97-98 %, 99.8 % with n - 1). With a single blank
  the SE is that well's own fit SE (no scatter to estimate). **Detection limit** of the blank
  mean: ``blank_lod_mM_per_h = 3 x SD / sqrt(n) = 3 x SE`` (the 3-sigma criterion, Long &
  Winefordner, Anal. Chem. 1983, 55, 712A, applied to the mean of the n blank wells that serves
  as the denominator; common practice); with one blank, 3 x its fit SE. A blank mean below its
  LOD means "background not distinguishable from zero" (flag ``blank_below_lod``).
* **Net rate** = well rate - blank rate (same plate, temperature and substrate level); SE in quadrature:
  ``sqrt(se_well^2 + se_blank^2)``. Without a blank the rate is *not* corrected (flag ``no_blank``).
* **TOF (h-1)** = net rate x volume_uL x 1e-3 / sites_umol (mM/h x uL x 1e-3 = umol/h). It is an
  initial TOF when the well's method is an initial slope or first-order fit; for an end point it
  is an average TOF over the reaction time. ``tof_per_s`` = tof_per_h / 3600.
* **TON** at the last reading = (last_product_mM - background product) x volume x 1e-3 / sites.
  The background runs on the substrate the well has left (first order in substrate, parallel to
  the catalysed path), so its product is the blank rate x the integral of (1 - X) dt over the
  course (``substrate_integral_h`` of the rate step); without that integral, blank rate x
  last_time_h.
* **Rate enhancement** E = well rate / blank rate with a CI on the log scale by the delta method,
  ``var(ln E) = (se_w/r_w)^2 + (se_b/r_b)^2``, t quantile with Welch-Satterthwaite df. When the
  blank mean is below its LOD the blank's upper confidence limit, max(r_b, 0) + t(df) x se_b
  (3 x se_b without a df), is the denominator: E is a lower bound (flag
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

from screenlab import _groups as grp
from screenlab import units
from screenlab._groups import FlagIndex
from screenlab.kinetics import selectivity as _selectivity
from screenlab.kinetics import sites as _sites
from screenlab.kinetics.amounts import well_index
from screenlab.settings import AnalysisSettings
from screenlab.uncertainty import t_quantile, welch_df

#: flag codes set here (code -> one plain sentence); the site codes of screenlab.kinetics.sites included
FLAGS: dict[str, str] = {
    "no_blank": "No blank well on this plate at this temperature: the rate is not blank-corrected and no "
                "enhancement is given.",
    "single_blank": "Only one blank well: its SE is the well's own fit SE and the detection limit rests on it.",
    "blank_below_lod": "The blank rate is below its detection limit (3 x SE of the blank mean): background not "
                       "distinguishable from zero.",
    "enhancement_lower_bound": "The blank is below its detection limit, so the enhancement uses the blank's upper "
                               "confidence limit as denominator and is a lower bound.",
    "below_blank": "The well's rate is not above its blank (net rate <= 0).",
    "no_sites": "The active-site count is unknown, so TOF and TON are not given.",
    "outlier": "This replicate lies further from its group's median than the outlier limit allows (robust z "
               "against the campaign's pooled replicate scatter); kept, not deleted.",
    "has_outlier": "At least one replicate of this group is flagged as an outlier.",
    "failed_well": "No product above the blank while this well's replicates are active (e.g. a dispensing "
                   "failure): left out of the group statistics, kept in the per-well table.",
    "excluded_failed_well": "One or more failed wells (flag failed_well) were left out of this group's statistics.",
    "edge_left_out": "This well is on the outer ring of a plate whose ring reads differently from its interior "
                     "(edge effect), and its group has interior wells on that plate: it is left out of the group's "
                     "statistics, kept in the per-well table.",
    "excluded_edge_wells": "Ring wells of a plate with an edge effect were left out of this group's statistics; "
                           "its interior wells on that plate carry it.",
    "single_well": "Only one well in this group: its SE is the well's own fit SE.",
    "not_above_blank": "The group's net TOF confidence interval reaches zero or below: no activity shown over "
                       "the blank.",
    "blank_scaled": "No blank at this substrate level on the plate: the blank of another level was scaled to it "
                    "as a background first order in substrate.",
    "blank_outlier_excluded": "A blank well that is a replicate outlier of its level was left out of the blank mean.",
    "blank_left_out": "Blank wells on the outer ring of a plate with an edge effect were left out of the blank mean "
                      "(the ring reads differently from the interior).",
    "ton_capped": "The well (group: most wells) reached full conversion, so its TON is limited by the substrate / "
                  "site ratio: a lower bound of what the catalyst can turn over.",
    "censored_replicate": "Some replicates (fewer than half) were done before their first reading; they are left "
                          "out of the group's estimate, which rests on the others.",
    **_sites.FLAGS,
    **_selectivity.FLAGS,
}

# columns that are never factor columns (used when factor names are not given)
_KNOWN = {
    "plate", "well", "row", "col", "role", "catalyst", "temperature_c", "loading", "loading_unit",
    "substrate_conc_mM", "volume_uL", "n_points", "method", "rate_mM_per_h", "rate_se_mM_per_h", "rate_df",
    "k_per_h", "last_time_h", "last_product_mM", "last_conversion_pct", "flags", "sites_umol", "site_basis",
    "blank_rate_mM_per_h", "blank_se_mM_per_h", "blank_lod_mM_per_h", "blank_df", "net_rate_mM_per_h",
    "net_rate_se_mM_per_h", "tof_per_h", "tof_se_per_h", "tof_per_s", "ton", "enhancement", "enhancement_ci_low",
    "enhancement_ci_high", "ln_enhancement_se", "enhancement_df", "outlier", "analyte", "format", "n_rows",
    "n_cols", "run_date", "notes", "plate_temperature_c", "censored", "tof_bound_per_h", "tof_max_per_h",
    "rate_ci_low_mM_per_h", "rate_ci_high_mM_per_h", "window_points", "law_p1", "law_p2", "law_capped",
    "plateau_mM", "resid_sd_mM", "noise_ratio", "max_rate_mM_per_h", "has_t0", "first_time_h",
    "first_conversion_pct", "fit_points", "substrate_integral_h", "rate_law", "in_arrhenius_fit",
}


def tof_per_s(tof_per_h):
    """TOF in s-1 from TOF in h-1 (1 h-1 = 1/3600 s-1)."""
    return units.per_h_to_per_s(tof_per_h)


def _tkey(t) -> np.ndarray:
    """Temperature key for matching wells to blanks (rounded to 1e-6 degC)."""
    return np.round(np.asarray(t, dtype=float), 6)


#: last conversion at or above which a well counts as fully converted: its TON is then limited by
#: the substrate / site ratio (flag ton_capped; common practice, no source)
TON_FULL_CONVERSION_PCT = 95.0


def _text(frame: pd.DataFrame, col: str) -> np.ndarray:
    """Object array of str of a text column ("" where missing or absent)."""
    if col not in frame.columns:
        return np.full(len(frame), "", dtype=object)
    return frame[col].astype("string").fillna("").to_numpy(dtype=object)


def _f(frame: pd.DataFrame, col: str) -> np.ndarray:
    if col not in frame.columns:
        return np.full(len(frame), np.nan)
    values = frame[col]
    if isinstance(values.dtype, np.dtype) and values.dtype.kind in "fiu":
        return values.to_numpy(dtype=float)               # already numeric: nothing to coerce
    return pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)



class _Roles:
    """The role column factorised once: ``is_(*names)`` compares the distinct words, not the rows."""

    def __init__(self, frame: pd.DataFrame):
        self.codes, uniques = grp.factorize(frame["role"])
        # code -1 (missing) takes the trailing ""
        self.words = np.array([str(u) for u in uniques] + [""], dtype=object)
        self.key = grp.with_missing(self.codes, uniques)

    def is_(self, *names: str) -> np.ndarray:
        return np.isin(self.words, names)[self.codes]

    def text(self) -> np.ndarray:
        return self.words[self.codes]


def _role(frame: pd.DataFrame) -> np.ndarray:
    """Object array of str: each row's role, "" where missing (one str() per distinct value)."""
    return _Roles(frame).text()


def blank_rates(wells: pd.DataFrame, settings: AnalysisSettings | None = None, exclude=None) -> pd.DataFrame:
    """One row per plate x temperature x substrate level that has any non-empty well.

    Columns: ``plate, temperature_c, substrate_conc_mM, n_blanks, blank_rate_mM_per_h,
    blank_sd_mM_per_h, blank_se_mM_per_h, blank_lod_mM_per_h, flags`` plus ``blank_df`` (df of the
    blank SE: n - 1, the blanks' summed fit df where their fit errors set the SE, or the single
    blank's fit df), ``blank_detected`` (mean >= LOD),
    ``blank_conc_mM`` (the substrate level the blank wells had) and ``n_blank_outliers``.

    * A level with its own blank wells uses them (a concentration series then has a blank per
      level, so apparent orders are not biased by one level's background).
    * A level without blanks on a plate x temperature that has blanks at other levels takes the
      level with the most blank wells (ties: the level listed first), scaled to this level's
      substrate as a background first order in substrate, ``r_b x S/S_b`` (flag ``blank_scaled``;
      SE and LOD scaled alike).
    * Blank wells that are replicate outliers of their level (robust z above
      ``settings.outlier_z``, see :func:`_robust_z`, three or more blanks) are left out of the
      mean (flag ``blank_outlier_excluded``; the wells keep flag ``outlier``), and so are blanks
      without a finite rate or done at their first reading.
    * No blank on the plate x temperature at all: NaN and flag ``no_blank``.
    * ``exclude`` (one bool per row of ``wells``): blank wells left out on purpose (the pipeline
      leaves out the blanks on the outer ring of a plate with an edge effect); flag
      ``blank_left_out`` on their level's row.
    """
    settings = settings or AnalysisSettings()
    roles = _Roles(wells)
    keep = np.flatnonzero(~roles.is_("empty"))
    temp_all = _f(wells, "temperature_c")
    conc_all = _f(wells, "substrate_conc_mM")
    plate_c = grp.codes(wells["plate"])
    t_c = grp.codes(_tkey(temp_all))
    c_c = grp.codes(_ckey(conc_all))
    kcode = grp.group_index([plate_c, t_c, c_c], keep)       # plate x temperature x level, per kept well
    pt_code = grp.group_index([plate_c, t_c], keep)          # plate x temperature
    K = int(kcode.max()) + 1 if kcode.size else 0
    first = grp.first_rows(kcode)
    m = _blank_means(wells, roles, keep, kcode, K, settings, exclude)
    conc_k = conc_all[keep][first]
    # levels without blanks: the plate x temperature's best-provided level, scaled by substrate
    src = _borrowed_levels(m["n"], pt_code[first], K)
    scaled = (m["n"] == 0) & (src != np.arange(K))
    with np.errstate(invalid="ignore", divide="ignore"):
        factor = np.where(scaled, conc_k / conc_k[src], 1.0)
        factor = np.where(np.isfinite(factor), factor, np.nan)
        mean_o, sd_o, se_o = m["mean"][src] * factor, m["sd"][src] * factor, m["se"][src] * factor
    n_o, dfb_o = m["n"][src], m["df"][src]
    lod = 3.0 * se_o
    detected = np.isfinite(mean_o) & (~np.isfinite(lod) | (mean_o >= lod))
    flag_words, flag_codes = FlagIndex(None, n=K).join_codes({
        "no_blank": n_o == 0,
        "single_blank": n_o == 1,
        "blank_below_lod": (n_o >= 1) & np.isfinite(lod) & (mean_o < lod),
        "blank_scaled": scaled & (n_o >= 1),
        "blank_outlier_excluded": m["n_out"] > 0,
        "blank_left_out": m["n_dropped"] > 0,
    })
    plate = wells["plate"].iloc[keep[first]].to_numpy(dtype=object)
    temperature = temp_all[keep][first]
    by = grp.sort_order([plate, temperature, conc_k])
    return pd.DataFrame({
        "plate": plate[by],
        "temperature_c": temperature[by],
        "substrate_conc_mM": conc_k[by],
        "n_blanks": n_o.astype(np.int64)[by],
        "blank_rate_mM_per_h": mean_o[by],
        "blank_sd_mM_per_h": sd_o[by],
        "blank_se_mM_per_h": se_o[by],
        "blank_lod_mM_per_h": lod[by],
        "flags": _sites.text_array(flag_words, flag_codes[by]),
        "blank_df": dfb_o[by],
        "blank_detected": (detected & (n_o >= 1))[by],
        "blank_conc_mM": conc_k[src][by],
        "n_blank_outliers": m["n_out"].astype(np.int64)[by],
    })


def _blank_means(wells: pd.DataFrame, roles: _Roles, keep: np.ndarray, kcode: np.ndarray, K: int,
                 settings: AnalysisSettings, exclude) -> dict[str, np.ndarray]:
    """Per level (``kcode`` of the kept wells ``keep``, K levels): the blank wells' mean, SD, SE
    and df (``n``, ``mean``, ``sd``, ``se``, ``df``) after leaving out the replicate outliers
    (``n_out``) and the blanks excluded on purpose (``n_dropped``), as :func:`blank_rates` says."""
    rate = _f(wells, "rate_mM_per_h")[keep]
    se_w = _f(wells, "rate_se_mM_per_h")[keep]
    cens = (wells["censored"].astype("string").fillna("").to_numpy(dtype=object)[keep] != ""
            if "censored" in wells.columns else np.zeros(len(keep), dtype=bool))
    dropped = np.zeros(len(keep), dtype=bool) if exclude is None else np.asarray(exclude, dtype=bool)[keep]
    is_blank = roles.is_("blank")[keep]
    blank = is_blank & np.isfinite(rate) & ~cens & ~dropped
    n_dropped = grp.group_count(kcode, K, dropped & is_blank)
    z = _robust_z(np.where(blank, rate, np.nan), np.where(blank, kcode, -1), se_w)
    out_b = blank & ~np.isnan(z) & (z > float(settings.outlier_z))
    used = blank & ~out_b
    bk = kcode[used]
    n = grp.group_count(bk, K).astype(float)
    n_out = grp.group_count(kcode, K, out_b)
    mean = np.full(K, np.nan)
    sd = np.full(K, np.nan)
    one_se = np.full(K, np.nan)
    one_df = np.full(K, np.nan)
    fit_sd = np.full(K, np.nan)
    if bk.size:
        gb = pd.Series(rate[used]).groupby(bk, sort=True)
        present = np.unique(bk)
        mean[present] = gb.mean().to_numpy(dtype=float)
        sd[present] = gb.std().to_numpy(dtype=float)
        # the blanks' own fit errors (RMS): a floor under their scatter, as for catalysed replicates
        fit_sd[present] = np.sqrt(pd.Series(se_w[used] ** 2).groupby(bk, sort=True).mean().to_numpy(dtype=float))
        order, sorted_codes, _ = grp.group_order(bk, 0)
        one_se = grp.group_first(se_w[used], order, sorted_codes, K)
        one_df = grp.group_first(_f(wells, "rate_df")[keep][used], order, sorted_codes, K)
        fit_df = grp.group_sum(bk, K, np.nan_to_num(_f(wells, "rate_df")[keep][used], nan=0.0))
    else:
        fit_df = np.zeros(K)
    with np.errstate(invalid="ignore", divide="ignore"):
        scatter = np.fmax(sd, fit_sd)
        se = np.where(n >= 2, scatter / np.sqrt(n), np.where(n == 1, one_se, np.nan))
        # the SE's df: n - 1 when the blanks' scatter sets it; when their own fit errors set it (the
        # scatter below them by chance) it rests on the fits' readings, their summed df
        floor = (n >= 2) & (fit_sd > sd) & (fit_df > n - 1)
        df = np.where(floor, fit_df, np.where(n >= 2, n - 1, np.where(n == 1, one_df, np.nan)))
    return {"n": n, "mean": mean, "sd": np.where(n >= 2, sd, np.nan), "se": se,
            "df": df, "n_out": n_out, "n_dropped": n_dropped}


def _borrowed_levels(n: np.ndarray, pt_k: np.ndarray, K: int) -> np.ndarray:
    """Per level: the level whose blanks it uses -- itself, or (no blank wells of its own, ``n``
    = 0) the level of its plate x temperature (``pt_k``) with the most blank wells, then the one
    seen first; itself again when its plate x temperature has no blanks at all."""
    src = np.arange(K)
    missing = n == 0
    if missing.any() and (n > 0).any():
        have = np.flatnonzero(n > 0)
        best_of_pt = np.full(int(pt_k.max()) + 1, -1, dtype=np.int64)
        order = np.lexsort((have, -n[have], pt_k[have]))
        lead = np.ones(order.size, dtype=bool)
        lead[1:] = pt_k[have][order][1:] != pt_k[have][order][:-1]
        best_of_pt[pt_k[have][order][lead]] = have[order][lead]
        cand = best_of_pt[pt_k]
        fill = missing & (cand >= 0)
        src = np.where(fill, cand, src)
    return src


def _ckey(conc) -> np.ndarray:
    """Substrate-level key for matching wells to their level's blank: the concentration to 9
    significant digits (one format per distinct value, a handful)."""
    c = np.asarray(conc, dtype=float)
    if not c.size:
        return c
    u, inv = np.unique(c, return_inverse=True)          # NaN values sort last and stay NaN
    key = np.array([float(f"{v:.9g}") if np.isfinite(v) else v for v in u])
    return key[inv.ravel()]


# ----------------------------------------------------------------------------------------- per well

def replicate_keys(frame: pd.DataFrame, factor_names) -> list[str]:
    """The columns whose values make wells replicates of one another (one group of the rates table)."""
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
    group_codes = np.asarray(group_codes)
    ok = np.isfinite(values) & (group_codes >= 0)
    z = np.full(values.shape, np.nan)
    rows = np.flatnonzero(ok)
    if not rows.size:
        return z
    # statistics over the rows in a group only (others take no part), groups renumbered 0..G-1
    g, _ = grp.factorize(group_codes[rows])
    G = int(g.max()) + 1
    x = values[rows]
    cnt = grp.group_count(g, G)
    median = grp.Medians(g, G)
    med = median(x)[g]
    dev = np.abs(x - med)
    mad = median(dev)[g]
    with np.errstate(invalid="ignore", divide="ignore"):
        zr = np.where(mad > 0, 0.6745 * dev / mad, 0.0)
        flat = mad == 0                        # MAD = 0: the mean absolute deviation instead
        if flat.any():
            mean_ad = pd.Series(dev[flat]).groupby(g[flat], sort=True).mean()
            mad0 = np.full(G, np.nan)
            mad0[mean_ad.index.to_numpy(dtype=np.int64)] = mean_ad.to_numpy(dtype=float)
            m0 = mad0[g[flat]]
            zr[flat] = np.where(m0 > 0, dev[flat] / (1.253314 * m0), 0.0)
        active = (med > 0) & (cnt[g] >= 3)
        pos = active & (x > 0)
        dev_ln = np.full(x.shape, np.nan)
        if pos.any():
            ln = np.full(x.shape, np.nan)
            ln[pos] = np.log(x[pos])
            dev_ln = np.abs(ln - median(ln)[g])
        pool = dev_ln[np.isfinite(dev_ln) & (dev_ln > 0)]
        if pool.size:
            z_ln = np.where(x > 0, 0.6745 * dev_ln / np.median(pool), np.inf)
            zr = np.where(active, z_ln, zr)
        if se is not None:
            se_r = np.asarray(se, dtype=float)[rows]
            cap = np.where(np.isfinite(se_r) & (se_r > 0), dev / se_r, np.inf)
            zr = np.minimum(zr, cap)
    z[rows] = np.where(cnt[g] >= 3, zr, np.nan)
    return z


def well_turnover(data, wells: pd.DataFrame, blanks: pd.DataFrame,
                  settings: AnalysisSettings | None = None, excluded_blanks=None, excluded_wells=None) -> pd.DataFrame:
    """The well_rates columns plus sites, blank correction, TOF, TON, enhancement and outliers.

    ``data`` is the :class:`CampaignData` (its ``catalysts`` give the site counts; a bare
    catalysts frame is accepted too). Adds ``sites_umol, blank_rate_mM_per_h, blank_se_mM_per_h,
    net_rate_mM_per_h, net_rate_se_mM_per_h, tof_per_h, tof_se_per_h, ton, enhancement,
    enhancement_ci_low, enhancement_ci_high, outlier`` and also ``site_basis,
    blank_lod_mM_per_h, blank_df, tof_per_s, ln_enhancement_se, enhancement_df``. Blank and empty
    wells keep NaN TOF. ``flags`` gains this module's codes. A new frame is returned.
    ``excluded_blanks`` / ``excluded_wells`` (one bool per row): blank wells left out of the blank
    means, catalysed wells left out of their group statistics on purpose (the pipeline's ring wells
    of a plate with an edge effect; flags ``blank_left_out`` / ``edge_left_out``); neither takes part
    in the replicate outlier test.
    """
    settings = settings or AnalysisSettings()
    catalysts = data if isinstance(data, pd.DataFrame) else data.catalysts
    factor_names = _infer_factors(wells, getattr(data, "factor_names", None))
    roles = _Roles(wells)
    catalysed = roles.is_("sample", "reference")
    is_blank = roles.is_("blank")
    # each string column factorised once, shared by the site lookup and the replicate groups
    parts = {c: grp.factorize(wells[c]) for c in ("catalyst", "loading_unit") if c in wells}

    site_umol, site_basis, (site_words, site_codes) = _sites.site_arrays(wells, catalysts, factorized=parts)
    sites = np.where(catalysed, site_umol, np.nan)
    tkey = _tkey(_f(wells, "temperature_c"))
    bl = _well_blanks(wells, blanks, tkey)
    w = _net_rates(wells, bl, catalysed, sites, settings)
    e = _enhancements(w, bl, catalysed, settings)

    # outliers among replicates (catalysed wells by condition; blanks by plate x temperature)
    keys = replicate_keys(wells, factor_names)
    known = {"temperature_c": grp.codes(tkey), "role": roles.key, **{c: grp.with_missing(*v) for c, v in parts.items()},
             "substrate_conc_mM": grp.codes(_ckey(_f(wells, "substrate_conc_mM")))}
    replicates = np.where(catalysed, grp.group_index([known[k] if k in known else wells[k] for k in keys]), -1)
    left_out = (np.zeros(len(wells), dtype=bool) if excluded_wells is None
                else catalysed & np.asarray(excluded_wells, dtype=bool))
    outlier, metric = _replicate_outliers(w, sites, catalysed, np.where(left_out, -1, replicates),
                                          np.where(is_blank, bl["pt_code"], -1), settings, excluded_blanks)

    flag_words, flag_codes = _well_flags(wells, catalysed, is_blank, sites, (site_words, site_codes), bl, w, e,
                                         outlier, metric, excluded_blanks, left_out)
    censored = np.where(catalysed & w["lower_w"], "lower", np.where(w["upper_w"], "upper", ""))
    with np.errstate(invalid="ignore"):
        tof_bound = (np.where(w["upper_w"], np.maximum(w["net"], 0.0) + w["q_w"] * w["net_se"], w["net"])
                     * w["amount_per_mM"] / sites)

    new = {
        "sites_umol": sites,
        "site_basis": _sites.text_array(_sites.BASIS_WORDS, np.where(catalysed, site_basis, 0)),
        "blank_rate_mM_per_h": bl["rate"],
        "blank_se_mM_per_h": bl["se"],
        "blank_lod_mM_per_h": bl["lod"],
        "blank_df": bl["df"],
        "net_rate_mM_per_h": w["net"],
        "net_rate_se_mM_per_h": w["net_se"],
        "tof_per_h": w["tof"],
        "tof_se_per_h": w["tof_se"],
        "tof_per_s": tof_per_s(w["tof"]),
        "ton": w["ton"],
        "enhancement": e["enh"],
        "enhancement_ci_low": e["lo"],
        "enhancement_ci_high": e["hi"],
        "ln_enhancement_se": np.where(e["ok_ci"], e["ln_se"], np.nan),
        "enhancement_df": np.where(e["ok_ci"], e["df"], np.nan),
        "outlier": outlier,
        "flags": _sites.text_array(flag_words, flag_codes),
        "censored": pd.array(censored.astype(str), dtype="string"),
        "tof_bound_per_h": np.where(censored != "", tof_bound, np.nan),
        "tof_max_per_h": np.where(catalysed, w["tof_max"], np.nan),
    }
    out = _sites.with_columns(wells, new)
    out.attrs["factor_names"] = factor_names
    return out


def _well_flags(wells: pd.DataFrame, catalysed: np.ndarray, is_blank: np.ndarray, sites: np.ndarray, site_flags,
                bl: dict, w: dict, e: dict, outlier: np.ndarray, metric: np.ndarray,
                excluded_blanks, left_out: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each well's flags (distinct texts and a code per well): its incoming flags, its site flags
    (``site_flags``: words and codes of :func:`screenlab.kinetics.sites.site_arrays`), then this
    module's codes."""
    n_wells = len(wells)
    site_words, site_codes = site_flags
    # flag columns are factorised: each distinct flag string is parsed once (no regex per row);
    # the incoming flags and the site flags are combined per distinct pair
    fi = FlagIndex(wells["flags"] if "flags" in wells else None, n=n_wells)
    s_code = np.where(catalysed, site_codes, -1) if len(site_codes) else np.full(n_wells, -1)
    words, pair = grp.merge_texts(fi.uniques, fi.codes, ["", *(str(x) for x in site_words)], s_code + 1)
    return FlagIndex.from_codes(pair, words).join_codes({
        "no_blank": (catalysed | is_blank) & ~bl["has_blank"],
        "no_sites": catalysed & ~np.isfinite(sites),
        "below_blank": catalysed & bl["has_blank"] & np.isfinite(w["net"]) & (w["net"] <= 0),
        "enhancement_lower_bound": (e["lower"] | w["lower_w"]) & np.isfinite(e["enh"]),
        "outlier": outlier,
        # an outlier with no net activity among active replicates: a failed well, not chemistry
        "failed_well": catalysed & outlier & ~(metric > 0),
        "ton_capped": w["ton_capped"] & np.isfinite(w["ton"]),
        "blank_left_out": (is_blank & np.asarray(excluded_blanks, dtype=bool)) if excluded_blanks is not None
        else np.zeros(n_wells, dtype=bool),
        "edge_left_out": left_out,
    })


def _well_blanks(wells: pd.DataFrame, blanks: pd.DataFrame, tkey: np.ndarray) -> dict[str, np.ndarray]:
    """Each well's blank (same plate, temperature and substrate level): its ``rate``, ``se``,
    ``lod``, ``df``, ``detected`` and ``n`` from the blanks table (NaN / 0 / False without one),
    ``has_blank`` (n >= 1) and ``pt_code``, the blank group (plate x temperature x level) of each well."""
    n_wells = len(wells)
    ckey = _ckey(_f(wells, "substrate_conc_mM"))
    plate_parts = grp.factorize(wells["plate"])
    pt_code = grp.group_index([grp.with_missing(*plate_parts), grp.codes(tkey), grp.codes(ckey)])
    brow = _blank_rows(plate_parts, tkey, ckey, blanks)
    found = brow >= 0

    def from_blank(col: str, fill=np.nan) -> np.ndarray:
        v = pd.to_numeric(blanks[col], errors="coerce").to_numpy(dtype=float) if col != "blank_detected" \
            else blanks[col].fillna(False).to_numpy(dtype=bool)
        got = v[np.maximum(brow, 0)] if len(v) else np.zeros(n_wells, dtype=v.dtype)
        return np.where(found, got, fill)

    n_bl = np.nan_to_num(from_blank("n_blanks", 0.0), nan=0.0)
    return {"pt_code": pt_code, "n": n_bl, "has_blank": n_bl >= 1,
            "rate": from_blank("blank_rate_mM_per_h"), "se": from_blank("blank_se_mM_per_h"),
            "lod": from_blank("blank_lod_mM_per_h"), "df": from_blank("blank_df"),
            "detected": from_blank("blank_detected", False).astype(bool)}


def _net_rates(wells: pd.DataFrame, bl: dict, catalysed: np.ndarray, sites: np.ndarray,
               settings: AnalysisSettings) -> dict[str, np.ndarray]:
    """Per well: the rate columns used below (``rate``, ``se_w``, ``df_w``, ``lower_w``: done
    before its first reading), the net rate over its blank and its SE, TOF, TON (``ton_capped`` at
    full conversion), ``tof_max`` and whether the net rate's interval reaches zero (``upper_w``,
    with its t quantile ``q_w``); see the module docstring for the definitions."""
    rate = _f(wells, "rate_mM_per_h")
    se_w = _f(wells, "rate_se_mM_per_h")
    df_w = _f(wells, "rate_df")
    vol = _f(wells, "volume_uL")
    lower_w = _text(wells, "censored") == "lower"
    has_blank = bl["has_blank"]
    with np.errstate(invalid="ignore", divide="ignore"):
        b_rate_c = np.where(has_blank, bl["rate"], 0.0)
        b_se_c = np.where(has_blank, np.nan_to_num(bl["se"], nan=0.0), 0.0)
        net = np.where(catalysed, rate - b_rate_c, np.nan)
        net_se = np.where(catalysed & ~lower_w, np.sqrt(se_w ** 2 + b_se_c ** 2), np.nan)
        amount_per_mM = units.amount_umol(1.0, vol)          # umol per mM in this well
        # TON: the background in a catalysed well runs on the substrate that well had left
        # (parallel pathways, the background first order in substrate): its product rate is the
        # blank's r_b x (1 - X), so its product is r_b x integral of (1 - X) dt. r_b is already a
        # product rate (mM of product per h), so product_per_substrate does not enter again.
        s_int = _f(wells, "substrate_integral_h")
        blank_product = np.where(np.isfinite(s_int), b_rate_c * s_int, b_rate_c * _f(wells, "last_time_h"))
        # not distinguishable from the blank: the net rate's interval reaches zero
        q_w = t_quantile(settings.confidence, np.where(catalysed & np.isfinite(net_se), welch_df(
            se_w ** 2, df_w, b_se_c ** 2, bl["df"]), np.nan))
        return {
            "rate": rate, "se_w": se_w, "df_w": df_w, "lower_w": lower_w,
            "net": net, "net_se": net_se, "amount_per_mM": amount_per_mM,
            "tof": net * amount_per_mM / sites,
            "tof_se": net_se * amount_per_mM / sites,
            "tof_max": (_f(wells, "max_rate_mM_per_h") - b_rate_c) * amount_per_mM / sites,
            "ton": (_f(wells, "last_product_mM") - blank_product) * amount_per_mM / sites,
            "ton_capped": catalysed & (_f(wells, "last_conversion_pct") >= TON_FULL_CONVERSION_PCT),
            "q_w": q_w,
            "upper_w": catalysed & ~lower_w & np.isfinite(net) & np.isfinite(q_w) & (net - q_w * net_se <= 0),
        }


def _enhancements(w: dict, bl: dict, catalysed: np.ndarray, settings: AnalysisSettings) -> dict[str, np.ndarray]:
    """Per well: the rate enhancement over its blank (``enh``) with its log-scale CI (``lo``,
    ``hi``, ``ln_se``, ``df``, ``ok_ci`` where the CI is given) and ``lower`` (a lower bound: over
    the blank's upper confidence limit when the blank is below its detection limit, the blank may
    be anywhere below it)."""
    rate, se_w, df_w, lower_w = w["rate"], w["se_w"], w["df_w"], w["lower_w"]
    b_rate, b_se, b_df, has_blank = bl["rate"], bl["se"], bl["df"], bl["has_blank"]
    with np.errstate(invalid="ignore", divide="ignore"):
        q_b = t_quantile(settings.confidence, np.where(has_blank, b_df, np.nan))
        blank_hi = np.maximum(b_rate, 0.0) + np.where(np.isfinite(q_b), q_b, 3.0) * b_se
        lower = catalysed & has_blank & ~bl["detected"] & np.isfinite(blank_hi) & (blank_hi > 0)
        denom = np.where(lower, blank_hi, b_rate)
        usable = catalysed & has_blank & np.isfinite(denom) & (denom > 0) & np.isfinite(rate)
        enh = np.where(usable, rate / denom, np.nan)
        rel_w = (se_w / rate) ** 2
        rel_b = np.where(lower, 0.0, (b_se / b_rate) ** 2)
        ln_se = np.sqrt(rel_w + rel_b)
        enh_df = welch_df(rel_w, df_w, rel_b, b_df)
        ok_ci = usable & (rate > 0) & np.isfinite(ln_se) & ~lower_w
        q = t_quantile(settings.confidence, np.where(ok_ci, enh_df, np.nan))   # used where ok_ci only
        ln_e = np.log(np.where(ok_ci, enh, 1.0))
        with np.errstate(over="ignore"):             # a log-scale bound beyond float range is inf
            e_lo = np.where(ok_ci, np.exp(ln_e - q * ln_se), np.nan)
            e_hi = np.where(ok_ci, np.where(lower, np.inf, np.exp(ln_e + q * ln_se)), np.nan)
    # a well done before its first reading: its rate and enhancement are lower bounds
    e_lo = np.where(usable & lower_w, enh, e_lo)
    e_hi = np.where(usable & lower_w, np.inf, e_hi)
    return {"enh": enh, "lo": e_lo, "hi": e_hi, "ln_se": ln_se, "df": enh_df, "ok_ci": ok_ci, "lower": lower}


def _replicate_outliers(w: dict, sites: np.ndarray, catalysed: np.ndarray, replicates: np.ndarray,
                        blank_groups: np.ndarray, settings: AnalysisSettings,
                        excluded_blanks=None) -> tuple[np.ndarray, np.ndarray]:
    """Outliers among replicates (robust z above ``settings.outlier_z``): catalysed wells within
    their condition (``replicates``) on TOF, else rate; blanks within their plate x temperature x
    level (``blank_groups``) on rate, among the blanks the blank mean uses (``excluded_blanks``,
    the blanks left out on purpose, take no part: so a blank is flagged ``outlier`` exactly when
    :func:`blank_rates` leaves it out as one); -1 takes no part. Returns the outlier mask and the
    metric judged."""
    metric = np.where(np.isfinite(w["tof"]), w["tof"], w["rate"])
    # each well's own measurement error (the shared blank's error is common to its replicates);
    # bounds (wells done before their first reading) are not measurements and take no part
    with np.errstate(invalid="ignore", divide="ignore"):
        own_se = np.where(np.isfinite(w["tof"]), w["se_w"] * w["amount_per_mM"] / sites, w["se_w"])
    metric = np.where(w["lower_w"], np.nan, metric)
    blank_rate = np.where(w["lower_w"], np.nan, w["rate"])
    if excluded_blanks is not None:
        blank_rate = np.where(np.asarray(excluded_blanks, dtype=bool), np.nan, blank_rate)
    z = np.where(catalysed, _robust_z(metric, replicates, own_se), _robust_z(blank_rate, blank_groups, w["se_w"]))
    return ~np.isnan(z) & (z > float(settings.outlier_z)), metric   # z = inf: a dead well among active ones


def _blank_rows(plate_parts, tkey: np.ndarray, ckey: np.ndarray, blanks: pd.DataFrame) -> np.ndarray:
    """For each well (plate, temperature key, substrate-level key): its row in ``blanks`` (the
    first one with that plate and keys), -1 when there is none. ``plate_parts`` is
    :func:`screenlab._groups.factorize` of the wells' plates (a missing plate matches one). A blanks table without
    a substrate column (one row per plate x temperature) is matched on plate and temperature."""
    n = len(tkey)
    if not len(blanks) or not n:
        return np.full(n, -1, dtype=np.int64)
    codes, names = plate_parts
    w_plate = np.where(codes < 0, len(names), codes)
    bp = np.asarray(pd.Index(names).get_indexer(blanks["plate"]), dtype=np.int64)
    bp = np.where(pd.isna(blanks["plate"]).to_numpy(dtype=bool), len(names), bp)
    t_codes, t_u = pd.factorize(np.concatenate([tkey, _tkey(blanks["temperature_c"])]), use_na_sentinel=False)
    nt = len(t_u)
    if "substrate_conc_mM" in blanks.columns:
        c_codes, c_u = pd.factorize(np.concatenate([ckey, _ckey(_f(blanks, "substrate_conc_mM"))]),
                                    use_na_sentinel=False)
    else:
        c_codes, c_u = np.zeros(n + len(blanks), dtype=np.int64), [0]
    nc = len(c_u)
    w_key = (w_plate * nt + t_codes[:n]) * nc + c_codes[:n]
    b_ok = np.flatnonzero(bp >= 0)
    b_key = (bp[b_ok] * nt + t_codes[n:][b_ok]) * nc + c_codes[n:][b_ok]
    uniq, first = np.unique(b_key, return_index=True)        # the first blank row of each key
    at = np.minimum(np.searchsorted(uniq, w_key), len(uniq) - 1)
    hit = uniq[at] == w_key
    return np.where(hit, b_ok[first[at]], -1)


# ---------------------------------------------------------------------------------------- per group

def _standard_flags(cat_code: np.ndarray, cond_code: np.ndarray, n_wells: np.ndarray, loading: np.ndarray,
                    conc: np.ndarray) -> np.ndarray:
    """True for groups at their catalyst's most-used condition (most wells, then most temperatures,
    then lowest loading and concentration, then the condition seen first, for a deterministic choice).

    ``cat_code`` / ``cond_code``: per group, the catalyst and the condition (catalyst, loading, unit,
    concentration, factor levels) as integer codes, conditions numbered in order of first appearance.
    """
    if not len(cond_code):
        return np.zeros(0, dtype=bool)
    n_cond = int(cond_code.max()) + 1
    n_sum = np.bincount(cond_code, weights=n_wells, minlength=n_cond)
    n_t = np.bincount(cond_code, minlength=n_cond)
    first = np.unique(cond_code, return_index=True)[1]        # first group of each condition
    load = loading[first]
    cc = conc[first]
    load = np.where(np.isnan(load), np.inf, load)
    cc = np.where(np.isnan(cc), np.inf, cc)
    order = np.lexsort((np.arange(n_cond), cc, load, -n_t, -n_sum, cat_code[first]))
    cat_sorted = cat_code[first][order]
    lead = np.ones(n_cond, dtype=bool)
    lead[1:] = cat_sorted[1:] != cat_sorted[:-1]
    best = np.zeros(n_cond, dtype=bool)
    best[order[lead]] = True
    return best[cond_code]


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
      Single well: the well's own TOF SE, with the Welch-Satterthwaite df of its fit error and
      its blank's (flag ``single_well``).
    * CI: mean +/- t(conf, df) x SE (settings.confidence).
    * Enhancement: geometric mean of the replicates' enhancements; CI on the log scale with
      var = SD(ln E)^2/n + mean relative blank variance / k, or the single well's CI. A lower
      bound if any of the replicates the statistics use is one (upper limit +inf).
    * Outliers stay in every statistic; the group carries ``has_outlier``. Failed wells (flag
      ``failed_well``: no product above the blank among active replicates) are left out of the
      statistics, counted out of ``n_wells`` and named by the group flag ``excluded_failed_well``;
      so are the ring wells left out for an edge effect (flag ``edge_left_out``; group flag
      ``excluded_edge_wells``).
    """
    settings = settings or AnalysisSettings()
    factors = _infer_factors(turnover, factor_names)
    roles = _Roles(turnover)
    # the catalysed wells with a rate, by position (no copy of the wide per-well frame)
    rows = np.flatnonzero(roles.is_("sample", "reference") & np.isfinite(_f(turnover, "rate_mM_per_h")))
    keys = replicate_keys(turnover, factors)
    if not rows.size:
        return pd.DataFrame(columns=[*keys, *_RATES_COLUMNS])
    fi = FlagIndex(turnover["flags"])                # the flag column parsed once per distinct string
    tkey = _tkey(turnover["temperature_c"])
    # temperatures and substrate levels keyed as the blanks match them (1e-6 degC; 9 significant digits)
    special = {"temperature_c": lambda: grp.codes(tkey), "role": lambda: roles.key,
               "substrate_conc_mM": lambda: grp.codes(_ckey(_f(turnover, "substrate_conc_mM")))}
    col_codes = {k: special[k]() if k in special else grp.codes(turnover[k]) for k in keys}
    gcode = grp.group_index([col_codes[k] for k in keys], rows)   # = groupby(keys, dropna=False, sort=False).ngroup()
    n_groups = int(gcode.max()) + 1
    cw = _censored_wells(turnover, rows, gcode, n_groups, (fi.has("failed_well") | fi.has("edge_left_out"))[rows])
    stat = _well_statistics(turnover, rows, fi.has("enhancement_lower_bound")[rows], cw["skip"])
    s = _group_summaries(turnover, rows, gcode, n_groups, stat, fi, settings)
    first_row = s["first_row"]

    # the standard condition of each catalyst: conditions numbered in order of first appearance
    cond_cols = ["catalyst", "loading", "loading_unit", "substrate_conc_mM", *factors]
    cond_code = grp.group_index([col_codes[c] for c in cond_cols], rows)[s["first_pos"]]
    loading = _f(turnover, "loading")[first_row]
    conc = _f(turnover, "substrate_conc_mM")[first_row]
    is_standard = _standard_flags(col_codes["catalyst"][0][first_row], cond_code, s["n_wells"].astype(float),
                                  loading, conc)
    t, e = s["tof"], s["enh"]
    c = _censor_groups(t, e, s["n"], s["no_blank"], cw["grp_lower"])
    law_text = _group_laws(turnover["method"].iloc[rows], gcode, n_groups, ~cw["skip"] & ~cw["lower_w"], c["is_low"])
    flag_words, flag_codes = _group_flags(fi.has, rows, gcode, n_groups, cw, s, c, e)
    sel = _group_selectivity(turnover, rows, gcode, n_groups, selectivity, settings)
    # the selectivity group flags follow this module's, per distinct pair of flag texts
    sel_fi = FlagIndex(sel["flags"])
    if any(sel_fi.uniques):
        flag_words, flag_codes = grp.merge_texts(flag_words, flag_codes, sel_fi.uniques, sel_fi.codes)
    return _rates_table(turnover, keys, factors, tkey, s, c, {
        "is_standard": is_standard, "rate_law": law_text, "flags": (flag_words, flag_codes), "selectivity": sel,
        "loading": loading, "conc": conc})


#: the columns of the rates table after its group keys
_RATES_COLUMNS = ("n_wells", "rate_mM_per_h", "rate_sd_mM_per_h", "tof_per_h", "tof_sd_per_h", "tof_se_per_h",
                  "tof_df", "tof_ci_low", "tof_ci_high", "ton", "ton_se", "enhancement", "enhancement_ci_low",
                  "enhancement_ci_high", "is_standard", "plates", "flags", "tof_per_s", "n_plates", "n_outliers",
                  "rate_se_mM_per_h", *_selectivity.GROUP_COLUMNS, "censored", "rate_law", "tof_max_per_h",
                  "tof_rep_se_per_h", "ton_df", "enhancement_ln_se", "enhancement_df")


def _rates_table(turnover: pd.DataFrame, keys: list[str], factors, tkey: np.ndarray, s: dict, c: dict,
                 more: dict) -> pd.DataFrame:
    """The rates table of :func:`group_rates` from its parts (``s`` of :func:`_group_summaries`,
    ``c`` of :func:`_censor_groups`, ``more``: standard flags, laws, flags, selectivity and each
    group's loading and concentration), rows sorted by catalyst, temperature, loading and
    concentration (stable)."""
    t, e, first_row = s["tof"], s["enh"], s["first_row"]
    loading, conc, sel = more["loading"], more["conc"], more["selectivity"]
    flag_words, flag_codes = more["flags"]
    # rows in the table's order (catalyst, temperature, loading, concentration; stable), taken once
    by = grp.sort_order([turnover["catalyst"].iloc[first_row], tkey[first_row], loading, conc])
    new = {
        "temperature_c": tkey[first_row],
        "n_wells": s["n_wells"],
        "rate_mM_per_h": s["mean"]["rate"],
        "rate_sd_mM_per_h": s["sdev"]["rate"],
        "tof_per_h": c["tof"],
        "tof_sd_per_h": np.where(s["n"] >= 2, s["sdev"]["tof"], np.nan),
        "tof_se_per_h": c["se"],
        "tof_df": t["df"],
        "tof_ci_low": c["lo"],
        "tof_ci_high": c["hi"],
        "ton": s["mean"]["ton"],
        "ton_se": s["ton_se"],
        "enhancement": e["mean"],
        "enhancement_ci_low": e["lo"],
        "enhancement_ci_high": c["e_hi"],
        "is_standard": more["is_standard"],
        "plates": s["plates"],
        "flags": flag_codes,
        "tof_per_s": tof_per_s(c["tof"]),
        "n_plates": s["n_plates"],
        "n_outliers": s["n_out"],
        "rate_se_mM_per_h": s["rate_se"],
        **{col: sel[col].to_numpy(dtype=float) for col in _selectivity.GROUP_COLUMNS},
        "censored": c["censored"].astype(object),
        "rate_law": more["rate_law"].astype(object),
        "tof_max_per_h": s["mean"]["tof_max"],
        "tof_rep_se_per_h": c["se"],
        "ton_df": s["ton_df"],
        # a two-sided interval's SE: none for a lower bound (upper limit inf)
        "enhancement_ln_se": np.where(np.isfinite(e["lo"]) & np.isfinite(c["e_hi"]), e["ln_se"], np.nan),
        "enhancement_df": np.where(np.isfinite(e["lo"]) & np.isfinite(c["e_hi"]), e["df"], np.nan),
    }
    new = {col: v[by] for col, v in new.items()}
    new["flags"] = _sites.text_array(flag_words, new["flags"])
    new["censored"] = pd.array(new["censored"].astype(str), dtype="string")
    new["rate_law"] = pd.array(new["rate_law"].astype(str), dtype="string")
    res = _sites.frame_of(turnover, keys, first_row[by], new)
    res.attrs["factor_names"] = factors
    return res


def _censored_wells(turnover: pd.DataFrame, rows: np.ndarray, gcode: np.ndarray, n_groups: int,
                    failed: np.ndarray) -> dict[str, np.ndarray]:
    """Wells done before their first reading carry lower bounds: the group is a bound
    (``grp_lower``) when at least half of its wells (``n_with``, failed wells not counted) are;
    otherwise those wells are left out and the others carry the estimate (``part_lower``).
    ``skip``: the wells left out of every group statistic -- failed wells (flag failed_well, shown
    per well) and the bounds of a group that is not itself a bound."""
    lower_w = _text(turnover, "censored")[rows] == "lower"
    n_with = grp.group_count(gcode, n_groups, ~failed)
    n_low = grp.group_count(gcode, n_groups, lower_w & ~failed)
    grp_lower = (n_low > 0) & (2 * n_low >= n_with)
    return {"lower_w": lower_w, "failed": failed, "n_with": n_with, "grp_lower": grp_lower,
            "part_lower": (n_low > 0) & ~grp_lower, "skip": failed | (lower_w & ~grp_lower[gcode])}


def _group_summaries(turnover: pd.DataFrame, rows: np.ndarray, gcode: np.ndarray, n_groups: int, stat: dict,
                     fi: FlagIndex, settings: AnalysisSettings) -> dict:
    """The group statistics of :func:`group_rates` before censoring: means and SDs of ``stat``,
    counts, the plates, each group's first row (``first_row`` of the frame, ``first_pos`` of ``rows``),
    the TOF and enhancement intervals (``tof``, ``enh``) and the SEs of TON and rate.

    Means and SDs come from one pandas group-by over a float block (the same cython kernels as a
    per-column agg, so the same numbers); counts, first values and minima from bincounts and
    reductions over the group codes."""
    moments = pd.DataFrame({c: stat[c] for c in ("rate", "tof", "ton", "ln_e", "b_tof2", "rel_b", "fit_se2",
                                                  "tof_max")})
    gb = moments.groupby(gcode, sort=True)                 # one grouping, shared by both reductions
    mean = {c: v.to_numpy(dtype=float) for c, v in gb.mean().items()}
    sdev = {c: v.to_numpy(dtype=float) for c, v in gb[["rate", "tof", "ton", "ln_e"]].std().items()}

    def count(mask):
        return grp.group_count(gcode, n_groups, mask)

    def has(code):
        return fi.has(code)[rows]

    order, sorted_codes, starts = grp.group_order(gcode, n_groups)

    def first(name):
        return grp.group_first(stat[name], order, sorted_codes, n_groups)

    n_wells = count(~np.isnan(stat["rate"]))
    n = count(~np.isnan(stat["tof"])).astype(float)
    outlier = (turnover["outlier"].to_numpy(dtype=bool)[rows] if "outlier" in turnover
               else np.zeros(len(rows), bool))
    # a lower-bound enhancement among the wells the statistics use (a left-out well, NaN in stat,
    # does not make the group's enhancement a bound)
    lb = count(has("enhancement_lower_bound") & ~np.isnan(stat["rate"])) > 0
    # the smallest blank df among the wells the statistics use (min, missing values skipped)
    used_bdf = np.where(np.isnan(stat["rate"]), np.nan, _f(turnover, "blank_df")[rows])
    bdf = np.fmin.reduceat(used_bdf[order], starts)
    n_plates, plates = grp.joined_distinct(sorted_codes, n_groups, turnover["plate"].iloc[rows[order]])
    k = n_plates.astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        nt = count(~np.isnan(stat["ton"])).astype(float)
        ton_se = np.where(nt >= 2, sdev["ton"] / np.sqrt(nt), np.nan)
        ton_df = np.where(nt >= 2, nt - 1.0, np.nan)          # the SE is the replicates' SD / sqrt(n)
        rate_se = np.where(n_wells >= 2, sdev["rate"] / np.sqrt(n_wells.astype(float)), np.nan)
    return {
        "mean": mean, "sdev": sdev, "n_wells": n_wells, "n": n, "n_out": count(outlier),
        "n_failed": count(has("failed_well")), "n_edge": count(has("edge_left_out")), "lower_bound": lb,
        "no_blank": count(has("no_blank")) > 0, "no_sites": count(~has("no_sites")) == 0,
        "n_plates": n_plates, "plates": plates, "first_pos": order[starts], "first_row": rows[order[starts]],
        "tof": _tof_intervals(mean, sdev, n, k, bdf, first("tof_se1"), first("rate_df1"), settings),
        "enh": _enhancement_intervals(mean, sdev, count(~np.isnan(stat["ln_e"])).astype(float), k, bdf, lb,
                                      first("e_lo1"), first("e_hi1"), first("ln_se1"), first("e_df1"), settings),
        "ton_se": ton_se, "ton_df": ton_df, "rate_se": rate_se,
    }


def _group_flags(has, rows: np.ndarray, gcode: np.ndarray, n_groups: int, cw: dict, s: dict, c: dict,
                 e: dict) -> tuple[np.ndarray, np.ndarray]:
    """The group flags (distinct texts and a code per group): from the group statistics, and the
    shape flags most wells of the group carry (failed wells not counted)."""
    failed = cw["failed"]
    base = np.maximum(cw["n_with"], 1)

    def hits(code):
        return grp.group_count(gcode, n_groups, has(code)[rows] & ~failed)

    return FlagIndex(None, n=n_groups).join_codes({
        "single_well": s["n"] == 1,
        "has_outlier": s["n_out"] > 0,
        "excluded_failed_well": s["n_failed"] > 0,
        "excluded_edge_wells": s["n_edge"] > 0,
        "no_blank": s["no_blank"],
        "no_sites": s["no_sites"],
        "enhancement_lower_bound": (s["lower_bound"] | c["is_low"]) & np.isfinite(e["mean"]),
        "not_above_blank": c["not_above"],
        "done_at_first_reading": c["is_low"],
        "censored_replicate": cw["part_lower"],
        **{code: 2 * hits(code) > base for code in ("induction", "deactivation", "product_decline", "law_misfit",
                                                    "ton_capped")},
        **{code: hits(code) > 0 for code in ("above_full_scale", "above_linear_range", "reading_spike")},
    })


def _well_statistics(turnover: pd.DataFrame, rows: np.ndarray, lb_flag: np.ndarray,
                     skip: np.ndarray) -> dict[str, np.ndarray]:
    """The per-well values the group statistics reduce, for the wells ``rows`` (NaN where ``skip``):
    rate, TOF, TON, ln enhancement, the blank's share of the TOF variance (``b_tof2``) and of the
    relative enhancement variance (``rel_b``), the fit's own TOF variance (``fit_se2``), ``tof_max``,
    and the single-well values (``tof_se1, rate_df1, e_lo1, e_hi1, ln_se1, e_df1``)."""
    def col(name):
        return _f(turnover, name)[rows]

    tof = col("tof_per_h")
    amount_per_site = units.amount_umol(1.0, col("volume_uL")) / col("sites_umol")
    with np.errstate(invalid="ignore"):
        b_tof = np.nan_to_num(col("blank_se_mM_per_h"), nan=0.0) * amount_per_site
        enh = col("enhancement")
        e_lo1 = col("enhancement_ci_low")
        ln_enh = np.where(np.isfinite(enh) & (enh > 0) & np.isfinite(e_lo1), np.log(
            np.where(enh > 0, enh, 1.0)), np.nan)
        rel_b = (col("blank_se_mM_per_h") / col("blank_rate_mM_per_h")) ** 2
    tof = np.where(np.isfinite(tof), tof, np.nan)
    tof_se_w = col("tof_se_per_h")
    stat = {
        "rate": col("rate_mM_per_h"),
        "tof": tof,
        "ton": col("ton"),
        "ln_e": ln_enh,
        "b_tof2": np.where(np.isfinite(tof), b_tof ** 2, np.nan),
        "rel_b": np.where(np.isfinite(ln_enh) & ~lb_flag, rel_b, np.nan),
        "fit_se2": np.where(np.isfinite(tof), tof_se_w ** 2 - b_tof ** 2, np.nan),
        "tof_max": col("tof_max_per_h"),
        "tof_se1": tof_se_w,
        "rate_df1": col("rate_df"),
        "e_lo1": e_lo1,
        "e_hi1": col("enhancement_ci_high"),
        "ln_se1": col("ln_enhancement_se"),
        "e_df1": col("enhancement_df"),
    }
    for v in stat.values():
        v[skip] = np.nan
    return stat


def _tof_intervals(mean: dict, sdev: dict, n: np.ndarray, k: np.ndarray, bdf: np.ndarray, tof_se1: np.ndarray,
                   rate_df1: np.ndarray, settings: AnalysisSettings) -> dict[str, np.ndarray]:
    """Per group: the mean TOF (``mean``), its SE, df, t quantile ``q`` and CI (``lo``, ``hi``)
    from ``n`` wells on ``k`` plates (see :func:`group_rates`); a single well keeps its own SE,
    with the Welch-Satterthwaite df of its fit error and its blank's."""
    sd = sdev["tof"]
    b2 = np.nan_to_num(mean["b_tof2"], nan=0.0)
    fit2 = np.nan_to_num(mean["fit_se2"], nan=0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        # replicate scatter, never below what the wells' own fit errors imply (three replicates
        # that agree by chance would otherwise claim too much); the shared blank's error on top
        v_rep = np.where(n >= 2, np.maximum(sd ** 2, np.maximum(fit2, 0.0)) / n, np.nan)
        v_blank = np.where(n >= 2, b2 / k, 0.0)
        se = np.where(n >= 2, np.sqrt(v_rep + v_blank), np.where(n == 1, tof_se1, np.nan))
        # a single well: its own SE holds its fit error and its blank's in quadrature, so its df is
        # their Welch-Satterthwaite df, as the per-well interval has it (not the fit's df alone)
        df = np.where(n >= 2, welch_df(v_rep, n - 1, v_blank, bdf),
                      np.where((n == 1) & np.isfinite(tof_se1), welch_df(np.maximum(fit2, 0.0), rate_df1, b2, bdf),
                               np.nan))
        q = t_quantile(settings.confidence, df)
        tof_mean = mean["tof"]
        return {"mean": tof_mean, "se": se, "df": df, "q": q, "lo": tof_mean - q * se, "hi": tof_mean + q * se}


def _enhancement_intervals(mean: dict, sdev: dict, ne: np.ndarray, k: np.ndarray, bdf: np.ndarray,
                           lb: np.ndarray, e_lo_1: np.ndarray, e_hi_1: np.ndarray, ln_se_1: np.ndarray,
                           df_1: np.ndarray, settings: AnalysisSettings) -> dict[str, np.ndarray]:
    """Per group: the geometric-mean enhancement of ``ne`` wells on ``k`` plates and its CI on the
    log scale (``mean``, ``lo``, ``hi``; upper limit +inf for a lower bound ``lb``) with the SE of
    its logarithm and that SE's Welch-Satterthwaite df (``ln_se``, ``df``: what a CI at another
    confidence, or the ranking's draws, need); a single well keeps its own CI, SE and df."""
    with np.errstate(invalid="ignore", divide="ignore"):
        lnm = mean["ln_e"]
        v_ln = np.where(ne >= 2, sdev["ln_e"] ** 2 / ne, np.nan)
        v_lb = np.where(ne >= 2, np.nan_to_num(mean["rel_b"], nan=0.0) / k, 0.0)
        df = np.where(ne >= 2, welch_df(v_ln, ne - 1, v_lb, bdf), np.where(ne == 1, df_1, np.nan))
        ln_se = np.where(ne >= 2, np.sqrt(v_ln + v_lb), np.where(ne == 1, ln_se_1, np.nan))
        qe = t_quantile(settings.confidence, np.where(ne >= 2, df, np.nan))
        e_mean = np.where(ne >= 1, np.exp(lnm), np.nan)
        e_lo = np.where(ne >= 2, np.exp(lnm - qe * np.sqrt(v_ln + v_lb)), np.where(ne == 1, e_lo_1, np.nan))
        e_hi = np.where(ne >= 2, np.where(lb, np.inf, np.exp(lnm + qe * np.sqrt(v_ln + v_lb))),
                        np.where(ne == 1, e_hi_1, np.nan))
    return {"mean": e_mean, "lo": e_lo, "hi": e_hi, "ln_se": ln_se, "df": df}


def _censor_groups(t: dict, e: dict, n: np.ndarray, nb: np.ndarray, grp_lower: np.ndarray) -> dict[str, np.ndarray]:
    """The groups that are bounds: ``lower`` (wells done before their first reading, ``grp_lower``)
    or ``upper`` (not above the blank: the TOF interval reaches zero). Returns ``censored``,
    ``is_low``, ``not_above`` and the TOF columns as shown (``tof``, ``se``, ``lo``, ``hi``,
    enhancement ``e_hi``), a bound in place of the estimate."""
    tof_mean, se, q, lo, hi = t["mean"], t["se"], t["q"], t["lo"], t["hi"]
    with np.errstate(invalid="ignore"):
        not_above = (n >= 1) & ~nb & ~grp_lower & ((tof_mean <= 0) | (np.isfinite(lo) & (lo <= 0)))
        censored = np.where(grp_lower & np.isfinite(tof_mean), "lower", np.where(not_above, "upper", ""))
        upper_bound = np.maximum(tof_mean, 0.0) + np.where(np.isfinite(q * se), q * se, 0.0)
    is_up = censored == "upper"
    is_low = censored == "lower"
    return {
        "censored": censored, "is_low": is_low, "not_above": not_above,
        "tof": np.where(is_up, upper_bound, tof_mean),
        "lo": np.where(is_up, np.nan, np.where(is_low, tof_mean, lo)),
        "hi": np.where(is_up, upper_bound, np.where(is_low, np.nan, hi)),
        "se": np.where(is_low, np.nan, se),
        "e_hi": np.where(is_low, np.inf, e["hi"]),
    }


def _group_laws(method: pd.Series, gcode: np.ndarray, n_groups: int, measured: np.ndarray,
                is_low: np.ndarray) -> np.ndarray:
    """Per group: the rate law most used among its ``measured`` wells (``method``), ""
    without one, ``first_reading`` for a group of wells done before their first reading."""
    m_codes, m_words = grp.factorize(method.astype("string").fillna("no_data"))
    M = max(len(m_words), 1)
    pair = np.bincount(gcode[measured] * M + m_codes[measured], minlength=n_groups * M).reshape(n_groups, M)
    law_words = np.array([str(w) for w in m_words] + [""], dtype=object)
    rate_law = np.where(pair.sum(axis=1) > 0, pair.argmax(axis=1), M if len(m_words) else 0)
    rate_law = np.where(is_low, -1, rate_law)
    return np.where(rate_law >= 0, law_words[np.clip(rate_law, 0, len(law_words) - 1)], "first_reading")


def _group_selectivity(turnover: pd.DataFrame, rows: np.ndarray, gcode: np.ndarray, n_groups: int,
                       selectivity: pd.DataFrame | None, settings: AnalysisSettings) -> pd.DataFrame:
    """The selectivity / ee group columns and flags (one row per group) of
    :func:`screenlab.kinetics.selectivity.summarise_groups`; NaN without a selectivity table."""
    if selectivity is not None and len(selectivity):
        sel_cols = [c for c in selectivity.columns if c not in ("role", "catalyst", "temperature_c")]
        # each group row's selectivity row by position (a well without one takes no part: code -1)
        at = well_index(turnover["plate"].iloc[rows], turnover["well"].iloc[rows],
                        selectivity["plate"], selectivity["well"])
        aligned = selectivity[sel_cols].iloc[np.maximum(at, 0)].reset_index(drop=True)
        return _selectivity.summarise_groups(aligned, np.where(at >= 0, gcode, -1), n_groups, settings.confidence)
    return _selectivity.summarise_groups(pd.DataFrame({"flags": []}), np.zeros(0, dtype=np.int64), n_groups,
                                         settings.confidence)
