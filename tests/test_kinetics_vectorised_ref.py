"""The batched amounts / well-rate / sites paths against straightforward references.

References are written plainly here: a string merge for the well lookup (the previous design of
product_amounts), a regex for flag tokens (the previous join_flags / has_flag), a per-well
scipy.stats.linregress / scipy.optimize.curve_fit loop for the rates (scipy as the outside
reference library), and a per-row merge for the sites lookup.
"""
from __future__ import annotations

import re
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import optimize, stats

from screenlab.kinetics import amounts, fit, rates, sites
from screenlab.pipeline import settings_for
from screenlab.synthetic import SyntheticSpec, synthetic_campaign


@pytest.fixture(scope="module")
def campaign():
    return synthetic_campaign(SyntheticSpec(n_plates=4, seed=3))


# ------------------------------------------------------------------------------- well codes

@pytest.mark.parametrize("seed", [0, 1, 2])
def test_well_index_matches_multiindex_lookup_in_any_order(seed):
    rng = np.random.default_rng(seed)
    plates = np.array(["P1", "P2", "P10", "x;y"], dtype=object)
    wells = np.array(["A1", "A2", "B1", "H12"], dtype=object)
    keys = pd.DataFrame([(p, w) for p in plates for w in wells], columns=["plate", "well"])
    keys = keys.sample(frac=0.7, random_state=seed).reset_index(drop=True)      # some wells absent
    n = 300
    rows = pd.DataFrame({"plate": rng.choice(plates, n), "well": rng.choice(wells, n)})
    rows = rows.sort_values(["plate", "well"]).reset_index(drop=True) if seed == 0 else rows
    for dtype in ("str", object):
        r = rows.astype(dtype)
        k = keys.astype(dtype)
        got = amounts.well_index(r["plate"], r["well"], k["plate"], k["well"])
        ref = pd.MultiIndex.from_frame(k.astype(str)).get_indexer(pd.MultiIndex.from_frame(r.astype(str)))
        np.testing.assert_array_equal(got, ref)


def test_well_index_duplicate_keys_take_the_first():
    k = pd.DataFrame({"plate": ["P", "P", "P"], "well": ["A1", "B1", "A1"]})
    got = amounts.well_index(pd.Series(["P", "P", "Q"]), pd.Series(["A1", "B1", "A1"]), k["plate"], k["well"])
    np.testing.assert_array_equal(got, [0, 1, -1])


def test_product_amounts_equal_the_merge_reference(campaign):
    got = amounts.product_amounts(campaign)
    rd = campaign.readings[["plate", "well", "analyte", "time_h", "value"]]
    w = campaign.wells[["plate", "well", "substrate_conc_mM"]].drop_duplicates(["plate", "well"])
    ref = rd.merge(w, on=["plate", "well"], how="left")
    theo = ref["substrate_conc_mM"].to_numpy(float) * float(campaign.manifest.product_per_substrate)
    product = ref["value"].to_numpy(float) * 0.01 * theo               # synthetic yields are percent
    assert list(got.columns) == list(amounts.AMOUNT_COLUMNS)
    np.testing.assert_allclose(got["product_mM"], product, rtol=1e-14, equal_nan=True)
    np.testing.assert_allclose(got["conversion_pct"], ref["value"].to_numpy(float), rtol=1e-12, equal_nan=True)
    assert (got["well"].to_numpy(object) == ref["well"].to_numpy(object)).all()


# ------------------------------------------------------------------------------------ flags

def _regex_has(values, code):
    pat = r"(?:^|;)" + re.escape(code) + r"(?:;|$)"
    return np.array([bool(re.search(pat, "" if pd.isna(v) else str(v))) for v in values])


def _regex_join(values, masks):
    out = []
    for i, v in enumerate(values):
        cur = "" if pd.isna(v) else str(v)
        for code, mask in masks.items():
            if mask[i] and not re.search(r"(?:^|;)" + re.escape(code) + r"(?:;|$)", cur):
                cur = code if cur == "" else cur + ";" + code
        out.append(cur)
    return out


@pytest.mark.parametrize("seed", range(4))
def test_flag_helpers_equal_the_regex_reference(seed):
    rng = np.random.default_rng(seed)
    pool = ["", "a", "b", "ab", "a;b", "b;ab", "c;a", None, "few_points"]
    vals = pd.Series(rng.choice(np.array(pool, dtype=object), 200), dtype=object)
    masks = {c: rng.random(200) < 0.3 for c in ("a", "ab", "few_points", "z")}
    for code in ("a", "b", "ab", "few", "few_points", "z"):
        np.testing.assert_array_equal(sites.has_flag(vals, code), _regex_has(vals, code))
    got = sites.join_flags(vals, masks)
    assert got.tolist() == _regex_join(vals, masks)
    fresh = sites.join_flags(None, masks)
    assert fresh.tolist() == _regex_join([""] * 200, masks)


def test_rates_flag_text_equals_a_loop_over_codes():
    rng = np.random.default_rng(7)
    flags = {c: rng.random(500) < p for c, p in zip(rates.FLAGS, np.linspace(0.02, 0.5, len(rates.FLAGS)))}
    got = rates._flag_text(flags, 500)
    ref = [";".join(c for c, m in flags.items() if m[i]) for i in range(500)]
    assert got.tolist() == ref
    assert rates._flag_text({}, 0).shape == (0,)


# ------------------------------------------------------------------------------------ rates

def _law_model(method, capped_max):
    """The rate law of ``method`` written out plainly for scipy.optimize.curve_fit (y in mM)."""
    from scipy.special import lambertw

    def saturation(x, r0, K):
        # integrated Michaelis-Menten in closed form: S = Km W((S0/Km) exp((S0 - V t)/Km)) (Schnell &
        # Mendoza, J. Theor. Biol. 1997, 187, 207), in units of S0 with K = Km/S0 and V/S0 = r0 (1 + K)
        v = r0 * (1.0 + K)
        arg = np.log(1.0 / K) + (1.0 - v * x) / K
        w = np.real(lambertw(np.exp(np.minimum(arg, 700.0))))
        w = np.where(arg > 700.0, arg - np.log(arg), w)        # W(e^a) ~ a - ln a for huge a
        return capped_max * (1.0 - K * w)

    return {
        "first_order": (lambda x, k: capped_max * -np.expm1(-k * x), 1),
        "zero_order": (lambda x, r: capped_max * np.minimum(r * x, 1.0), 1),
        "first_order_plateau": (lambda x, b, k: capped_max * b * -np.expm1(-k * x), 2),
        "first_order_deactivating": (lambda x, k, kd: capped_max * -np.expm1(-(k / kd) * -np.expm1(-kd * x)), 2),
        "saturation": (saturation, 2),
    }[method]


def test_well_rates_reach_the_per_well_curve_fit_minimum_of_their_law():
    """Every well's reported law and rate against a per-well scipy.optimize.curve_fit of that law
    (scipy as the outside reference library; the saturation law through its Lambert-W closed
    form), on a campaign of mixed rate laws: the batched fit's RSS is never worse than
    curve_fit's from the batched fit's own answer as start, and the rates agree."""
    from screenlab.synthetic import kinetics_campaign

    kc = kinetics_campaign(seed=5, noise_pct=0.5)
    data = kc.data
    am = amounts.product_amounts(data)
    got = rates.well_rates(data, settings_for(data), amounts=am)
    main = am[am["analyte"] == data.manifest.analyte_main]
    courses = {k: g.sort_values("time_h") for k, g in main.groupby(["plate", "well"], sort=False)}
    seen = {}
    for _, r in got.iterrows():                       # a reference loop, test only
        method = str(r["method"])
        if method not in ("first_order", "zero_order", "first_order_plateau", "first_order_deactivating",
                          "saturation") or seen.get(method, 0) >= 25:
            continue
        g = courses[(r["plate"], r["well"])]
        t, p = g["time_h"].to_numpy(float), g["product_mM"].to_numpy(float)
        pmax = float(r["substrate_conc_mM"])
        f, n_par = _law_model(method, pmax)
        start = [r["law_p1"], r["law_p2"]][:n_par]
        # the searched ranges of the second parameter (ratelaws.K_RATIO_BOUNDS; kd from the times)
        t_first, t_max = t[t > 0].min(), t.max()
        lo_hi = {"saturation": ([0.0, 1e-3], [np.inf, 1e3]),
                 "first_order_deactivating": ([0.0, 1e-2 / t_max], [np.inf, 30.0 / t_first])}
        bounds = lo_hi.get(method, (-np.inf, np.inf))
        start = list(np.clip(start, *bounds)) if method in lo_hi else start
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            try:
                popt, _ = optimize.curve_fit(f, t, p, p0=start, bounds=bounds, xtol=1e-13, ftol=1e-13,
                                             maxfev=20000, **({"method": "trf"} if method in lo_hi else {}))
            except (RuntimeError, ValueError):
                continue
        ours = np.sum((p - f(t, *start)) ** 2)
        ref = np.sum((p - f(t, *popt)) ** 2)
        assert ours <= ref * (1 + 1e-5) + 1e-9, (method, r["plate"], r["well"])
        r0_ref = {"first_order": popt[0], "zero_order": popt[0], "first_order_plateau": popt[0] * popt[1]
                  if n_par == 2 else np.nan, "first_order_deactivating": popt[0], "saturation": popt[0]}[method]
        assert r["rate_mM_per_h"] == pytest.approx(r0_ref * pmax, rel=2e-3), (method, r["plate"], r["well"])
        seen[method] = seen.get(method, 0) + 1
    assert {m for m, k in seen.items() if k >= 5} >= {"first_order", "zero_order", "saturation",
                                                      "first_order_deactivating"}, seen


@pytest.mark.parametrize("seed", range(3))
def test_first_order_fit_reaches_the_curve_fit_minimum_on_random_courses(seed):
    rng = np.random.default_rng(seed)
    G, m = 60, 8
    t = np.tile(np.array([0, 0.1, 0.25, 0.5, 1, 1.5, 2.5, 4.0]), G)
    b1 = rng.uniform(5, 50, G)
    k = np.exp(rng.uniform(np.log(0.05), np.log(8.0), G))
    g = np.repeat(np.arange(G), m)
    y = b1[g] * -np.expm1(-k[g] * t) * (1 + 0.02 * rng.standard_normal(G * m))
    res = fit.fit_first_order(t, y, g, G)
    checked = 0
    for i in np.flatnonzero(res.status == fit.OK):    # reference loop, test only
        sl = g == i
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            popt, _ = optimize.curve_fit(lambda x, a, kk: a * -np.expm1(-kk * x), t[sl], y[sl],
                                         p0=(b1[i], k[i]), xtol=1e-14, ftol=1e-14, maxfev=20000)
        rss_ref = np.sum((y[sl] - popt[0] * -np.expm1(-popt[1] * t[sl])) ** 2)
        assert res.rss[i] <= rss_ref * (1 + 1e-9) + 1e-18
        assert res.k[i] == pytest.approx(popt[1], rel=1e-5)
        checked += 1
    assert checked > G // 2


# ------------------------------------------------------------------------------------ sites

def test_active_sites_lookup_equals_a_merge_reference(campaign):
    wells = campaign.wells.copy()
    wells.loc[wells.index[:3], "catalyst"] = "not-in-library"
    got = sites.active_sites(wells, campaign.catalysts)
    looked = wells[["catalyst"]].astype(object).merge(
        campaign.catalysts.drop_duplicates("catalyst").astype({"catalyst": object}), on="catalyst", how="left")
    has = wells["catalyst"].notna().to_numpy()
    known = has & looked["catalyst"].isin(campaign.catalysts["catalyst"].astype(object)).to_numpy()
    assert (got["site_flags"].to_numpy(object)[has & ~known] == "unknown_catalyst").all()
    assert got["sites_umol"].to_numpy(float)[~known].tolist() == [] or np.isnan(got["sites_umol"].to_numpy(float)[~known]).all()
    unit = wells["loading_unit"].astype(str).str.strip().str.lower().to_numpy(object)
    umol = known & (unit == "umol")
    spu = pd.to_numeric(looked["sites_per_unit"], errors="coerce").fillna(1.0).to_numpy(float)
    ref = wells["loading"].to_numpy(float) * spu
    assert umol.any() or (known & (unit == "mg")).any()
    np.testing.assert_allclose(got["sites_umol"].to_numpy(float)[umol], ref[umol], rtol=1e-14)
    mg = known & (unit == "mg") & looked["metal_wt_pct"].isna().to_numpy()
    ref_mg = wells["loading"].to_numpy(float) / looked["molar_mass_g_mol"].to_numpy(float) * 1000.0 * spu
    np.testing.assert_allclose(got["sites_umol"].to_numpy(float)[mg], ref_mg[mg], rtol=1e-14)
