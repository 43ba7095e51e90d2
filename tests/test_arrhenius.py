"""Arrhenius / Eyring fits (screenlab.kinetics.arrhenius) against textbook data, CODATA and statsmodels;
the batched core (fit_temperature_batch, arrhenius_table) against statsmodels WLS, series by series."""
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import constants, stats

from screenlab.kinetics.arrhenius import (COLUMNS, LN_KB_OVER_H, UNCATALYSED, arrhenius_points, arrhenius_table,
                                          fit_temperature_batch, fit_temperature_series, plate_scatter, predict_tof)
from screenlab.kinetics.sites import has_flag
from screenlab.settings import AnalysisSettings

R = constants.R   # CODATA (exact since 2019 SI), via scipy.constants


def per_h(k_per_s):
    return np.asarray(k_per_s) * 3600.0


def test_openstax_hi_worked_example():
    # OpenStax Chemistry 2e section 12.5 worked example (2 HI -> H2 + I2); OLS in ln space gives
    # 185.31 kJ/mol (check-values.md 2a), which rounds to the book's 1.8e5 J/mol.
    T = np.array([555, 575, 645, 700, 781.0])
    k = np.array([3.52e-7, 1.22e-6, 8.59e-5, 1.16e-3, 3.95e-2])
    r = fit_temperature_series(T - 273.15, per_h(k))
    assert r["ea_kj_mol"] == pytest.approx(185.31, abs=0.01)
    # The book's 1.8e5 J/mol comes from a two-point slope with 1/T rounded to 3 figures; the OLS value
    # is within 3 % of it (strictly it rounds to 1.9e5 at 2 s.f., so we do not claim more than that).
    assert abs(r["ea_kj_mol"] * 1000 - 1.8e5) / 1.8e5 < 0.03
    assert r["ea_se"] == pytest.approx(2.18, abs=0.01)
    assert r["ln_a"] - np.log(3600) == pytest.approx(25.204, abs=0.001)   # A in s-1 = 8.83e10
    # the same through scipy.stats.linregress (reference library)
    lr = stats.linregress(1 / T, np.log(k))
    assert r["fit_slope_k"] == pytest.approx(lr.slope, rel=1e-10)
    assert r["ea_se"] == pytest.approx(lr.stderr * R / 1000, rel=1e-8)


def test_openstax_hi_exercise_and_ncert_n2o5_uses_273_15():
    # OpenStax 2e section 12.5 exercise (4 temperatures): OLS 179.98 kJ/mol (check-values.md 2b)
    T = np.array([555, 575, 645, 700.0])
    k = np.array([6.23e-7, 2.42e-6, 1.44e-4, 2.01e-3])
    assert fit_temperature_series(T - 273.15, per_h(k))["ea_kj_mol"] == pytest.approx(179.98, abs=0.05)
    # NCERT class XII N2O5 data: 100.73 kJ/mol with T = t + 273.15; 100.63 with 273 (check-values.md 2c)
    t_c = np.array([0, 20, 40, 60, 80.0])
    k2 = np.array([0.0787, 1.70, 25.7, 178, 2140]) * 1e-5
    r = fit_temperature_series(t_c, per_h(k2))
    assert r["ea_kj_mol"] == pytest.approx(100.73, abs=0.01)
    assert r["ea_se"] == pytest.approx(2.46, abs=0.01)
    assert abs(r["ea_kj_mol"] - 100.63) > 0.05          # would be 100.63 with 273


def test_eyring_constants_codata():
    # CODATA exact kB and h via scipy.constants; check-values.md section 3 (COMPUTED)
    assert np.exp(LN_KB_OVER_H) * 298.15 == pytest.approx(6.212437991620e12, rel=1e-12)
    # dG for k = 1 s-1 at 298.15 K: R T ln(kB T / h) = 73.0240614 kJ/mol. Through the fit: a series
    # k(T) = kB T/h exp(-dG/RT) with dS = 0 and dH = 73.0240614 kJ/mol has k(298.15 K) = 1 s-1.
    dg = 73.0240614e3
    T = np.array([288.15, 298.15, 308.15, 318.15])
    k = constants.k * T / constants.h * np.exp(-dg / (R * T))
    r = fit_temperature_series(T - 273.15, per_h(k), reference_temperature_c=25.0)
    assert r["dg_ref_kj_mol"] == pytest.approx(73.0240614, abs=1e-6)
    assert r["dh_kj_mol"] == pytest.approx(73.0240614, rel=1e-9) and abs(r["ds_j_mol_k"]) < 1e-7
    assert k[1] == pytest.approx(1.0, rel=1e-6)     # 73.0240614 is given to 1e-7 kJ/mol


def test_eyring_round_trip_check_values_section3():
    # check-values.md section 3: dH 80 kJ/mol, dS -50 J/mol/K at 298.15..328.15 K -> recovered to 1e-9;
    # Arrhenius Ea on the same k = 82.599; dG(298.15) = 94.9075 kJ/mol
    T = np.array([298.15, 308.15, 318.15, 328.15])
    k = constants.k * T / constants.h * np.exp(-50 / R) * np.exp(-80e3 / (R * T))
    np.testing.assert_allclose(k, [1.466180e-4, 4.318556e-4, 1.189708e-3, 3.084145e-3], rtol=1e-6)
    r = fit_temperature_series(T - 273.15, per_h(k), reference_temperature_c=25.0)
    assert r["dh_kj_mol"] == pytest.approx(80.0, rel=1e-9)
    assert r["ds_j_mol_k"] == pytest.approx(-50.0, rel=1e-9)
    assert r["dg_ref_kj_mol"] == pytest.approx(94.9075, abs=1e-4)
    assert r["ea_kj_mol"] == pytest.approx(82.599, abs=1e-3)
    assert r["ea_kj_mol"] - r["dh_kj_mol"] == pytest.approx(R * 1 / np.mean(1 / T) / 1000, abs=2e-3)


def test_doubling_per_10_degrees_rule_of_thumb():
    # 'rate doubles per 10 C near room temperature' ~ 53 kJ/mol (common practice; check-values.md 11: 52.949)
    r = fit_temperature_series(np.array([25.0, 35.0]), np.array([10.0, 20.0]))
    assert r["ea_kj_mol"] == pytest.approx(52.949, abs=1e-3)
    assert "two_temperatures" in r["flags"] and np.isnan(r["ea_se"]) and np.isnan(r["ea_ci_low"])
    assert "one_temperature" in fit_temperature_series(np.array([25.0]), np.array([10.0]))["flags"]


def _groups(cat, temps, tof, se, role="sample", standard=True, lo=None):
    tof = np.asarray(tof, float)
    se = np.asarray(se, float)
    q = stats.t.ppf(0.975, 3)
    return pd.DataFrame({"catalyst": cat, "role": role, "temperature_c": temps, "tof_per_h": tof,
                         "tof_se_per_h": se, "tof_ci_low": tof - q * se if lo is None else lo,
                         "tof_ci_high": tof + q * se, "is_standard": standard, "flags": ""})


def _blanks(temps, rates, se, n=3):
    return pd.DataFrame({"plate": [f"P{i}" for i in range(len(temps))], "temperature_c": temps,
                         "n_blanks": n, "blank_rate_mM_per_h": rates, "blank_se_mM_per_h": se,
                         "blank_lod_mM_per_h": 0.0, "flags": "", "blank_df": n - 1, "blank_detected": True})


def _dl_tau2(x, y, v):
    """DerSimonian-Laird moment estimate of the between-point variance of one weighted line,
    written out plainly (Thompson & Sharp, Stat. Med. 1999, 18, 2693): w = 1/v, Q the weighted
    RSS, tau^2 = max(0, (Q - (n - 2)) / (sum w - tr((X'WX)^-1 X'W^2X)))."""
    X = np.column_stack([np.ones_like(x), x])
    W = np.diag(1 / v)
    beta = np.linalg.solve(X.T @ W @ X, X.T @ W @ y)
    r = y - X @ beta
    q = r @ W @ r
    tr = np.trace(np.linalg.solve(X.T @ W @ X, X.T @ W @ W @ X))
    return max(0.0, (q - (len(x) - 2)) / (np.sum(1 / v) - tr))


def _interval_rule(x, y, v_rep, tau2, tau2_df, x_ref, rep_df=None):
    """The rule of the Arrhenius line's intervals in plain lines, on statsmodels WLS with weights
    1/(v_rep + tau^2): where chi^2/(n - 2) > 1 the covariance is scaled by it and t has n - 2 df
    (statsmodels' default WLS covariance); else the covariance is the weights' own (scale 1) and t
    has the Welch-Satterthwaite df (GUM, JCGM 100:2008, G.4) of the slope's variance and of the
    line's variance at x_ref, the smaller, each sum a_i^2 (v_rep_i + tau^2) with the WLS
    coefficients a = (X'WX)^-1 X'W, v_rep_i on rep_df_i df (exact where None) and tau^2 on tau2_df.
    Returns (params, covariance, df)."""
    X = sm.add_constant(x)
    v = v_rep + tau2
    fit = sm.WLS(y, X, weights=1 / v).fit()
    if fit.scale > 1:
        return fit.params, fit.cov_params(), len(x) - 2.0
    W = np.diag(1 / v)
    A = np.linalg.solve(X.T @ W @ X, X.T @ W)
    rdf = np.full(len(x), np.inf) if rep_df is None else np.asarray(rep_df, float)

    def nu(a):
        tau_part = np.sum(a ** 2 * tau2) ** 2 / tau2_df if np.isfinite(tau2_df) else 0.0
        den = np.sum((a ** 2 * v_rep) ** 2 / rdf) + tau_part
        return np.sum(a ** 2 * v) ** 2 / den if den > 0 else np.inf

    return fit.params, fit.cov_params(scale=1.0), min(nu(A[1]), nu(np.array([1.0, x_ref]) @ A))


def test_weighted_fit_matches_statsmodels_wls_with_the_plate_scatter_added():
    temps = np.array([30.0, 40.0, 50.0, 60.0, 70.0])
    tof = np.array([12.0, 30.0, 60.0, 150.0, 290.0])
    se = np.array([0.3, 0.9, 1.5, 4.0, 9.0])            # replicate SEs of 2.5-3 %: the points scatter more
    s = AnalysisSettings(reference_temperature_c=55.0)
    arr = arrhenius_table(_groups("C1", temps, tof, se), _blanks(temps, [0.1, 0.2, 0.4, 0.9, 1.6], 0.01), s)
    row = arr[arr.catalyst == "C1"].iloc[0]
    x = 1 / (temps + 273.15)
    v = (se / tof) ** 2
    tau2 = _dl_tau2(x, np.log(tof), v)
    assert tau2 > 0 and row.plate_scatter_ln == pytest.approx(np.sqrt(tau2), rel=1e-9)
    assert arr.attrs["plate_scatter_ln"] == pytest.approx(np.sqrt(tau2), rel=1e-9)
    # statsmodels reference: WLS with weights 1 / (v + tau^2) and the error scale known (1), t on the
    # pooled df of the tau^2 estimate (n - 2 = 3 here)
    X = sm.add_constant(x)
    fit = sm.WLS(np.log(tof), X, weights=1 / (v + tau2)).fit(cov_type="fixed scale", cov_kwds={"scale": 1.0},
                                                              use_t=True, df_correction=True)
    assert row.fit_intercept == pytest.approx(fit.params[0], rel=1e-10)
    assert row.fit_slope_k == pytest.approx(fit.params[1], rel=1e-10)
    assert row.ea_se == pytest.approx(fit.bse[1] * R / 1000, rel=1e-8)
    # t on the Welch-Satterthwaite df (GUM, JCGM 100:2008, G.4) of the slope's variance and of the
    # line's variance at the reference temperature, the smaller: each is sum a_i^2 (v_i + tau^2)
    # with the WLS coefficients a = (X'WX)^-1 X'W; v_i is exact here (no tof_df), tau^2 rests on 3 df
    Wd = np.diag(1 / (v + tau2))
    A = np.linalg.solve(X.T @ Wd @ X, X.T @ Wd)
    nu = lambda a: np.sum(a ** 2 * (v + tau2)) ** 2 / (np.sum(a ** 2 * tau2) ** 2 / 3)  # noqa: E731
    df = min(nu(A[1]), nu(np.array([1.0, 1 / (55 + 273.15)]) @ A))
    assert df > 3                                       # the replicate parts count as exact
    q = stats.t.ppf(0.975, df)
    assert row.ea_ci_high - row.ea_kj_mol == pytest.approx(q * fit.bse[1] * R / 1000, rel=1e-8)
    assert row.fit_df == pytest.approx(df, rel=1e-9) and row.fit_weighted
    # chi^2 / df of the line with those weights: statsmodels' scale of the plain WLS fit
    assert row.chi2_per_df == pytest.approx(sm.WLS(np.log(tof), X, weights=1 / (v + tau2)).fit().scale, rel=1e-8)
    ln_ref = fit.params[0] + fit.params[1] / (55 + 273.15)
    se_ref = np.sqrt(np.array([1.0, 1 / (55 + 273.15)]) @ fit.cov_params() @ np.array([1.0, 1 / (55 + 273.15)]))
    assert row.tof_ref_per_h == pytest.approx(np.exp(ln_ref), rel=1e-9)
    assert row.tof_ref_ci_low == pytest.approx(np.exp(ln_ref - q * se_ref), rel=1e-9)
    p = predict_tof(arr, [55.0, 80.0], 0.95)
    assert len(p) == 2 * len(arr)
    c1 = p[p.catalyst == "C1"].set_index("temperature_c")
    assert c1.loc[55.0, "tof_ci_high"] == pytest.approx(np.exp(ln_ref + q * se_ref), rel=1e-9)
    x80 = np.array([1.0, 1 / (80 + 273.15)])
    assert c1.loc[80.0, "tof_per_h"] == pytest.approx(np.exp(x80 @ fit.params), rel=1e-9)
    assert c1.loc[80.0, "ln_tof_se"] == pytest.approx(np.sqrt(x80 @ fit.cov_params() @ x80), rel=1e-8)
    # curvature: p-value of the 1/T^2 term, statsmodels WLS with the same weights
    fit2 = sm.WLS(np.log(tof), np.column_stack([np.ones(5), x, x ** 2]), weights=1 / (v + tau2)).fit()
    assert row.curvature_p == pytest.approx(fit2.pvalues[2], rel=1e-5)


def test_plate_scatter_recovers_a_known_between_plate_variance():
    # 400 invented catalysts at 4 temperatures, replicate SE 4 % and an extra plate scatter of 6 %
    # per point: the moment estimator is unbiased for tau^2 (DerSimonian & Laird 1986), so its
    # estimate lands within a few percent of 0.06^2 on this many series
    rng = np.random.default_rng(11)
    temps = np.array([40.0, 50.0, 60.0, 70.0])
    n = 400
    ea = rng.normal(65e3, 10e3, n)
    true = np.exp(25.0 - ea[:, None] / (R * (temps + 273.15)))
    tof = true * np.exp(rng.normal(0, 0.04, true.shape) + rng.normal(0, 0.06, true.shape))
    codes = np.repeat(np.arange(n), 4)
    tau2, df = plate_scatter(codes, n, np.tile(temps, n), tof.ravel(), 0.04 * tof.ravel())
    assert df == n * 2
    assert np.sqrt(tau2) == pytest.approx(0.06, rel=0.08)
    # one series alone: the same number as the plain-lines estimator above
    one, _ = plate_scatter(np.zeros(4, int), 1, temps, tof[0], 0.04 * tof[0])
    assert one == pytest.approx(_dl_tau2(1 / (temps + 273.15), np.log(tof[0]), np.full(4, 0.04 ** 2)), rel=1e-9)
    # and no scatter beyond the replicates: tau^2 = 0, never negative
    clean = true * np.exp(rng.normal(0, 0.01, true.shape))
    assert plate_scatter(codes, n, np.tile(temps, n), clean.ravel(), 0.04 * clean.ravel())[0] == 0.0


def test_plate_scatter_makes_ea_intervals_hold_where_replicates_alone_do_not():
    # the situation the variance component is for: replicates agree within 3 %, the blocks scatter
    # by 8 %; with the replicates' SE alone the interval is too narrow (coverage far below 95 %)
    rng = np.random.default_rng(12)
    temps = np.array([40.0, 50.0, 60.0, 70.0])
    n = 300
    true = np.exp(26.0 - 70e3 / (R * (temps + 273.15)))
    tof = true * np.exp(rng.normal(0, 0.03, (n, 4)) + rng.normal(0, 0.08, (n, 4)))
    g = pd.concat([_groups(f"C{i}", temps, tof[i], 0.03 * tof[i]) for i in range(n)], ignore_index=True)
    arr = arrhenius_table(g, _blanks(temps, [0.1, 0.2, 0.4, 0.9], 0.01), AnalysisSettings())
    cat = arr[arr.catalyst != UNCATALYSED]
    cover = np.mean((cat.ea_ci_low <= 70.0) & (70.0 <= cat.ea_ci_high))
    assert 0.92 <= cover <= 0.98
    # the replicates' SE alone, taken as exact and never rescaled: far too narrow
    X = sm.add_constant(1 / (temps + 273.15))
    naive_cover = np.mean([abs(-(f := sm.WLS(np.log(tof[i]), X, weights=1 / 0.03 ** 2).fit(
        cov_type="fixed scale", cov_kwds={"scale": 1.0})).params[1] * R / 1000 - 70.0) <= 1.96 * f.bse[1] * R / 1000
        for i in range(n)])
    assert naive_cover < 0.6
    # without the campaign's plate scatter, the series' own chi^2 (Birge ratio) still rescues most
    alone = [fit_temperature_series(temps, tof[i], 0.03 * tof[i], tau2=0.0, tau2_df=np.inf) for i in range(n)]
    assert np.mean([(r["ea_ci_low"] <= 70.0 <= r["ea_ci_high"]) for r in alone]) > 0.85


def test_weighted_fit_never_claims_less_scatter_than_the_replicates():
    # Points lying almost exactly on a line: no plate scatter is found (tau^2 = 0) and the covariance
    # is the replicate SEs' own, statsmodels WLS cov_params(scale=1), not the spuriously tiny scaled one
    temps = np.array([50.0, 60.0, 70.0])
    x = 1 / (temps + 273.15)
    tof = 1e12 * np.exp(-80e3 / (R * (temps + 273.15))) * np.array([1.0, 1.0001, 1.0])
    se = 0.1 * tof
    arr = arrhenius_table(_groups("C1", temps, tof, se), _blanks(temps, [0.1, 0.2, 0.4], 0.01), AnalysisSettings())
    row = arr[arr.catalyst == "C1"].iloc[0]
    fit = sm.WLS(np.log(tof), sm.add_constant(x), weights=1 / (se / tof) ** 2).fit()
    assert fit.scale < 1e-3                                   # the line passes through the points
    assert row.plate_scatter_ln == 0.0
    assert row.ea_se == pytest.approx(np.sqrt(fit.cov_params(scale=1.0)[1, 1]) * R / 1000, rel=1e-8)
    assert row.ea_se > 100 * fit.bse[1] * R / 1000


def test_uncatalysed_row_delta_ea_left_out_points_and_low_ea():
    temps = np.array([40.0, 50.0, 60.0, 70.0])
    x = 1 / (temps + 273.15)
    blank = 1e10 * np.exp(-90e3 / (R * (temps + 273.15)))
    cat = 1e8 * np.exp(-50e3 / (R * (temps + 273.15))) * np.array([1.02, 0.97, 1.01, 1.0])
    low = 5.0 * np.exp(-10e3 / (R * (temps + 273.15)))
    g = pd.concat([
        _groups("C1", temps, cat, cat * 0.05),
        _groups("DEAD", temps, [1.0, 2.0, 3.0, 4.0], [2.0, 2.0, 2.0, 0.1]),   # CI reaches 0 at 3 temps
        _groups("LOW", temps, low, low * 0.02),
        _groups("C1", temps, cat * 3, cat * 0.05, standard=False),              # a loading series: ignored
    ], ignore_index=True)
    bl = _blanks(temps, blank, blank * 0.03)
    bl.loc[0, "blank_detected"] = False                                          # 40 C: below its LOD
    arr = arrhenius_table(g, bl, AnalysisSettings())
    a = arr.set_index("catalyst")
    assert list(arr.catalyst) == ["C1", "DEAD", "LOW", UNCATALYSED]
    # the uncatalysed row: fitted on the temperatures it really has, and says which it left out
    assert a.loc[UNCATALYSED, "ea_kj_mol"] == pytest.approx(90.0, rel=1e-9)
    assert a.loc[UNCATALYSED, "n_temperatures"] == 3 and a.loc[UNCATALYSED, "t_min_c"] == 50.0
    assert "no_activity" not in a.loc[UNCATALYSED, "flags"]
    assert a.loc[UNCATALYSED, "left_out"] == "40 C: blank below its detection limit"
    assert a.loc["C1", "ea_kj_mol"] == pytest.approx(50.0, abs=3)
    d = a.loc["C1", "delta_ea_kj_mol"]
    assert d == pytest.approx(a.loc[UNCATALYSED, "ea_kj_mol"] - a.loc["C1", "ea_kj_mol"])
    se_c, se_b = a.loc["C1", "ea_se"], a.loc[UNCATALYSED, "ea_se"]
    assert se_b > 0                      # the blanks' replicate SEs although the line is exact
    # Welch-Satterthwaite df for the difference of two independent estimates (Welch, Biometrika 1947)
    df_b, df_c = a.loc[UNCATALYSED, "fit_df"], a.loc["C1", "fit_df"]
    tau2 = a.loc["C1", "plate_scatter_ln"] ** 2
    assert tau2 == 0 and np.isposinf(df_c)   # no plate scatter found, C1's SEs exact (no tof_df given)
    xb = x[1:]
    _, _, df_rule = _interval_rule(xb, np.log(blank[1:]), np.full(3, 0.03 ** 2), 0.0, 4.0, 1 / (60 + 273.15),
                                   rep_df=np.full(3, 2.0))                 # the blanks' n - 1 = 2 df each
    assert df_b == pytest.approx(df_rule, rel=1e-9) and 2 < df_b < 6
    df = (se_b ** 2 + se_c ** 2) ** 2 / (se_b ** 4 / df_b + se_c ** 4 / df_c)
    half = stats.t.ppf(0.975, df) * np.hypot(se_b, se_c)
    assert a.loc["C1", "delta_ea_ci_high"] - d == pytest.approx(half, rel=1e-6)
    assert "no_activity" in a.loc["DEAD", "flags"] and "one_temperature" in a.loc["DEAD", "flags"]
    assert a.loc["DEAD", "left_out"].count("not above the blank") == 3
    assert np.isnan(a.loc["DEAD", "ea_kj_mol"])
    assert "low_ea" in a.loc["LOW", "flags"] and "low_ea" not in a.loc["C1", "flags"]
    assert a.loc["C1", "n_temperatures"] == 4 and a.loc["C1", "t_min_c"] == 40.0
    ols = stats.linregress(x[1:], np.log(blank[1:]))
    assert a.loc[UNCATALYSED, "fit_slope_k"] == pytest.approx(ols.slope, rel=1e-9)


def test_bounds_and_irregular_courses_stay_out_of_the_fit():
    temps = np.array([40.0, 50.0, 60.0, 70.0])
    tof = 1e9 * np.exp(-60e3 / (R * (temps + 273.15)))
    g = _groups("C1", temps, tof, 0.05 * tof)
    g["censored"] = ["", "", "", "lower"]                       # too fast at 70 C: a bound
    g.loc[0, "flags"] = "induction"                             # an irregular course at 40 C
    arr = arrhenius_table(g, _blanks(temps, [0.1, 0.2, 0.4, 0.9], 0.01), AnalysisSettings())
    row = arr.set_index("catalyst").loc["C1"]
    assert row.n_temperatures == 2 and (row.t_min_c, row.t_max_c) == (50.0, 60.0)
    assert "left_out_bound" in row["flags"] and "left_out_irregular" in row["flags"]
    assert row.left_out == "40 C: induction; 70 C: faster than the first reading (lower bound)"
    # unless the user says otherwise
    arr2 = arrhenius_table(g, _blanks(temps, [0.1, 0.2, 0.4, 0.9], 0.01),
                           AnalysisSettings(include_irregular_courses=True))
    assert arr2.set_index("catalyst").loc["C1", "n_temperatures"] == 3
    in_fit, why = arrhenius_points(g, AnalysisSettings())
    assert in_fit.tolist() == [False, True, True, False] and why[0] == "induction"


def test_curvature_flag_on_a_curved_plot():
    temps = np.array([20.0, 40.0, 60.0, 80.0, 100.0, 120.0])
    x = 1 / (temps + 273.15)
    y = 30 - 8000 * x - 4e6 * (x - x.mean()) ** 2 * 10   # strongly curved
    r = fit_temperature_series(temps, np.exp(y + np.array([0.01, -0.01, 0.0, 0.01, -0.01, 0.0])))
    assert r["curvature_p"] < 0.05 and "curvature" in r["flags"]
    straight = fit_temperature_series(temps, np.exp(30 - 8000 * x + np.array([0.01, -0.01, 0.0, 0.01, -0.01, 0.0])))
    assert straight["curvature_p"] > 0.05 and "curvature" not in straight["flags"]


@pytest.mark.slow
def test_seeded_arrhenius_recovers_ea_and_ci_covers():
    # 2000 synthetic catalysts, 5 temperatures, log-normal noise 8 %: Ea CI and TOF(ref) CI cover ~95 %
    rng = np.random.default_rng(7)
    temps = np.array([30.0, 45.0, 60.0, 75.0, 90.0])
    T = temps + 273.15
    ea, ln_a = 65e3, np.log(3e11)
    n = 2000
    noise = rng.normal(0, 0.08, (n, len(T)))
    tof = np.exp(ln_a - ea / (R * T) + noise)
    res = [fit_temperature_series(temps, tof[i], tof[i] * 0.08, reference_temperature_c=60.0) for i in range(n)]
    lo = np.array([r["ea_ci_low"] for r in res])
    hi = np.array([r["ea_ci_high"] for r in res])
    est = np.array([r["ea_kj_mol"] for r in res])
    cover = np.mean((lo <= 65.0) & (65.0 <= hi))
    # slightly above nominal by design: the covariance scale is floored at the replicate SEs
    # (max(1, chi2/df)); with exactly known SEs that rule covers ~96.5-97 % (simulated here)
    assert 0.94 <= cover <= 0.98
    assert abs(est.mean() - 65.0) < 0.3
    true_ref = np.exp(ln_a - ea / (R * 333.15))
    lo_r = np.array([r["tof_ref_ci_low"] for r in res])
    hi_r = np.array([r["tof_ref_ci_high"] for r in res])
    assert 0.94 <= np.mean((lo_r <= true_ref) & (true_ref <= hi_r)) <= 0.98


# ------------------------------------------------------------------------------- many series at once

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
        rep_df = rng.choice([1.0, 2.0, 5.0, np.inf], len(temps))          # the df each replicate SE rests on
        parts.append(pd.DataFrame({"catalyst": f"C{i:03d}", "role": "sample", "temperature_c": temps,
                                   "tof_per_h": tof, "tof_se_per_h": se, "tof_ci_low": lo, "tof_ci_high": tof + 2 * se,
                                   "tof_df": rep_df, "is_standard": True, "flags": flags}))
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
        v_rep = (g["tof_se_per_h"].to_numpy() / g["tof_per_h"].to_numpy()) ** 2
        params, cov, df = _interval_rule(x, y, v_rep, tau2, df_pool, 1 / (55 + 273.15), rep_df=g["tof_df"].to_numpy())
        assert row["fit_slope_k"] == pytest.approx(params[1], rel=1e-9)
        assert row["ea_se"] == pytest.approx(np.sqrt(cov[1, 1]) * R / 1000, rel=1e-8)
        q = stats.t.ppf(0.975, df)
        assert row["ea_ci_high"] - row["ea_kj_mol"] == pytest.approx(q * np.sqrt(cov[1, 1]) * R / 1000, rel=1e-8)
        assert row["fit_df"] == pytest.approx(df, rel=1e-9)
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


def test_uncatalysed_points_are_one_substrate_level_without_scaled_blanks():
    # the rule in plain lines (common practice, no source): a background rate belongs on the
    # uncatalysed Arrhenius line only at the campaign's main substrate level, measured there (a
    # level scaled from another is not a point of its own); a blank below its LOD is not fitted
    from screenlab.kinetics.arrhenius import uncatalysed_points

    blanks = pd.DataFrame({
        "plate": ["P40", "P50", "P60", "G60", "G60", "G60"],
        "temperature_c": [40.0, 50.0, 60.0, 60.0, 60.0, 60.0],
        "substrate_conc_mM": [200.0, 200.0, 200.0, 50.0, 200.0, 400.0],
        "n_blanks": [6, 6, 6, 6, 6, 6],
        "blank_rate_mM_per_h": [0.1, 0.5, 1.9, 0.49, 2.0, 3.9],
        "blank_se_mM_per_h": [0.07, 0.1, 0.08, 0.02, 0.07, 0.15],
        "blank_detected": [False, True, True, True, True, True],
        "flags": ["blank_below_lod", "", "", "blank_scaled", "", "blank_scaled"]})
    pts = uncatalysed_points(blanks)
    assert list(pts["plate"]) == ["P40", "P50", "P60", "G60"]
    assert list(pts["rate"]) == [0.1, 0.5, 1.9, 2.0] and list(pts["active"]) == [False, True, True, True]
    # a level measured (not scaled) but less used than the main one stays off the line as well
    other = blanks.assign(flags=["blank_below_lod", "", "", "", "", ""])
    assert set(uncatalysed_points(other)["rate"]) == {0.1, 0.5, 1.9, 2.0}


def test_uncatalysed_eyring_is_of_the_pseudo_first_order_constant():
    """The background's Eyring dS and dG are those of k = rate / [S] (s-1 from mM/h over mM), not of
    the rate in mM/h: blanks made exactly from transition-state theory, k = (kB T / h) exp(dS/R)
    exp(-dH/RT) with kB and h from scipy.constants (CODATA), at [S] = 200 mM, give back dH and dS."""
    temps = np.array([40.0, 50.0, 60.0, 70.0])
    T = temps + 273.15
    dh, ds = 95e3, -40.0
    k = constants.k * T / constants.h * np.exp(ds / R) * np.exp(-dh / (R * T))      # s-1
    rate = k * 3600 * 200.0                                                          # mM/h at 200 mM
    bl = _blanks(temps, rate, rate * 0.02).assign(substrate_conc_mM=200.0)
    s = AnalysisSettings(reference_temperature_c=60.0)
    row = arrhenius_table(_groups("C1", temps, 1e3 * rate, 1e3 * rate * 0.03), bl, s).set_index("catalyst").loc[
        UNCATALYSED]
    assert row["dh_kj_mol"] == pytest.approx(dh / 1000, rel=1e-9)
    assert row["ds_j_mol_k"] == pytest.approx(ds, abs=1e-6)
    assert row["dg_ref_kj_mol"] == pytest.approx((dh - (60 + 273.15) * ds) / 1000, rel=1e-9)
    assert "eyring_pseudo_first_order" in row["flags"]
    # the blank rate itself, mM/h (an Eyring law is not quite a straight line in ln r against 1/T)
    assert row["tof_ref_per_h"] == pytest.approx(rate[2], rel=1e-3)
    # two products per substrate (as k_per_h counts them): twice the rate from the same k
    row2 = arrhenius_table(_groups("C1", temps, 1e3 * rate, 1e3 * rate * 0.03), bl.assign(
        blank_rate_mM_per_h=2 * rate, blank_se_mM_per_h=2 * rate * 0.02), s, product_per_substrate=2.0).set_index(
        "catalyst").loc[UNCATALYSED]
    assert row2["ds_j_mol_k"] == pytest.approx(ds, abs=1e-6)
    # without a substrate level there is no rate constant: no dS or dG
    row = arrhenius_table(_groups("C1", temps, 1e3 * rate, 1e3 * rate * 0.03), _blanks(temps, rate, rate * 0.02),
                          s).set_index("catalyst").loc[UNCATALYSED]
    assert np.isnan(row["ds_j_mol_k"]) and np.isnan(row["dg_ref_kj_mol"]) and row["dh_kj_mol"] > 0
