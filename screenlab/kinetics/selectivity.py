"""Several analytes per well: selectivity to the main product and enantiomeric excess.

Both are estimated from the whole time course of a well, not from one reading.

Amounts and blank correction
    Amounts come from :func:`screenlab.kinetics.amounts.product_amounts` (with enantiomers, the main
    product is their sum). For sample and reference wells **the blank's own products are
    subtracted**, analyte by analyte, as the rates are blank-corrected (DEVELOPERS.md: net rate =
    well rate - blank rate of the same plate and temperature). The background is taken as first
    order in substrate: for each plate x temperature and each analyte a pooled background
    constant ``kb = sum(y E) / sum(E^2)`` over the blank wells' readings, where ``E(t)`` is the
    substrate-weighted elapsed time ``E(t) = integral_0^t (1 - X(tau)) dtau`` (trapezoid rule over
    the readings, ``X`` = declared products / (substrate_conc_mM x product_per_substrate), ``X = 0``
    at t = 0). A catalysed well's background product at time t is ``kb x E_well(t)``: the blank's
    rate x time at low conversion (the correction the rates make), smaller once the well has used
    its substrate. Without a substrate concentration ``E = t``. Without a blank on that plate and
    temperature nothing is subtracted (the rates table's ``no_blank`` flag says so). The error of
    the background constants (residual SD of the pooled blank fit / sqrt(sum E^2), df = readings
    - 1) is propagated into each well's SE by the delta method (``selectivity_blank_se``,
    ``ee_blank_se``); the replicates on one plate share it, so it does not average out over them
    (see :func:`summarise_groups`). **Blank wells** report their own, uncorrected selectivity and
    ee: the background's.

Selectivity (percent of all declared products that is the main product)
    Per well: least-squares slope through the origin of net main vs net total products
    (main + every declared by-product) over the readings where all of them were read,
    ``b = sum(x y) / sum(x^2)``, ``SE = s / sqrt(sum(x^2))`` with ``s^2 = RSS / (n - 1)``
    (df = n - 1), combined with the background term in quadrature (Welch-Satterthwaite df).
    ``selectivity_pct = 100 b``. Empty (NaN) when the campaign declares no
    by-products.

Enantiomeric excess of the main product, percent
    ``ee = (E1 - E2) / (E1 + E2) x 100`` where E1 is the **first** enantiomer named in
    ``[analytes].enantiomers`` (positive ee = excess of E1), E2 the second. Per well: the slope
    through the origin of net (E1 - E2) vs net (E1 + E2), SE and df as above. Empty when the
    campaign declares no enantiomers.

Per group (catalyst x temperature x condition, the rates table's groups; :func:`summarise_groups`)
    Mean of the wells' values, ``SE = sqrt(SD^2 / n + mean(blank_se^2) / k)`` with k the number of
    plates behind the group (the replicates of a plate share one blank), ``t`` interval. Its df is
    Welch-Satterthwaite over the two terms, at least n - 1 and at most the wells' summed fit df,
    with the replicate term weighted by the variance the wells' own fit SEs predict rather than
    by the sample SD (with three replicates a chance low SD would otherwise raise the df just when
    the SE is too small; plain Welch covered about 92 % in our simulations, this about 96 %).
    A single well gives its own SE and df. Values are not clipped to 0..100 (or -100..100), so that they
    stay unbiased: 100.3 % means no by-product beyond the reading noise. Their intervals are cut at
    the end of the range, but never short of the estimate itself (100.3 (100.1 to 100.3) %).

Drift with conversion (``selectivity_drift``, ``ee_drift``)
    The same per-well data are fitted with a quadratic through the origin, ``y = a x + c x^2``
    (x scaled by its largest value). The slope of the instantaneous selectivity dy/dx against the
    amount of product is ``2 c``; the change over the observed range, ``2 c x_max``, is reported
    (percentage points, ``selectivity_drift_pct``) with the two-sided t-test p-value of c
    (n - 2 df). A well is flagged when p < :data:`DRIFT_ALPHA` **and** the change is at least
    :data:`DRIFT_MIN_CHANGE_PCT` points (at least 4 readings, not low product). Parallel
    first-order paths give a straight line (constant selectivity at every conversion); a product
    that reacts further (A -> P -> B) bends it down. A group is flagged when at least half of its
    wells with a value are.

Too little product (``ee_low_product``, ``selectivity_low_product``)
    The largest net amount over the course (main product for ee, all declared products for
    selectivity) below :data:`LOW_PRODUCT_CONVERSION_PCT` % of the theoretical product
    (substrate_conc_mM x product_per_substrate), or below :data:`LOW_PRODUCT_NOISE_MULTIPLE` x the
    residual SD of the well's line (a few times the reading noise; with df >= 1), or not positive.
    Below about 1 % conversion a chemist does not quote an ee or a selectivity (common practice, no
    source). A group is flagged when at least half of its wells are.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import special

from screenlab import _groups as grp
from screenlab._groups import FlagIndex
from screenlab.kinetics.sites import join_flags, text_array
from screenlab.settings import AnalysisSettings
from screenlab.uncertainty import t_quantile, welch_df, within_range

#: flag codes set here (code -> one plain sentence)
FLAGS: dict[str, str] = {
    "selectivity_drift": "Selectivity to the main product changes with conversion (quadratic term of main vs total "
                         "products significant, p < 0.01, and a change of at least 5 points): the main product may "
                         "react further, so the selectivity is an average over the course.",
    "ee_drift": "The enantiomeric excess changes with conversion (quadratic term of E1 - E2 vs E1 + E2 significant, "
                "p < 0.01, and a change of at least 5 points): racemisation or a second pathway.",
    "ee_low_product": "Too little main product for a meaningful ee: below 1 % of the theoretical product or below "
                      "5 x the reading noise of the well.",
    "selectivity_low_product": "Too little product for a meaningful selectivity: below 1 % of the theoretical product "
                               "or below 5 x the reading noise of the well.",
    "background_dominant": "More than half of this well's products at its last reading are attributed to the "
                           "background (blank): its selectivity and ee rest on a small difference.",
}

#: significance level of the drift test (two-sided t-test of the quadratic term)
DRIFT_ALPHA = 0.01
#: smallest change of the instantaneous selectivity (or ee) over the observed range that is flagged, points
DRIFT_MIN_CHANGE_PCT = 5.0
#: below this conversion to product (percent of the theoretical product) ee / selectivity are not meaningful
LOW_PRODUCT_CONVERSION_PCT = 1.0
#: ... or below this multiple of the residual SD of the well's line (reading noise)
LOW_PRODUCT_NOISE_MULTIPLE = 5.0
#: share of a well's products attributed to the background above which the well is flagged
BACKGROUND_DOMINANT_FRACTION = 0.5

#: the first columns of :func:`well_selectivity` (the contract), then :data:`WELL_EXTRA`
WELL_COLUMNS = ("plate", "well", "selectivity_pct", "selectivity_se", "ee_pct", "ee_se", "flags")
WELL_EXTRA = ("role", "catalyst", "temperature_c", "blank_corrected", "selectivity_n", "selectivity_df",
              "selectivity_blank_se", "selectivity_drift_pct", "selectivity_drift_p", "ee_n", "ee_df", "ee_blank_se",
              "ee_drift_pct", "ee_drift_p",
              "products_max_mM", "main_max_mM", "background_share_pct")
#: columns :func:`summarise_groups` returns (added to the rates table)
GROUP_COLUMNS = ("selectivity_pct", "selectivity_se", "selectivity_df", "selectivity_ci_low", "selectivity_ci_high",
                 "ee_pct", "ee_se", "ee_df", "ee_ci_low", "ee_ci_high")


def origin_fit(code: np.ndarray, x: np.ndarray, y: np.ndarray, n_groups: int) -> dict[str, np.ndarray]:
    """Per group (integer ``code`` 0..n_groups-1): straight line and quadratic through the origin.

    Only rows with finite x and y are used. Returns arrays of length n_groups: ``n``, ``slope``,
    ``se`` (residual SD / sqrt(sum x^2)), ``df`` (n - 1), ``resid_sd``, ``x_max`` (largest x),
    ``curv_change`` (2 c x_max: change of dy/dx over the observed x range), ``curv_p`` (two-sided
    t-test of c, n - 2 df). Vectorised with bincount (no loop over groups).
    """
    code = np.asarray(code)
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y) & (code >= 0)
    c, x, y = code[ok].astype(np.int64), x[ok], y[ok]
    G = int(n_groups)

    def s(w):
        return np.bincount(c, weights=w, minlength=G)[:G]

    n = np.bincount(c, minlength=G)[:G].astype(float)
    sxx, sxy = s(x * x), s(x * y)
    with np.errstate(invalid="ignore", divide="ignore"):
        b = np.where(sxx > 0, sxy / sxx, np.nan)
        r = y - b[c] * x
        rss = s(r * r)
        df = n - 1.0
        resid_sd = np.where(df >= 1, np.sqrt(rss / np.where(df >= 1, df, 1.0)), np.nan)
        se = np.where((df >= 1) & (sxx > 0), resid_sd / np.sqrt(sxx), np.nan)

        x_max = np.full(G, np.nan)
        if len(c):
            xm = pd.Series(x).groupby(c).max()
            x_max[xm.index.to_numpy()] = xm.to_numpy()
        # quadratic through the origin in scaled units u = x / x_max, v = y / x_max: v = a u + k u^2
        scale = np.where(np.isfinite(x_max) & (x_max > 0), x_max, np.nan)[c]
        u, v = x / scale, y / scale
        fin = np.isfinite(u) & np.isfinite(v)
        u, v = np.where(fin, u, 0.0), np.where(fin, v, 0.0)
        s2, s3, s4 = s(u ** 2), s(u ** 3), s(u ** 4)
        suv, s2v = s(u * v), s(u * u * v)
        det = s2 * s4 - s3 ** 2
        good = (n >= 3) & (det > 1e-12 * np.maximum(s2 * s4, 1e-300)) & np.isfinite(det)
        a = np.where(good, (s4 * suv - s3 * s2v) / np.where(good, det, 1.0), np.nan)
        k = np.where(good, (s2 * s2v - s3 * suv) / np.where(good, det, 1.0), np.nan)
        rq = v - a[c] * u - k[c] * u * u
        rss_q = s(np.where(fin, rq * rq, 0.0))
        df_q = n - 2.0
        var_k = np.where(good & (df_q >= 1), rss_q / np.where(df_q >= 1, df_q, 1.0) * s2 / np.where(good, det, 1.0),
                         np.nan)
        tk = k / np.sqrt(var_k)
        p = np.where(np.isfinite(tk), 2.0 * special.stdtr(np.where(df_q >= 1, df_q, 1.0), -np.abs(tk)),
                     np.where(good & (df_q >= 1) & (var_k == 0) & (k != 0), 0.0, np.nan))
    return {"n": n, "slope": b, "se": se, "df": np.where(n >= 1, df, np.nan), "resid_sd": resid_sd,
            "x_max": x_max, "curv_change": 2.0 * k, "curv_p": p}


def _empty_wells(base: pd.DataFrame) -> pd.DataFrame:
    """The per-well frame with every selectivity / ee column empty (one constructor: column by
    column assignment is slow on a wide frame)."""
    n = len(base)
    nan = np.full(n, np.nan)
    cols = {"plate": base["plate"], "well": base["well"],
            **{c: nan for c in ("selectivity_pct", "selectivity_se", "ee_pct", "ee_se")},
            "flags": np.full(n, "", dtype=object), "role": base["role"].to_numpy(dtype=object),
            "catalyst": base["catalyst"].to_numpy(dtype=object),
            "temperature_c": base["temperature_c"].to_numpy(dtype=float),
            "blank_corrected": np.zeros(n, dtype=bool), **{c: nan for c in WELL_EXTRA[4:]}}
    return pd.DataFrame(cols, index=base.index)


def _role(frame: pd.DataFrame) -> np.ndarray:
    return frame["role"].astype(object).where(frame["role"].notna(), "").astype(str).to_numpy(dtype=object)


def well_selectivity(data, amounts: pd.DataFrame | None = None,
                     settings: AnalysisSettings | None = None) -> pd.DataFrame:
    """Selectivity and ee per non-empty well of a :class:`~screenlab.model.CampaignData`.

    Columns: ``plate, well, selectivity_pct, selectivity_se, ee_pct, ee_se, flags`` and then
    ``role, catalyst, temperature_c, blank_corrected`` (bool: the blank's products were
    subtracted), ``selectivity_n`` (readings used), ``selectivity_df``, ``selectivity_drift_pct``
    (change of the instantaneous selectivity over the observed range, points),
    ``selectivity_drift_p``, ``ee_n, ee_df, ee_drift_pct, ee_drift_p``, ``products_max_mM`` and
    ``main_max_mM`` (largest net amounts over the course), ``background_share_pct`` (share of the
    well's declared products at its last reading attributed to the blank). Selectivity columns are
    NaN when no by-product is declared, ee columns when no enantiomers are; all are NaN for a
    campaign without ``[analytes]``. Rows follow ``data.wells`` (empty wells left out). Method: see
    the module docstring. ``amounts`` is :func:`product_amounts` of ``data`` (computed if None).
    """
    del settings   # no tunable part yet; kept for a uniform signature
    m = data.manifest
    wl = data.wells
    role_all = _role(wl)
    keep = role_all != "empty"
    rows = np.flatnonzero(keep)
    base = pd.DataFrame({                             # text columns taken as they are (no conversion)
        "plate": wl["plate"].iloc[rows].reset_index(drop=True),
        "well": wl["well"].iloc[rows].reset_index(drop=True),
        "role": role_all[keep],
        "catalyst": wl["catalyst"].iloc[rows].reset_index(drop=True),
        "temperature_c": pd.to_numeric(wl["temperature_c"], errors="coerce").to_numpy(dtype=float)[keep],
        "s0": pd.to_numeric(wl["substrate_conc_mM"], errors="coerce").to_numpy(dtype=float)[keep],
    })
    out = _empty_wells(base)
    byp = [b for b in m.byproducts]
    ens = list(m.enantiomers) if m.enantiomers else []
    if not (byp or ens) or base.empty:
        return out
    if amounts is None:
        from screenlab.kinetics.amounts import product_amounts
        amounts = product_amounts(data)

    main = m.analyte_main
    needed = list(dict.fromkeys([main, *byp, *ens]))
    sub = amounts.loc[amounts["analyte"].isin(needed), ["plate", "well", "analyte", "time_h", "product_mM"]]
    # integer codes instead of string group-bys: well (row of base), analyte (column of Y)
    bidx = pd.MultiIndex.from_arrays([base["plate"].astype(str), base["well"].astype(str)])
    wcode = bidx.get_indexer(pd.MultiIndex.from_arrays([sub["plate"].astype(str), sub["well"].astype(str)]))
    acode = pd.Index(needed).get_indexer(sub["analyte"].astype(str))
    ts = sub["time_h"].to_numpy(dtype=float)
    val = sub["product_mM"].to_numpy(dtype=float)
    sel_rows = (wcode >= 0) & (acode >= 0) & np.isfinite(ts)
    if not sel_rows.any():
        return out
    wcode, acode, ts, val = wcode[sel_rows], acode[sel_rows], ts[sel_rows], val[sel_rows]
    order = np.lexsort((acode, ts, wcode))
    wcode, acode, ts, val = wcode[order], acode[order], ts[order], val[order]
    new_row = np.r_[True, (wcode[1:] != wcode[:-1]) | (ts[1:] != ts[:-1])]
    rowid = np.cumsum(new_row) - 1
    Y = np.full((int(rowid[-1]) + 1, len(needed)), np.nan)   # rows: (well, time); columns: analytes
    Y[rowid, acode] = val
    w = wcode[new_row].astype(np.int64)
    t = ts[new_row]
    col = {a: j for j, a in enumerate(needed)}
    role = base["role"].to_numpy(dtype=object)[w]
    theo_w = base["s0"].to_numpy(dtype=float) * float(m.product_per_substrate)
    theo = theo_w[w]

    # substrate-weighted elapsed time E(t) per well (trapezoid, X = 0 at t = 0)
    prod_cols = [col[main], *[col[b] for b in byp]]
    total_raw = Y[:, prod_cols].sum(axis=1)          # NaN if any declared product is missing
    with np.errstate(invalid="ignore", divide="ignore"):
        X = np.where(theo > 0, total_raw / theo, np.nan)
        X = np.where(np.isfinite(X), X, np.where(theo > 0, Y[:, col[main]] / theo, np.nan))
    X = np.clip(np.where(np.isfinite(X), X, 0.0), 0.0, 1.0)
    f = 1.0 - X
    first = np.r_[True, w[1:] != w[:-1]]
    t_prev = np.where(first, 0.0, np.r_[0.0, t[:-1]])
    f_prev = np.where(first, 1.0, np.r_[1.0, f[:-1]])
    dE = (t - t_prev) * (f + f_prev) / 2.0
    E = pd.Series(dE).groupby(w).cumsum().to_numpy()

    # background constants per plate x temperature x analyte, pooled over the blank wells
    tkey = np.round(base["temperature_c"].to_numpy(dtype=float), 6)
    pt = pd.DataFrame({"plate": base["plate"].to_numpy(dtype=object), "tkey": tkey})
    pt_code_w = pt.groupby(["plate", "tkey"], sort=False, dropna=False).ngroup().to_numpy()
    n_pt = int(pt_code_w.max()) + 1
    pt_code = pt_code_w[w]
    is_blank = role == "blank"
    catalysed = np.isin(role, ["sample", "reference"])
    finY = np.isfinite(Y)
    kb = np.full((n_pt, Y.shape[1]), np.nan)
    kb_var = np.zeros((n_pt, Y.shape[1]))          # variance of each background constant
    kb_df = np.full((n_pt, Y.shape[1]), np.inf)
    for j in range(Y.shape[1]):      # a loop over a few analytes
        use = is_blank & finY[:, j]
        see = np.bincount(pt_code[use], weights=E[use] ** 2, minlength=n_pt)
        sye = np.bincount(pt_code[use], weights=Y[use, j] * E[use], minlength=n_pt)
        nb = np.bincount(pt_code[use], minlength=n_pt).astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            kb[:, j] = np.where(see > 0, sye / see, np.nan)
            r = Y[use, j] - kb[pt_code[use], j] * E[use]
            rss = np.bincount(pt_code[use], weights=r * r, minlength=n_pt)
            ok = (see > 0) & (nb >= 2)
            kb_var[:, j] = np.where(ok, rss / np.where(ok, nb - 1.0, 1.0) / np.where(ok, see, 1.0), 0.0)
            kb_df[:, j] = np.where(ok, nb - 1.0, np.inf)
    kb_rows = kb[pt_code]                                    # (rows, analytes)
    has_bg = catalysed[:, None] & np.isfinite(kb_rows)
    background = np.where(has_bg, kb_rows * E[:, None], 0.0)
    net = Y - background
    corrected_w = np.zeros(len(base), dtype=bool)
    corr_rows = has_bg[:, prod_cols].all(axis=1)
    corrected_w[np.unique(w[corr_rows])] = True

    G = len(base)
    n_main = net[:, col[main]]
    flags = {}
    res = {}
    last = ~np.r_[w[1:] == w[:-1], False]     # last reading of each well
    if byp:
        net_total = net[:, prod_cols].sum(axis=1)
        fit = origin_fit(w, net_total, n_main, G)
        terms = [(col[main], 1.0, 1.0), *[(col[b], 1.0, 0.0) for b in byp]]
        vb, dfb = _blank_variance(w, net_total, n_main, E, fit["slope"], G, terms, has_bg,
                                  kb_var[pt_code_w], kb_df[pt_code_w])
        se_tot, df_tot = _combine(fit["se"], fit["df"], vb, dfb)
        res.update(selectivity_pct=100.0 * fit["slope"], selectivity_se=100.0 * se_tot,
                   selectivity_n=fit["n"], selectivity_df=df_tot, selectivity_blank_se=100.0 * np.sqrt(vb),
                   selectivity_drift_pct=100.0 * fit["curv_change"], selectivity_drift_p=fit["curv_p"],
                   products_max_mM=fit["x_max"])
        low = _low_product(fit, theo_w)
        flags["selectivity_low_product"] = low & np.isfinite(fit["slope"])
        flags["selectivity_drift"] = _drifts(fit) & ~low
        bg_total = background[:, prod_cols].sum(axis=1)
        lt = last & np.isfinite(total_raw) & (total_raw > 0)
        share = np.full(G, np.nan)
        share[w[lt]] = bg_total[lt] / total_raw[lt]
        res["background_share_pct"] = 100.0 * share
    if ens:
        e1, e2 = col[ens[0]], col[ens[1]]
        xe, ye = net[:, e1] + net[:, e2], net[:, e1] - net[:, e2]
        fit_e = origin_fit(w, xe, ye, G)
        vb, dfb = _blank_variance(w, xe, ye, E, fit_e["slope"], G, [(e1, 1.0, 1.0), (e2, 1.0, -1.0)], has_bg,
                                  kb_var[pt_code_w], kb_df[pt_code_w])
        se_tot, df_tot = _combine(fit_e["se"], fit_e["df"], vb, dfb)
        res.update(ee_pct=100.0 * fit_e["slope"], ee_se=100.0 * se_tot, ee_n=fit_e["n"], ee_df=df_tot,
                   ee_blank_se=100.0 * np.sqrt(vb),
                   ee_drift_pct=100.0 * fit_e["curv_change"], ee_drift_p=fit_e["curv_p"],
                   main_max_mM=fit_e["x_max"])
        low_e = _low_product(fit_e, theo_w)
        flags["ee_low_product"] = low_e & np.isfinite(fit_e["slope"])
        flags["ee_drift"] = _drifts(fit_e) & ~low_e
        if not byp:
            bg_main = background[:, col[main]]
            ym = Y[:, col[main]]
            lt = last & np.isfinite(ym) & (ym > 0)
            share = np.full(G, np.nan)
            share[w[lt]] = bg_main[lt] / ym[lt]
            res["background_share_pct"] = 100.0 * share
    else:
        mm = pd.Series(n_main).groupby(w).max()
        arr = np.full(G, np.nan)
        arr[mm.index.to_numpy()] = mm.to_numpy()
        res["main_max_mM"] = arr
    if "background_share_pct" in res:
        with np.errstate(invalid="ignore"):
            flags["background_dominant"] = corrected_w & (res["background_share_pct"] > 100.0 * BACKGROUND_DOMINANT_FRACTION)
    for k, v in res.items():
        out[k] = np.asarray(v, dtype=float)
    out["blank_corrected"] = corrected_w
    out["flags"] = join_flags(None, flags, index=out.index).to_numpy(dtype=object)
    return out


def _blank_variance(w, x, y, E, b, G, terms, has_bg, var_kb_w, df_kb_w):
    """Variance of a well's slope b = sum(xy)/sum(x^2) from the error of the background constants.

    ``terms``: (analyte column, sx, sy) with dx/dkb = -sx E and dy/dkb = -sy E; then
    db/dkb = (-sx sum(E y) - sy sum(x E) + 2 b sx sum(x E)) / sum(x^2) (delta method; the constants
    of different analytes taken as independent). Returns (variance, smallest df of the terms used).
    """
    ok = np.isfinite(x) & np.isfinite(y)
    c = w[ok]
    xo, yo, eo = x[ok], y[ok], E[ok]
    sxx = np.bincount(c, weights=xo * xo, minlength=G)[:G]
    sey = np.bincount(c, weights=eo * yo, minlength=G)[:G]
    sxe = np.bincount(c, weights=xo * eo, minlength=G)[:G]
    corrected = np.zeros((G, has_bg.shape[1]), dtype=bool)
    for j in range(has_bg.shape[1]):
        corrected[:, j] = np.bincount(w, weights=has_bg[:, j].astype(float), minlength=G)[:G] > 0
    var = np.zeros(G)
    df = np.full(G, np.inf)
    with np.errstate(invalid="ignore", divide="ignore"):
        for j, sx, sy in terms:          # a loop over two or three analytes
            g = np.where(sxx > 0, (-sx * sey - sy * sxe + 2.0 * b * sx * sxe) / sxx, 0.0)
            g = np.where(np.isfinite(g) & corrected[:, j], g, 0.0)
            var = var + g * g * var_kb_w[:, j]
            df = np.where(g != 0, np.minimum(df, df_kb_w[:, j]), df)
    return var, df


def _combine(se_fit, df_fit, var_blank, df_blank):
    """SE including the background term; Welch-Satterthwaite df."""
    v1 = se_fit ** 2
    se = np.sqrt(v1 + var_blank)
    df = np.where(np.isfinite(se_fit), welch_df(v1, df_fit, var_blank, df_blank), np.nan)
    df = np.where(np.isfinite(df_fit) & (var_blank == 0), df_fit, df)
    return se, df


def _low_product(fit: dict[str, np.ndarray], theo_w: np.ndarray) -> np.ndarray:
    xm = fit["x_max"]
    with np.errstate(invalid="ignore"):
        by_conv = np.isfinite(theo_w) & (theo_w > 0) & (xm < LOW_PRODUCT_CONVERSION_PCT / 100.0 * theo_w)
        by_noise = np.isfinite(fit["resid_sd"]) & (xm < LOW_PRODUCT_NOISE_MULTIPLE * fit["resid_sd"])
        nonpos = ~(xm > 0)
    return (fit["n"] >= 1) & (by_conv | by_noise | nonpos)


def _drifts(fit: dict[str, np.ndarray]) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return ((fit["n"] >= 4) & np.isfinite(fit["curv_p"]) & (fit["curv_p"] < DRIFT_ALPHA)
                & (np.abs(100.0 * fit["curv_change"]) >= DRIFT_MIN_CHANGE_PCT))


def summarise_groups(rows: pd.DataFrame, codes: np.ndarray, n_groups: int,
                     confidence: float = 0.95) -> pd.DataFrame:
    """Group statistics of per-well selectivity / ee (one row per group code 0..n_groups-1).

    ``rows`` holds :func:`well_selectivity` columns aligned with ``codes`` (one row per well; a
    negative code leaves the row out). Returns :data:`GROUP_COLUMNS` plus ``flags``: mean over the
    wells with a value, SE = SD/sqrt(n) and a t interval with n - 1 df; one well: its own SE and
    df. Group flags: a well flag carried by at least half of the wells with a value.

    Means, SDs and sums come from one pandas group-by per quantity (its compensated sums); sizes,
    first values and plate counts from bincounts over the group codes; no loop over groups or rows.
    """
    codes = np.asarray(codes)
    G = int(n_groups)
    n_rows = len(rows)
    out: dict[str, np.ndarray] = {}
    flag_masks: dict[str, np.ndarray] = {}

    def num(col: str, default: float) -> np.ndarray:
        if col not in rows:
            return np.full(n_rows, default)
        return pd.to_numeric(rows[col], errors="coerce").to_numpy(dtype=float)

    def scatter(present: np.ndarray, values) -> np.ndarray:
        full = np.full(G, np.nan)
        full[present] = values
        return full

    # plates as codes (a missing plate is one more plate), for the plates per group
    plate_code = grp.codes(rows["plate"])[0] if "plate" in rows else np.zeros(n_rows, dtype=np.int64)
    any_value = np.zeros(n_rows, dtype=bool)
    if not n_rows or not (codes >= 0).any():
        # nothing to summarise: every statistic NaN, no group flags
        nan = np.full(G, np.nan)
        empty = FlagIndex(None, n=G).join_codes({})
        return pd.DataFrame({**{c: nan.copy() for c in GROUP_COLUMNS}, "flags": text_array(*empty)},
                            index=pd.RangeIndex(G))
    for key in ("selectivity", "ee"):
        v = num(f"{key}_pct", np.nan)
        se1 = num(f"{key}_se", np.nan)
        df1 = num(f"{key}_df", np.nan)
        bse = num(f"{key}_blank_se", 0.0)
        ok = np.isfinite(v) & (codes >= 0)
        g = codes[ok].astype(np.int64)
        n = np.zeros(G)
        mean = sd = se_first = df_first = b2m = fit2m = dfsum = np.full(G, np.nan)
        k = np.ones(G)
        if g.size:
            b2 = np.nan_to_num(bse[ok], nan=0.0) ** 2
            se_ok, df_ok = se1[ok], df1[ok]
            frame = pd.DataFrame({"v": v[ok], "b2": b2, "fit2": se_ok ** 2 - b2})
            gb = frame.groupby(g, sort=True)
            means = gb.mean()
            present = means.index.to_numpy(dtype=np.int64)
            mean = scatter(present, means["v"].to_numpy(dtype=float))
            b2m = scatter(present, means["b2"].to_numpy(dtype=float))
            fit2m = scatter(present, means["fit2"].to_numpy(dtype=float))
            sd = scatter(present, gb["v"].std().to_numpy(dtype=float))
            dfsum = scatter(present, pd.Series(df_ok).groupby(g, sort=True).sum().to_numpy(dtype=float))
            n = np.bincount(g, minlength=G)[:G].astype(float)
            order, gs, _ = grp.group_order(g, 0)
            se_first = grp.group_first(se_ok, order, gs, G)          # first non-missing value per group
            df_first = grp.group_first(df_ok, order, gs, G)
            k = grp.count_distinct(g, plate_code[ok], G)[:G].astype(float)      # plates per group
            k = np.where(n > 0, k, 1.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            v_rep = sd ** 2 / n
            v_bl = np.nan_to_num(b2m, nan=0.0) / k
            se = np.where(n >= 2, np.sqrt(v_rep + v_bl), np.where(n == 1, se_first, np.nan))
            # df: Welch-Satterthwaite weighted by the variance the wells' own fits lead one to expect
            # (not by the sample SD itself, whose chance lows would inflate the df)
            v_exp = np.maximum(fit2m, 0.0) / n
            df = np.where(n >= 2, np.minimum(welch_df(v_exp, n - 1.0, v_bl, np.inf), dfsum),
                          np.where(n == 1, df_first, np.nan))
            df = np.where((n >= 2) & ~np.isfinite(df), n - 1.0, np.maximum(df, n - 1.0))
            q = t_quantile(confidence, df)
        out[f"{key}_pct"] = mean
        out[f"{key}_se"] = se
        out[f"{key}_df"] = df
        # a percentage interval stays within the quantity's range (selectivity 0..100 %, ee -100..100 %;
        # common practice, no source), but always holds the estimate (which may lie past an end)
        out[f"{key}_ci_low"], out[f"{key}_ci_high"] = within_range(
            mean - q * se, mean + q * se, mean, 0.0 if key == "selectivity" else -100.0, 100.0)
        any_value |= ok
    # group flags: carried by at least half of the wells that have a selectivity or an ee
    c_any = codes[any_value].astype(np.int64)
    n_any = np.bincount(c_any, minlength=G)[:G].astype(float)
    wflags = FlagIndex(rows["flags"]) if "flags" in rows and n_rows else None
    for code in ("selectivity_drift", "selectivity_low_product", "background_dominant", "ee_drift",
                 "ee_low_product"):
        has = wflags.has(code) if wflags is not None else np.zeros(n_rows, dtype=bool)
        cnt = np.bincount(c_any, weights=has[any_value].astype(float), minlength=G)[:G]
        flag_masks[code] = (n_any > 0) & (cnt >= 0.5 * n_any) & (cnt > 0)
    words, flag_codes = FlagIndex(None, n=G).join_codes(flag_masks)
    return pd.DataFrame({**{c: out[c] for c in GROUP_COLUMNS}, "flags": text_array(words, flag_codes)},
                        index=pd.RangeIndex(G))

__all__ = ["FLAGS", "WELL_COLUMNS", "GROUP_COLUMNS", "well_selectivity", "summarise_groups", "origin_fit"]
