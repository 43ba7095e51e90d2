"""The batched Arrhenius / Eyring core (arrhenius.fit_temperature_batch, arrhenius_table) against
statsmodels WLS, series by series."""
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import constants, stats

from screenlab.kinetics.arrhenius import COLUMNS, UNCATALYSED, arrhenius_table, fit_temperature_batch
from screenlab.kinetics.sites import has_flag
from screenlab.settings import AnalysisSettings

R = constants.R   # CODATA via scipy.constants


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
def test_batched_table_matches_statsmodels_per_catalyst(seed):
    """Every catalyst's row of the batched table against statsmodels WLS on its own points (the
    reference library), with every point's variance its replicate variance plus the campaign's
    plate scatter (the table's attrs) and the error scale known; the random cases reach every branch."""
    rng = np.random.default_rng(seed)
    groups = random_groups(rng)
    s = AnalysisSettings(reference_temperature_c=55.0, low_ea_kj_mol=40.0)
    got = arrhenius_table(groups, pd.DataFrame(columns=["n_blanks"]), s).set_index("catalyst")
    tau2 = got.attrs["plate_scatter_ln"] ** 2
    df_pool = got.attrs["plate_scatter_df"]
    std = groups[groups["is_standard"]]
    checked = 0
    for cat, g in std.groupby("catalyst"):              # a reference loop, test only
        ok = (g["tof_per_h"] > 0) & ~(g["tof_ci_low"] <= 0) & ~has_flag(g["flags"], "no_sites")
        g = g[ok]
        row = got.loc[cat]
        assert row["n_temperatures"] == g["temperature_c"].round(6).nunique()
        if g["temperature_c"].round(6).nunique() < 3 or not np.all(np.isfinite(g["tof_se_per_h"]) & (g["tof_se_per_h"] > 0)):
            continue
        x = 1 / (g["temperature_c"].to_numpy() + 273.15)
        y = np.log(g["tof_per_h"].to_numpy())
        v = (g["tof_se_per_h"].to_numpy() / g["tof_per_h"].to_numpy()) ** 2 + tau2
        fit = sm.WLS(y, sm.add_constant(x), weights=1 / v).fit(cov_type="fixed scale", cov_kwds={"scale": 1.0})
        assert row["fit_slope_k"] == pytest.approx(fit.params[1], rel=1e-9)
        assert row["ea_se"] == pytest.approx(fit.bse[1] * R / 1000, rel=1e-8)
        q = stats.t.ppf(0.975, df_pool)
        assert row["ea_ci_high"] - row["ea_kj_mol"] == pytest.approx(q * fit.bse[1] * R / 1000, rel=1e-8)
        assert row["fit_df"] == df_pool
        checked += 1
    assert checked > 20
    fl = ";".join(got["flags"])
    for code in ("one_temperature", "two_temperatures", "unweighted", "no_activity", "low_ea"):
        assert code in fl, code


def test_batch_matches_statsmodels_wls_for_many_series():
    # statsmodels WLS per series (reference library): params, covariance with scale max(1, chi2/df),
    # and the curvature t-test of the x^2 term (unscaled WLS, the series' own residual scale)
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
