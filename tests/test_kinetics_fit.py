"""Batched fits against NIST StRD certified values and reference libraries (scipy, statsmodels)."""
from __future__ import annotations

import time
import warnings

import numpy as np
import pytest
import statsmodels.api as sm  # a declared test dependency (pyproject [test])
from scipy import optimize, stats

from screenlab.kinetics import fit, models

# NIST/ITL StRD "Norris" (linear, lower difficulty), certified values,
# https://www.itl.nist.gov/div898/strd/lls/data/Norris.shtml
NORRIS_X = [0.2, 337.4, 118.2, 884.6, 10.1, 226.5, 666.3, 996.3, 448.6, 777.0, 558.2, 0.4, 0.6, 775.5, 666.9,
            338.0, 447.5, 11.6, 556.0, 228.1, 995.8, 887.6, 120.2, 0.3, 0.3, 556.8, 339.1, 887.2, 999.0, 779.0,
            11.1, 118.3, 229.2, 669.1, 448.9, 0.5]
NORRIS_Y = [0.1, 338.8, 118.1, 888.0, 9.2, 228.1, 668.5, 998.5, 449.1, 778.9, 559.2, 0.3, 0.1, 778.1, 668.8,
            339.3, 448.9, 10.8, 557.7, 228.3, 998.0, 888.8, 119.6, 0.3, 0.6, 557.6, 339.3, 888.0, 998.5, 778.9,
            10.2, 117.6, 228.9, 668.4, 449.2, 0.2]

# NIST StRD Misra1a (nonlinear, lower difficulty), https://www.itl.nist.gov/div898/strd/nls/data/misra1a.shtml
MISRA_Y = [10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40, 75.47, 81.78]
MISRA_X = [77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1, 689.1, 760.0]
MISRA_CERT = dict(b1=2.3894212918e02, b1_se=2.7070075241e00, k=5.5015643181e-04, k_se=7.2668688436e-06,
                  rss=1.2455138894e-01, resid_sd=1.0187876330e-01)
MISRA_STARTS = [(500.0, 1e-4), (250.0, 5e-4)]
# NIST StRD BoxBOD (nonlinear, higher difficulty; Box, Hunter & Hunter 1978)
BOX_X = [1, 2, 3, 5, 7, 10]
BOX_Y = [109, 149, 149, 191, 213, 224]
BOX_CERT = dict(b1=2.1380940889e02, b1_se=1.2354515176e01, k=5.4723748542e-01, k_se=1.0455993237e-01,
                rss=1.1680088766e03, resid_sd=1.7088072423e01)
BOX_STARTS = [(1.0, 1.0), (100.0, 0.75)]


def test_norris_certified_values():
    # NIST StRD Norris certificate; tolerance rel 1e-9 as check-values.md section 1a suggests
    r = fit.fit_lines(NORRIS_X, NORRIS_Y, np.zeros(36, dtype=int))
    assert r.n[0] == 36 and r.df[0] == 34
    assert r.intercept[0] == pytest.approx(-0.262323073774029, rel=1e-9)
    assert r.intercept_se[0] == pytest.approx(0.232818234301152, rel=1e-9)
    assert r.slope[0] == pytest.approx(1.00211681802045, rel=1e-9)
    assert r.slope_se[0] == pytest.approx(0.429796848199937e-03, rel=1e-9)
    assert r.resid_sd[0] == pytest.approx(0.884796396144373, rel=1e-9)
    assert r.rss[0] == pytest.approx(26.6173985294224, rel=1e-9)
    # not certified by NIST; GSL's test suite value "computed from octave"
    assert r.cov_slope_intercept[0] == pytest.approx(-7.74327536339570e-05, rel=1e-7)


def test_lines_match_linregress_and_statsmodels_on_many_ragged_groups():
    # reference libraries: scipy.stats.linregress and statsmodels OLS, group by group
    rng = np.random.default_rng(7)
    sizes = rng.integers(3, 12, size=40)
    g = np.repeat(np.arange(40), sizes)
    perm = rng.permutation(g.size)                  # groups need not be contiguous
    x = rng.uniform(0, 10, g.size)
    y = 2.0 + 0.7 * x + rng.normal(0, 0.5, g.size)
    r = fit.fit_lines(x[perm], y[perm], g[perm])
    for i in (0, 5, 17, 39):
        m = g == i
        ref = stats.linregress(x[m], y[m])
        assert r.slope[i] == pytest.approx(ref.slope, rel=1e-10)
        assert r.intercept[i] == pytest.approx(ref.intercept, rel=1e-10, abs=1e-12)
        assert r.slope_se[i] == pytest.approx(ref.stderr, rel=1e-10)
        assert r.intercept_se[i] == pytest.approx(ref.intercept_stderr, rel=1e-10)
        ols = sm.OLS(y[m], sm.add_constant(x[m])).fit()
        assert r.cov_slope_intercept[i] == pytest.approx(ols.cov_params()[0, 1], rel=1e-9)
        assert r.resid_sd[i] == pytest.approx(np.sqrt(ols.scale), rel=1e-10)


def test_lines_degenerate_groups_give_nan_not_errors():
    x = np.array([1.0, 1.0, 1.0, 0.0, 1.0])
    y = np.array([1.0, 2.0, 3.0, 0.0, 1.0])
    r = fit.fit_lines(x, y, np.array([0, 0, 0, 1, 1]), n_groups=3)
    assert np.isnan(r.slope[0])                     # no spread in x
    assert r.slope[1] == pytest.approx(1.0) and r.df[1] == 0 and np.isnan(r.slope_se[1])
    assert r.n[2] == 0 and np.isnan(r.slope[2])


def _check_certified(r, i, cert, rate):
    # tolerances from check-values.md 1b/1c: rel 1e-6 on parameters and RSS, rel 1e-4 on SEs
    assert r.status[i] == fit.OK
    assert r.b1[i] == pytest.approx(cert["b1"], rel=1e-6)
    assert r.k[i] == pytest.approx(cert["k"], rel=1e-6)
    assert r.rss[i] == pytest.approx(cert["rss"], rel=1e-6)
    assert r.b1_se[i] == pytest.approx(cert["b1_se"], rel=1e-4)
    assert r.k_se[i] == pytest.approx(cert["k_se"], rel=1e-4)
    assert r.resid_sd[i] == pytest.approx(cert["resid_sd"], rel=1e-6)
    # initial slope b1*b2 (check-values.md, COMPUTED from the certified values)
    assert r.rate[i] == pytest.approx(rate, rel=1e-6)


@pytest.mark.parametrize("start", range(2))
def test_misra1a_and_boxbod_certified_from_both_starts(start):
    # NIST StRD Misra1a and BoxBOD certificates; both fitted in one batched call
    t = np.r_[MISRA_X, BOX_X].astype(float)
    y = np.r_[MISRA_Y, BOX_Y].astype(float)
    g = np.r_[np.zeros(14, int), np.ones(6, int)]
    k0 = np.array([MISRA_STARTS[start][1], BOX_STARTS[start][1]])
    r = fit.fit_first_order(t, y, g, k_start=k0)
    _check_certified(r, 0, MISRA_CERT, 0.13145554919875)
    _check_certified(r, 1, BOX_CERT, 117.00452328)


def test_boxbod_naive_start_fails_in_curve_fit_but_not_here():
    # reference library: scipy.optimize.curve_fit from NIST start 1 (b1=1, b2=1) goes astray
    # (check-values.md 1c: b1=172.5, b2=110.9, RSS 9771.5); from start 2 it finds the certified point.
    x, y = np.array(BOX_X, float), np.array(BOX_Y, float)
    bad, _ = optimize.curve_fit(models.first_order, x, y, p0=BOX_STARTS[0], maxfev=20000)
    good, pcov = optimize.curve_fit(models.first_order, x, y, p0=BOX_STARTS[1], xtol=1e-15, ftol=1e-15)
    assert np.sum((y - models.first_order(x, *bad)) ** 2) > 5 * BOX_CERT["rss"]
    r = fit.fit_first_order(x, y, np.zeros(6, int), k_start=np.array([1.0]))
    assert r.b1[0] == pytest.approx(good[0], rel=1e-6) and r.k[0] == pytest.approx(good[1], rel=1e-6)
    assert r.k_se[0] == pytest.approx(np.sqrt(pcov[1, 1]), rel=1e-4)
    # covariance of (b1, k): our Jacobian formula vs curve_fit's
    assert r.cov_b1_k[0] == pytest.approx(pcov[0, 1], rel=1e-4)


def test_misra1a_matches_curve_fit_rate_se_by_delta_method():
    x, y = np.array(MISRA_X), np.array(MISRA_Y)
    p, pcov = optimize.curve_fit(models.first_order, x, y, p0=MISRA_STARTS[1], xtol=1e-15, ftol=1e-15)
    grad = np.array([p[1], p[0]])
    r = fit.fit_first_order(x, y, np.zeros(14, int))
    assert r.rate_se[0] == pytest.approx(np.sqrt(grad @ pcov @ grad), rel=1e-4)


def test_fixed_plateau_one_parameter_matches_curve_fit():
    rng = np.random.default_rng(3)
    t = np.array([0, 0.5, 1, 2, 4, 8.0])
    y = 80.0 * (1 - np.exp(-0.4 * t)) + rng.normal(0, 1.0, t.size)
    ref, pcov = optimize.curve_fit(lambda tt, k: models.first_order(tt, 80.0, k), t, y, p0=[0.3],
                                   xtol=1e-15, ftol=1e-15)
    r = fit.fit_first_order(t, y, np.zeros(t.size, int), plateau=np.array([80.0]))
    assert r.fixed[0] and r.n_params[0] == 1 and r.df[0] == 5 and r.status[0] == fit.OK
    assert r.k[0] == pytest.approx(ref[0], rel=1e-7)
    assert r.k_se[0] == pytest.approx(np.sqrt(pcov[0, 0]), rel=1e-4)
    assert r.rate[0] == pytest.approx(80.0 * ref[0], rel=1e-7)


def test_doubtful_fits_are_flagged_not_reported():
    t = np.array([0, 1, 2, 3, 4.0])
    lines = 2.0 * t                                      # straight: k runs to the lower end
    accel = 0.3 * t ** 2                                 # accelerating: no saturating fit exists
    done = np.array([0, 50, 50, 50, 50.0])               # complete by the first reading
    y = np.r_[lines, accel, done, [1.0, 2.0]]
    tt = np.r_[t, t, t, [1.0, 2.0]]
    g = np.repeat([0, 1, 2, 3], [5, 5, 5, 2])
    r = fit.fit_first_order(tt, y, g)
    assert r.status[0] == fit.K_LOW and np.isnan(r.rate_se[0])
    assert r.status[1] == fit.K_LOW
    assert r.status[2] == fit.K_HIGH and np.isnan(r.b1_se[2])
    assert r.status[3] == fit.TOO_FEW and np.isnan(r.rate[3])
    assert set(fit.FIT_STATUS) == set(range(6))


def test_recovers_parameters_within_se_over_many_wells():
    # synthetic first-order wells with noise (invented data): |estimate - truth| / SE ~ N(0, 1)
    rng = np.random.default_rng(11)
    G = 3000
    t = np.tile([0, 0.25, 0.5, 1, 2, 4, 8, 16.0], G)
    g = np.repeat(np.arange(G), 8)
    b1 = rng.uniform(20, 100, G)
    k = 10 ** rng.uniform(-1.3, 0.3, G)
    y = models.first_order(t, b1[g], k[g]) + rng.normal(0, 0.5, t.size)
    r = fit.fit_first_order(t, y, g)
    ok = r.ok
    assert ok.mean() > 0.99
    z = (r.rate[ok] - (b1 * k)[ok]) / r.rate_se[ok]
    tq = stats.t.ppf(0.975, 6)
    assert 0.93 < np.mean(np.abs(z) < tq) < 0.97        # coverage of the 95 % interval
    assert abs(np.median(z)) < 0.1


def test_speed_first_order_32500_wells(capsys):
    rng = np.random.default_rng(0)
    G = 32_500
    t = np.tile([0, 0.25, 0.5, 1, 2, 4, 8, 16.0], G)
    g = np.repeat(np.arange(G), 8)
    y = models.first_order(t, 50.0, 0.3) + rng.normal(0, 0.5, t.size)
    t0 = time.perf_counter()
    fit.fit_lines(t, y, g)
    t1 = time.perf_counter()
    r = fit.fit_first_order(t, y, g)
    t2 = time.perf_counter()
    with capsys.disabled():
        print(f"\n[speed] fit_lines {G} wells x 8: {t1 - t0:.3f} s; fit_first_order: {t2 - t1:.3f} s")
    assert r.ok.mean() > 0.99


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
