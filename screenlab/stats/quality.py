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
  with at least :data:`EDGE_MIN_WELLS` wells on each side. The values compared are, by
  preference, each well's ``ln(rate / median rate of its replicate group on the plate)``
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

A plate is ``failed`` when it has too few usable reference or blank wells for a Z' or its Z'
is below 0 (Gold Book: "useful range 0 (very poor) to +1"); the ranking then treats candidates
measured only on failed plates as unrankable and flags the others.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
from scipy import stats as _st

from screenlab.errors import DataQualityWarning
from screenlab.plates import format_dims, is_edge

#: Flag codes set by this module (code -> one plain sentence).
FLAGS: dict[str, str] = {
    "zprime_low": "Z' between benchmark and blank wells is below the accepted minimum (settings.zprime_min).",
    "failed": "The plate cannot be trusted: Z' below 0 or too few usable benchmark or blank wells.",
    "no_controls": "Fewer than two usable benchmark or blank wells on the plate, so no Z' can be computed.",
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
UNCATALYSED = "(uncatalysed)"


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
            rdelta = np.nanmedian(z, axis=2)
            z_new = z - rdelta[:, :, None]
            r_new = r + rdelta
            delta = np.nanmedian(c, axis=1)
            c_new = c - delta[:, None]
            t_new = t + delta
            cdelta = np.nanmedian(z_new, axis=1)
            z_new = z_new - cdelta[:, None, :]
            c_new = c_new + cdelta
            delta = np.nanmedian(r_new, axis=1)
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


def bscores(residuals, mad_scale: float = MAD_NORMAL):
    """B-scores of a residual matrix or stack (plates first): residual / (mad_scale x MAD).

    The MAD is taken over each plate's non-missing residuals. A plate whose MAD is 0 gets NaN
    B-scores and a :class:`DataQualityWarning`.
    """
    res = np.asarray(residuals, dtype=float)
    stack = res if res.ndim == 3 else res[None]
    flat = stack.reshape(stack.shape[0], -1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        med = np.nanmedian(flat, axis=1)
        mad = np.nanmedian(np.abs(flat - med[:, None]), axis=1)
    bad = ~(mad > 0)
    if np.any(bad & np.isfinite(mad)):
        warnings.warn("median-polish residual MAD is 0 on a plate; its B-scores are undefined (NaN)",
                      DataQualityWarning, stacklevel=2)
    scale = np.where(bad, np.nan, mad * mad_scale)
    out = stack / scale[:, None, None]
    return out if res.ndim == 3 else out[0]


def _well_values(kin, value: str) -> pd.Series:
    col = {"rate": "rate_mM_per_h", "conversion": "last_conversion_pct"}.get(value)
    if col is None:
        raise ValueError(f"value must be 'rate' or 'conversion', not {value!r}")
    return pd.to_numeric(kin.wells[col], errors="coerce")


def well_bscores(kin, data, *, value: str = "rate", mad_scale: float = MAD_NORMAL) -> pd.DataFrame:
    """B-score of every sample well, per plate (for the edge map).

    Columns: ``plate, well, row, col, role, catalyst, is_edge, value, residual, bscore`` where
    ``value`` is the well's initial rate (mM/h) or last conversion (%) per ``value``; non-sample
    wells are listed with NaN residual and B-score.
    """
    w = kin.wells
    plates = data.plates[["plate", "format", "n_rows", "n_cols"]].drop_duplicates("plate")
    pidx = pd.Index(plates["plate"].astype(str))
    n_r = int(plates["n_rows"].max()) if len(plates) else 0
    n_c = int(plates["n_cols"].max()) if len(plates) else 0
    vals = _well_values(kin, value).to_numpy()
    p_i = pidx.get_indexer(w["plate"].astype(str))
    rows = w["row"].to_numpy(dtype=np.int64)
    cols = w["col"].to_numpy(dtype=np.int64)
    use = (w["role"].astype(str).to_numpy() == "sample") & np.isfinite(vals) & (p_i >= 0)
    cube = np.full((len(pidx), max(n_r, 1), max(n_c, 1)), np.nan)
    cube[p_i[use], rows[use], cols[use]] = vals[use]
    if len(pidx):
        _, _, _, res, _, _ = median_polish(cube)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", DataQualityWarning)
            b = bscores(res, mad_scale=mad_scale)
    else:
        res = b = cube
    resid = np.full(len(w), np.nan)
    bs = np.full(len(w), np.nan)
    resid[use] = res[p_i[use], rows[use], cols[use]]
    bs[use] = b[p_i[use], rows[use], cols[use]]
    fmt = plates.set_index(plates["plate"].astype(str))["format"].reindex(w["plate"].astype(str)).to_numpy()
    fmt = np.where(pd.isna(fmt), 0, fmt).astype(np.int64)
    return pd.DataFrame({
        "plate": w["plate"].to_numpy(), "well": w["well"].to_numpy(), "row": rows, "col": cols,
        "role": w["role"].to_numpy(), "catalyst": w["catalyst"].to_numpy(),
        "is_edge": is_edge(rows, cols, fmt), "value": vals, "residual": resid, "bscore": bs,
    })


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
    ref = w[w["role"].astype(str) == "reference"]
    if ref.empty:
        return pd.DataFrame({c: pd.Series(dtype=object) for c in cols})
    tof = pd.to_numeric(ref.get("tof_per_h", pd.Series(np.nan, index=ref.index)), errors="coerce")
    use_tof = bool(np.isfinite(tof).any())
    val = tof if use_tof else pd.to_numeric(ref["rate_mM_per_h"], errors="coerce")
    ref = ref.assign(_v=val.where(val > 0))
    per = (ref.groupby(["catalyst", "plate"], sort=True)
              .agg(temperature_c=("temperature_c", "median"), n_wells=("_v", "count"),
                   _lnv=("_v", lambda s: np.log(s.dropna()).mean() if s.notna().any() else np.nan))
              .reset_index())
    per["value"] = np.exp(per["_lnv"])
    out = []
    for cat, g in per.groupby("catalyst", sort=True):  # a loop over benchmarks (one or two)
        g = g.copy()
        ln_pred, _ = predict_ln(kin.arrhenius, str(cat), g["temperature_c"].to_numpy()) if use_tof else (
            np.full(len(g), np.nan), None)
        if use_tof and np.isfinite(ln_pred).all():
            g["basis"] = "arrhenius"
            g["_lnexp"] = ln_pred
        else:
            g["basis"] = "per_temperature"
            g["_lnexp"] = g.groupby(g["temperature_c"].round(1))["_lnv"].transform("mean")
        g["log_ratio"] = g["_lnv"] - g["_lnexp"]
        x = g["log_ratio"].to_numpy()
        ok = np.isfinite(x)
        n = int(ok.sum())
        # per_temperature: each temperature's mean was used up, so the SD has n - (groups) df
        n_groups = int(g.loc[ok, "temperature_c"].round(1).nunique()) if g["basis"].iloc[0] == "per_temperature" else 1
        dof = n - n_groups
        centre = float(np.nanmean(x)) if n else np.nan
        sd = float(np.sqrt(np.nansum((x - centre) ** 2) / dof)) if dof >= 1 else np.nan
        g["centre"], g["lower"], g["upper"] = centre, centre - 3 * sd, centre + 3 * sd
        # leave-one-out mean and SD from running sums (vectorised over plates)
        s1, s2 = np.nansum(x), np.nansum(x * x)
        m = n - 1
        loo_mean = (s1 - x) / m if m >= 1 else np.full_like(x, np.nan)
        loo_dof = m - n_groups
        with np.errstate(invalid="ignore", divide="ignore"):
            loo_var = (s2 - x * x - m * loo_mean ** 2) / loo_dof if loo_dof >= 2 else np.full_like(x, np.nan)
            g["loo_t"] = (x - loo_mean) / np.sqrt(np.where(loo_var > 0, loo_var, np.nan) * (1 + 1 / max(m, 1)))
        g["loo_limit"] = _st.t.ppf(1 - SHEWHART_TAIL / 2, loo_dof) if loo_dof >= 2 else np.nan
        g["expected"] = np.exp(g["_lnexp"])
        g["lower_tof_per_h"] = g["expected"] * np.exp(g["lower"])
        g["upper_tof_per_h"] = g["expected"] * np.exp(g["upper"])
        out.append(g)
    res = pd.concat(out, ignore_index=True)
    res["value_unit"] = "h-1" if use_tof else "mM/h"
    if not use_tof:
        res[["lower_tof_per_h", "upper_tof_per_h"]] = np.nan
    res["flags"] = np.where(np.abs(res["loo_t"]) > res["loo_limit"], "reference_out_of_limits", "")
    if data is not None and "run_date" in data.plates:
        rd = data.plates.drop_duplicates("plate").set_index("plate")["run_date"]
        res["run_date"] = res["plate"].map(rd)
    else:
        res["run_date"] = pd.NA
    return res[cols].sort_values(["catalyst", "run_date", "plate"], na_position="last").reset_index(drop=True)


# --------------------------------------------------------------------------- per-plate summary
def plate_quality(data, kin, settings=None, *, bscore_value: str = "rate") -> pd.DataFrame:
    """One row per plate: Z', replicate CVs, blank trend, edge effect, control chart, status.

    Columns:
    ``plate, format, temperature_c, n_sample, n_reference, n_blank,
    reference_mean_mM_per_h, reference_sd_mM_per_h, blank_mean_mM_per_h, blank_sd_mM_per_h,
    zprime`` (ddof 1), ``signal_window`` ((|mu+ - mu-| - 3(sd+ + sd-)) / sd+, from memory),
    ``n_replicate_groups, replicate_cv_median_pct`` (median CV of the plate's sample replicate
    groups: same catalyst, loading, substrate concentration, temperature and factor levels;
    groups of 2 or more wells), ``reference_cv_pct``, ``blank_expected_mM_per_h,
    blank_ratio, blank_z`` (the plate's blank against the blank Arrhenius line; the worst
    temperature on a gradient plate), ``edge_basis`` (replicates | bscore | '' when untested),
    ``edge_n, interior_n``, ``edge_shift_pct`` (replicates basis: how much higher ring wells
    run than interior ones relative to their replicate groups, geometric mean, percent), ``edge_p`` (Mann-Whitney U),
    ``bscore_max_abs``, ``reference_loo_t`` (control chart), ``status`` (ok | flagged | failed)
    and ``flags`` (see :data:`FLAGS`).
    """
    from screenlab.settings import AnalysisSettings

    settings = settings or getattr(kin, "settings", None) or AnalysisSettings()
    w = kin.wells
    role = w["role"].astype(str)
    rate = pd.to_numeric(w["rate_mM_per_h"], errors="coerce")
    frame = pd.DataFrame({"plate": w["plate"].astype(str), "role": role, "rate": rate.where(np.isfinite(rate))})
    plates = data.plates.drop_duplicates("plate").assign(plate=lambda d: d["plate"].astype(str))
    out = plates[["plate", "format", "temperature_c"]].reset_index(drop=True)
    out = out.set_index("plate")

    counts = frame.assign(ok=frame["rate"].notna()).pivot_table(
        index="plate", columns="role", values="ok", aggfunc="sum", fill_value=0)
    for r in ("sample", "reference", "blank"):
        out[f"n_{r}"] = counts[r].reindex(out.index).fillna(0).astype(int) if r in counts else 0
    mom = frame.groupby(["plate", "role"])["rate"].agg(["mean", "std"])
    for r, name in (("reference", "reference"), ("blank", "blank")):
        sub = mom.xs(r, level="role") if r in mom.index.get_level_values("role") else pd.DataFrame(columns=["mean", "std"])
        out[f"{name}_mean_mM_per_h"] = sub["mean"].reindex(out.index).astype(float)
        out[f"{name}_sd_mM_per_h"] = sub["std"].reindex(out.index).astype(float)
    mp, sp = out["reference_mean_mM_per_h"], out["reference_sd_mM_per_h"]
    mn, sn = out["blank_mean_mM_per_h"], out["blank_sd_mM_per_h"]
    enough = (out["n_reference"] >= 2) & (out["n_blank"] >= 2)
    out["zprime"] = np.where(enough, _zprime_from_moments(mp, sp, mn, sn), np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        out["signal_window"] = np.where(enough, ((mp - mn).abs() - 3 * (sp + sn)) / sp, np.nan)
        out["reference_cv_pct"] = np.where(out["n_reference"] >= 2, 100 * sp / mp.abs(), np.nan)

    # replicate CVs of sample groups
    keys = ["plate", "catalyst", "loading", "substrate_conc_mM", "temperature_c", *data.factor_names]
    keys = [k for k in keys if k in w]
    samp = w[role == "sample"].assign(plate=lambda d: d["plate"].astype(str), _r=rate[role == "sample"])
    samp = samp[samp["_r"].notna()]
    if len(samp):
        g = samp.groupby(keys, dropna=False)["_r"].agg(["mean", "std", "count"]).reset_index()
        g = g[(g["count"] >= 2) & (g["mean"] > 0)]
        g["cv"] = 100 * g["std"] / g["mean"]
        cv = g.groupby("plate")["cv"].agg(["median", "count"])
        out["n_replicate_groups"] = cv["count"].reindex(out.index).fillna(0).astype(int)
        out["replicate_cv_median_pct"] = cv["median"].reindex(out.index)
    else:
        out["n_replicate_groups"] = 0
        out["replicate_cv_median_pct"] = np.nan

    # blank against the campaign's blank Arrhenius line
    out["blank_expected_mM_per_h"] = np.nan
    out["blank_ratio"] = np.nan
    out["blank_z"] = np.nan
    bl = getattr(kin, "blanks", None)
    if bl is not None and len(bl):
        bl = bl.assign(plate=bl["plate"].astype(str))
        obs = pd.to_numeric(bl["blank_rate_mM_per_h"], errors="coerce")
        se = pd.to_numeric(bl["blank_se_mM_per_h"], errors="coerce")
        ln_pred, ln_pred_se = predict_ln(kin.arrhenius, UNCATALYSED, bl["temperature_c"].to_numpy())
        with np.errstate(divide="ignore", invalid="ignore"):
            ln_obs = np.log(obs.where(obs > 0))
            z = (ln_obs - ln_pred) / np.sqrt((se / obs) ** 2 + ln_pred_se ** 2)
        b = pd.DataFrame({"plate": bl["plate"], "expected": np.exp(ln_pred), "ratio": obs / np.exp(ln_pred), "z": z})
        b = b.assign(_a=b["z"].abs().fillna(-1)).sort_values("_a").drop_duplicates("plate", keep="last").set_index("plate")
        out["blank_expected_mM_per_h"] = b["expected"].reindex(out.index)
        out["blank_ratio"] = b["ratio"].reindex(out.index)
        out["blank_z"] = b["z"].reindex(out.index)

    # B-scores and the edge test (a loop over plates for the U test only)
    bw_all = well_bscores(kin, data, value=bscore_value)          # one row per well of kin.wells, same order
    bw = bw_all[np.isfinite(bw_all["residual"].to_numpy(dtype=float))]
    rep = pd.DataFrame({"plate": w["plate"].astype(str), "is_edge": bw_all["is_edge"].to_numpy(), "rate": rate})
    rep = rep[(role == "sample").to_numpy() & (rep["rate"] > 0).to_numpy()]
    rep_keys = [rep["plate"]] + [w.loc[rep.index, k] for k in keys if k != "plate"]
    grp = rep.groupby(rep_keys, dropna=False)["rate"]
    rep = rep.assign(dev=np.log(rep["rate"] / grp.transform("median")), size=grp.transform("count"))
    rep = rep[rep["size"] >= 2]
    rep_by_plate = dict(tuple(rep.groupby("plate")))
    out["edge_basis"] = ""
    out["edge_n"] = 0
    out["interior_n"] = 0
    out["edge_shift_pct"] = np.nan
    out["edge_p"] = np.nan
    out["bscore_max_abs"] = np.nan
    mad_zero = pd.Series(False, index=out.index)
    for plate, g in bw.groupby(bw["plate"].astype(str)):
        res = g["residual"].to_numpy(dtype=float)
        mad_zero[plate] = not np.median(np.abs(res - np.median(res))) > 0
        if np.isfinite(g["bscore"]).any():
            out.loc[plate, "bscore_max_abs"] = float(np.nanmax(np.abs(g["bscore"])))
        r = rep_by_plate.get(plate)
        e = r.loc[r["is_edge"], "dev"].to_numpy() if r is not None else np.array([])
        i = r.loc[~r["is_edge"], "dev"].to_numpy() if r is not None else np.array([])
        basis = "replicates"
        if len(e) < EDGE_MIN_WELLS or len(i) < EDGE_MIN_WELLS:
            basis = "bscore"
            e = g.loc[g["is_edge"], "residual"].to_numpy(dtype=float)
            i = g.loc[~g["is_edge"], "residual"].to_numpy(dtype=float)
        out.loc[plate, ["edge_n", "interior_n"]] = [len(e), len(i)]
        if len(e) >= EDGE_MIN_WELLS and len(i) >= EDGE_MIN_WELLS:
            out.loc[plate, "edge_basis"] = basis
            if basis == "replicates":
                out.loc[plate, "edge_shift_pct"] = 100 * (np.exp(e.mean() - i.mean()) - 1)
            if np.ptp(np.concatenate([e, i])) > 0:
                out.loc[plate, "edge_p"] = float(_st.mannwhitneyu(e, i, alternative="two-sided").pvalue)

    # control chart of the benchmark
    cc = control_chart(kin, data)
    if len(cc):
        worst = cc.assign(_a=(cc["loo_t"].abs() / cc["loo_limit"]).fillna(-1), plate=cc["plate"].astype(str))
        worst = worst.sort_values("_a").drop_duplicates("plate", keep="last").set_index("plate")
        out["reference_loo_t"] = worst["loo_t"].reindex(out.index)
        out_of_limits = worst["flags"].reindex(out.index).fillna("").str.contains("reference_out_of_limits")
    else:
        out["reference_loo_t"] = np.nan
        out_of_limits = pd.Series(False, index=out.index)

    zp = out["zprime"]
    no_ctrl = ~enough
    failed = no_ctrl | (zp < 0)
    fl = pd.DataFrame(index=out.index)
    fl["no_controls"] = no_ctrl
    fl["failed"] = failed
    fl["zprime_low"] = zp < settings.zprime_min
    fl["edge_effect"] = out["edge_p"] < EDGE_ALPHA
    fl["high_cv"] = out["replicate_cv_median_pct"] > CV_MAX_PCT
    fl["blank_off_trend"] = out["blank_z"].abs() > BLANK_Z_MAX
    fl["reference_out_of_limits"] = out_of_limits
    fl["bscore_undefined"] = mad_zero
    codes = np.array(fl.columns)
    m = fl.fillna(False).to_numpy(dtype=bool)
    out["flags"] = [";".join(codes[row]) for row in m]  # one short join per plate
    out["status"] = np.where(failed, "failed", np.where(m.any(axis=1), "flagged", "ok"))
    return out.reset_index()[[
        "plate", "format", "temperature_c", "n_sample", "n_reference", "n_blank",
        "reference_mean_mM_per_h", "reference_sd_mM_per_h", "blank_mean_mM_per_h", "blank_sd_mM_per_h",
        "zprime", "signal_window", "n_replicate_groups", "replicate_cv_median_pct", "reference_cv_pct",
        "blank_expected_mM_per_h", "blank_ratio", "blank_z", "edge_basis", "edge_n", "interior_n", "edge_shift_pct",
        "edge_p", "bscore_max_abs", "reference_loo_t", "status", "flags"]]


__all__ = ["FLAGS", "zprime", "z_factor", "median_polish", "bscores", "well_bscores", "predict_ln",
           "control_chart", "plate_quality"]
