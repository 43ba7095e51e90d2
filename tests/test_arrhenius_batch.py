"""The batched Arrhenius / Eyring core (arrhenius.fit_temperature_batch, arrhenius_table) against a
straightforward per-catalyst reference implementation and against statsmodels WLS."""
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import constants, stats

from screenlab.kinetics.arrhenius import (COLUMNS, LN_KB_OVER_H, UNCATALYSED, arrhenius_table, curvature_p,
                                          fit_temperature_batch, wls_line)
from screenlab.kinetics.sites import has_flag
from screenlab.kinetics.turnover import t_quantile
from screenlab.settings import AnalysisSettings

R = constants.R   # CODATA via scipy.constants


# ------------------------------------------------------------------ the reference: one catalyst at a time

def reference_fit(t_c, v, se, conf, t_ref_c, low_ea):
    """Per-series fit written out plainly with np.linalg.lstsq (wls_line / curvature_p), as the
    module docstring defines it; the loop version the batched core replaced."""
    t_c, v = np.asarray(t_c, float), np.asarray(v, float)
    out = {c: np.nan for c in COLUMNS if c not in ("catalyst", "role", "flags", "fit_weighted")}
    nt = len(np.unique(np.round(t_c, 6)))
    out.update(n_temperatures=nt, flags="", fit_weighted=False, reference_temperature_c=t_ref_c)
    flags = []
    if len(t_c):
        out["t_min_c"], out["t_max_c"] = t_c.min(), t_c.max()
    if nt < 2:
        out["flags"] = "one_temperature" if nt == 1 else ""
        return out
    T = t_c + 273.15
    x, y = 1 / T, np.log(v)
    var = None
    if se is not None and np.all(np.isfinite(se) & (se > 0)):
        var, out["fit_weighted"] = (se / v) ** 2, True
    elif se is not None:
        flags.append("unweighted")
    b0, b1, cov, df = wls_line(x, y, var)
    out.update(fit_intercept=b0, fit_slope_k=b1, cov_ii=cov[0, 0], cov_is=cov[0, 1], cov_ss=cov[1, 1],
               fit_df=float(df), ea_kj_mol=-b1 * R / 1000, ln_a=b0)
    e0, e1, ecov, _ = wls_line(x, y - np.log(3600.0) - np.log(T), var)
    tr = t_ref_c + 273.15
    out.update(dh_kj_mol=-e1 * R / 1000, ds_j_mol_k=R * (e0 - LN_KB_OVER_H))
    out["dg_ref_kj_mol"] = out["dh_kj_mol"] - tr * out["ds_j_mol_k"] / 1000
    ln_ref = b0 + b1 / tr
    out["tof_ref_per_h"] = np.exp(ln_ref)
    if df > 0:
        q = float(t_quantile(conf, df))
        out["ea_se"] = np.sqrt(cov[1, 1]) * R / 1000
        out["ln_a_se"] = np.sqrt(cov[0, 0])
        out["ea_ci_low"], out["ea_ci_high"] = out["ea_kj_mol"] - q * out["ea_se"], out["ea_kj_mol"] + q * out["ea_se"]
        out["dh_se"] = np.sqrt(ecov[1, 1]) * R / 1000
        out["ds_se"] = np.sqrt(ecov[0, 0]) * R
        out["dg_ref_se"] = R / 1000 * np.sqrt(ecov[1, 1] + 2 * tr * ecov[0, 1] + tr ** 2 * ecov[0, 0])
        s = np.sqrt(cov[0, 0] + 2 / tr * cov[0, 1] + cov[1, 1] / tr ** 2)
        out["tof_ref_ci_low"], out["tof_ref_ci_high"] = np.exp(ln_ref - q * s), np.exp(ln_ref + q * s)
    else:
        flags.append("two_temperatures")
    if nt >= 4:
        out["curvature_p"] = curvature_p(x, y, var)
        if out["curvature_p"] < 0.05:
            flags.append("curvature")
    if low_ea is not None and out["ea_kj_mol"] < low_ea:
        flags.append("low_ea")
    out["flags"] = ";".join(flags)
    return out


def reference_table(groups, settings):
    rows = []
    std = groups[groups["is_standard"]]
    for cat, g in std.groupby("catalyst", sort=True):            # the loop the batched core replaced
        tof, lo, se = (g[c].to_numpy(float) for c in ("tof_per_h", "tof_ci_low", "tof_se_per_h"))
        active = np.isfinite(tof) & (tof > 0) & ~(np.isfinite(lo) & (lo <= 0)) & ~has_flag(g["flags"], "no_sites")
        r = reference_fit(g["temperature_c"].to_numpy(float)[active], tof[active], se[active], settings.confidence,
                          settings.reference_temperature_c, settings.low_ea_kj_mol)
        if (~active).any():
            r["flags"] = ";".join(c for c in ["no_activity", *r["flags"].split(";")] if c)
        r.update(t_min_c=g["temperature_c"].min(), t_max_c=g["temperature_c"].max(), catalyst=cat,
                 role=g["role"].iloc[0])
        rows.append(r)
    return pd.DataFrame(rows)


def random_groups(rng, n_cat=60):
    """Random rates tables: 1-6 temperatures (some repeated), some points inactive or without SE."""
    parts = []
    for i in range(n_cat):
        nt = int(rng.integers(1, 7))
        temps = np.sort(rng.choice(np.arange(20.0, 130.0, 10.0), nt, replace=False))
        if rng.random() < 0.15:
            temps = np.append(temps, temps[0])                 # a second row at one temperature
        ea = rng.uniform(20, 120) * 1e3
        tof = np.exp(rng.uniform(20, 40) - ea / (R * (temps + 273.15)) + rng.normal(0, rng.choice([0.01, 0.2]),
                                                                                       len(temps)))
        se = tof * rng.uniform(0.02, 0.3, len(temps))
        if rng.random() < 0.1:
            se[0] = np.nan                                     # -> unweighted fit
        lo = tof - 2 * se
        if rng.random() < 0.1:
            lo[-1] = -1.0                                      # CI reaches zero -> inactive point
        flags = np.where(rng.random(len(temps)) < 0.05, "no_blank;no_sites", "")
        parts.append(pd.DataFrame({"catalyst": f"C{i:03d}", "role": "sample", "temperature_c": temps,
                                   "tof_per_h": tof, "tof_se_per_h": se, "tof_ci_low": lo, "tof_ci_high": tof + 2 * se,
                                   "is_standard": True, "flags": flags}))
        if rng.random() < 0.2:                                 # a non-standard series that must be ignored
            parts.append(parts[-1].assign(is_standard=False, tof_per_h=parts[-1]["tof_per_h"] * 10))
    return pd.concat(parts, ignore_index=True).sample(frac=1.0, random_state=1).reset_index(drop=True)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_batched_table_equals_per_catalyst_reference(seed):
    rng = np.random.default_rng(seed)
    groups = random_groups(rng)
    s = AnalysisSettings(reference_temperature_c=55.0, low_ea_kj_mol=40.0)
    got = arrhenius_table(groups, pd.DataFrame(columns=["n_blanks"]), s).set_index("catalyst")
    ref = reference_table(groups, s).set_index("catalyst")
    assert list(got.index) == list(ref.index)
    for c in COLUMNS:
        if c in ("catalyst", "delta_ea_kj_mol", "delta_ea_ci_low", "delta_ea_ci_high"):
            continue
        a, b = got[c], ref[c]
        if c in ("flags", "role"):
            assert a.tolist() == b.tolist(), c
        elif c == "fit_weighted":
            assert a.astype(bool).tolist() == b.astype(bool).tolist()
        else:
            np.testing.assert_allclose(a.to_numpy(float), b.to_numpy(float), rtol=1e-8, atol=1e-12, err_msg=c)
    # the random cases reach every branch
    fl = ";".join(got["flags"])
    for code in ("one_temperature", "two_temperatures", "unweighted", "no_activity", "low_ea"):
        assert code in fl, code
    assert np.isinf(got["fit_df"]).any() and (got["fit_df"] >= 2).any()


def test_batch_matches_statsmodels_wls_for_many_series():
    # statsmodels WLS per series (reference library): params, covariance with scale max(1, chi2/df),
    # and the curvature t-test of the x^2 term (unscaled WLS, as curvature_p defines it)
    rng = np.random.default_rng(5)
    temps = np.array([30.0, 45.0, 60.0, 75.0, 90.0])
    k = 40
    tof = np.exp(25 - 7000 / (temps + 273.15) + rng.normal(0, 0.1, (k, 5)))
    se = tof * rng.uniform(0.03, 0.15, (k, 5))
    codes = np.repeat(np.arange(k), 5)
    r = fit_temperature_batch(codes, k, np.tile(temps, k), tof.ravel(), se.ravel(), confidence=0.95,
                              reference_temperature_c=60.0)
    x = 1 / (temps + 273.15)
    for i in range(k):
        w = 1 / (se[i] / tof[i]) ** 2
        base = sm.WLS(np.log(tof[i]), sm.add_constant(x), weights=w).fit()
        fit = sm.WLS(np.log(tof[i]), sm.add_constant(x), weights=w).fit(
            cov_type="fixed scale", cov_kwds={"scale": max(1.0, base.scale)})
        assert r["fit_intercept"][i] == pytest.approx(fit.params[0], rel=1e-10)
        assert r["fit_slope_k"][i] == pytest.approx(fit.params[1], rel=1e-10)
        np.testing.assert_allclose([r["cov_ii"][i], r["cov_is"][i], r["cov_ss"][i]],
                                   fit.cov_params()[[0, 0, 1], [0, 1, 1]], rtol=1e-8)
        assert r["fit_df"][i] == (3 if base.scale > 1 else np.inf)
        q = stats.t.ppf(0.975, 3) if base.scale > 1 else stats.norm.ppf(0.975)
        assert r["ea_ci_high"][i] - r["ea_kj_mol"][i] == pytest.approx(q * fit.bse[1] * R / 1000, rel=1e-8)
        quad = sm.WLS(np.log(tof[i]), np.column_stack([np.ones(5), x, x ** 2]), weights=w).fit()
        assert r["curvature_p"][i] == pytest.approx(quad.pvalues[2], rel=1e-5)
    assert r["fit_weighted"].all() and (r["n_temperatures"] == 5).all()


def test_uncatalysed_row_and_delta_ea_still_present():
    rng = np.random.default_rng(3)
    groups = random_groups(rng, n_cat=5)
    temps = np.array([40.0, 50.0, 60.0, 70.0])
    blanks = pd.DataFrame({"plate": list("ABCD"), "temperature_c": temps, "n_blanks": 4,
                           "blank_rate_mM_per_h": np.exp(20 - 9000 / (temps + 273.15)),
                           "blank_se_mM_per_h": 0.01, "blank_lod_mM_per_h": 0.0, "flags": "", "blank_df": 3,
                           "blank_detected": True})
    a = arrhenius_table(groups, blanks, AnalysisSettings())
    assert list(a.columns) == COLUMNS and a["catalyst"].iloc[-1] == UNCATALYSED
    # exact line in 1/T: Ea = 9000 K x R (CODATA)
    assert a["ea_kj_mol"].iloc[-1] == pytest.approx(9000 * R / 1000, rel=1e-9)
    cat = a.iloc[:-1]
    np.testing.assert_allclose(cat["delta_ea_kj_mol"], 9000 * R / 1000 - cat["ea_kj_mol"], rtol=1e-12)


def test_empty_and_unnamed_catalysts():
    g = pd.DataFrame({"catalyst": [None, None], "role": "sample", "temperature_c": [40.0, 50.0],
                      "tof_per_h": [1.0, 2.0], "tof_se_per_h": 0.1, "tof_ci_low": 0.5, "tof_ci_high": 3.0,
                      "is_standard": True, "flags": ""})
    a = arrhenius_table(g, pd.DataFrame(columns=["n_blanks"]), AnalysisSettings())
    assert len(a) == 0 and list(a.columns) == COLUMNS
    assert len(arrhenius_table(g.iloc[:0], pd.DataFrame(columns=["n_blanks"]))) == 0
