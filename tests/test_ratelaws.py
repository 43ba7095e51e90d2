"""The integrated rate laws (screenlab.kinetics.ratelaws) against textbook forms, closed forms and
scipy's ODE solver, and their batched fits against scipy.optimize / numpy least squares."""
from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import integrate, optimize
from scipy.special import lambertw

from screenlab.kinetics import ratelaws as RL

T = np.array([0, 0.25, 0.5, 1, 2, 4, 8, 16.0])


def _ode(rate, t_eval, y0=0.0):
    """X(t) from dX/dt = rate(t, X) by scipy.integrate.solve_ivp (the outside reference)."""
    sol = integrate.solve_ivp(lambda t, x: [rate(t, x[0])], (0, t_eval.max()), [y0], t_eval=t_eval,
                              rtol=1e-11, atol=1e-13, method="LSODA")
    return sol.y[0]


# ----------------------------------------------------------------- the integrated forms themselves

def test_zero_and_first_order_follow_the_textbook_integrated_laws():
    # integrated rate laws (Atkins' Physical Chemistry, table of integrated rate laws; from memory):
    # zero order [A] = [A]0 - k t (half-life [A]0 / 2k); first order ln([A]0/[A]) = k t (half-life ln 2 / k)
    k = 0.3
    assert RL.predict("zero_order", k, np.nan, 1 / (2 * k)) == pytest.approx(0.5)
    assert RL.predict("zero_order", k, np.nan, 10.0) == 1.0                     # run out at t = 1/k
    assert RL.predict("first_order", k, np.nan, np.log(2) / k) == pytest.approx(0.5, rel=1e-12)
    x = RL.predict("first_order", k, np.nan, T)
    np.testing.assert_allclose(np.log(1 / (1 - x)), k * T, rtol=1e-12)


@pytest.mark.parametrize("K", [1e-3, 0.05, 0.5, 2.0, 50.0])
def test_saturation_course_equals_the_lambert_w_closed_form_and_the_ode(K):
    # integrated Michaelis-Menten: S = Km W((S0/Km) exp((S0 - V t)/Km)) (Schnell & Mendoza, J. Theor.
    # Biol. 1997, 187, 207; from memory), in units of S0: K = Km/S0, V/S0 = r0 (1 + K)
    r0 = 0.2
    v = r0 * (1 + K)
    x = RL.saturation_course(T, r0, K)
    arg = np.log(1 / K) + (1 - v * T) / K
    if arg.max() < 700:
        s = K * np.real(lambertw(np.exp(arg)))
        np.testing.assert_allclose(x, 1 - s, rtol=1e-10, atol=1e-12)
    ode = _ode(lambda t, X: v * (1 - X) / (K + 1 - X), T)
    np.testing.assert_allclose(x, ode, rtol=1e-7, atol=1e-9)
    # the initial slope is r0 = V S0 / (Km + S0) per S0
    h = 1e-7
    assert RL.saturation_course(h, r0, K) / h == pytest.approx(r0, rel=1e-5)


def test_saturation_limits_are_zero_and_first_order():
    r0 = 0.2
    np.testing.assert_allclose(RL.saturation_course(T, r0, 1e-6), np.minimum(r0 * T, 1.0), atol=2e-5)
    np.testing.assert_allclose(RL.saturation_course(T, r0, 1e5), -np.expm1(-r0 * T), rtol=1e-4)


def test_deactivating_and_induction_courses_equal_their_odes():
    k, kd, tau = 0.4, 0.3, 0.8
    np.testing.assert_allclose(RL.deactivating_course(T, k, kd),
                               _ode(lambda t, X: k * np.exp(-kd * t) * (1 - X), T), rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(RL.induction_course(T, k, tau),
                               _ode(lambda t, X: k * (1 - np.exp(-t / tau)) * (1 - X), T), rtol=1e-7, atol=1e-10)
    np.testing.assert_allclose(RL.deactivating_course(T, k, 0.0), -np.expm1(-k * T), rtol=1e-12)


def test_the_saturation_root_finder_lands_on_the_root():
    rng = np.random.default_rng(0)
    K = np.exp(rng.uniform(np.log(1e-3), np.log(1e3), 2000))
    tau = np.exp(rng.uniform(np.log(1e-4), np.log(1e3), 2000))
    u = RL.solve_saturation_u(K, tau)
    np.testing.assert_allclose(K * u + 1 - np.exp(-u), tau, rtol=1e-11, atol=1e-13)
    assert (u >= 0).all()


# ---------------------------------------------------------------------------------- the fitters

def _courses(y, capped=True):
    G = y.shape[0]
    return RL.dense_courses(np.tile(T, G), y.ravel(), np.repeat(np.arange(G), len(T)), G, np.full(G, capped))


def test_zero_order_fit_is_the_least_squares_minimum():
    rng = np.random.default_rng(1)
    r = np.exp(rng.uniform(np.log(0.02), np.log(0.5), 200))
    y = np.minimum(r[:, None] * T, 1.0) + 0.005 * rng.standard_normal((200, len(T)))
    f = RL.fit_zero_order(_courses(y))
    for i in range(0, 200, 10):                        # reference: a bounded scalar minimisation
        res = optimize.minimize_scalar(lambda q: np.sum((y[i] - np.minimum(q * T, 1.0)) ** 2),
                                       bounds=(1e-4, 5.0), method="bounded", options={"xatol": 1e-12})
        assert f.rss[i] <= res.fun * (1 + 1e-9) + 1e-15
        assert f.r0[i] == pytest.approx(res.x, rel=1e-5)


def test_early_polynomial_equals_ordinary_least_squares_through_the_origin():
    rng = np.random.default_rng(2)
    y = -np.expm1(-rng.uniform(0.05, 1.0, 50)[:, None] * T) + 0.004 * rng.standard_normal((50, len(T)))
    c = _courses(y)
    win = RL.early_window(c, 0.5, 3)
    f = RL.fit_early_polynomial(c, win)
    for i in range(50):                                # statsmodels OLS as the reference
        sel = win[i]
        X = np.column_stack([T[sel], T[sel] ** 2])
        ols = sm.OLS(y[i][sel], X).fit()
        assert f.r0[i] == pytest.approx(ols.params[0], rel=1e-8)
        assert f.r0_se[i] == pytest.approx(ols.bse[0], rel=1e-8)
        assert f.n_window[i] == sel.sum() >= 3


def test_two_parameter_fits_reach_curve_fit_minima():
    rng = np.random.default_rng(3)
    G = 60
    r0 = np.exp(rng.uniform(np.log(0.03), np.log(0.4), G))
    K = np.exp(rng.uniform(np.log(0.1), np.log(5.0), G))
    y = RL.saturation_course(T[None, :], r0[:, None], K[:, None]) + 0.004 * rng.standard_normal((G, len(T)))
    c = _courses(y)
    fits = RL.fit_all(c)
    sat = fits["saturation"]
    checked = 0
    for i in np.flatnonzero(sat.ok):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            popt, pcov = optimize.curve_fit(lambda t, a, b: RL.saturation_course(t, a, b), T, y[i],
                                            p0=[sat.p1[i], sat.p2[i]], bounds=([0, 1e-3], [np.inf, 1e3]),
                                            xtol=1e-14, ftol=1e-14)
        ref = np.sum((y[i] - RL.saturation_course(T, *popt)) ** 2)
        assert sat.rss[i] <= ref * (1 + 1e-5) + 1e-15
        if 1e-3 * 1.01 < popt[1] < 1e3 / 1.01:         # inside the searched range: same SE as curve_fit
            assert sat.r0_se[i] == pytest.approx(np.sqrt(pcov[0, 0]), rel=0.02)
        checked += 1
    assert checked > G * 0.7


def test_aicc_differences_match_statsmodels_aic_plus_the_small_sample_term():
    # zero order without a maximum is OLS through the origin (1 parameter); the early quadratic
    # over the whole course is OLS on [t, t^2] (2): statsmodels' AIC differences, plus Hurvich &
    # Tsai's 2p(p+1)/(n-p-1) term, are ours
    rng = np.random.default_rng(4)
    y = 0.3 * T + 0.01 * T ** 2 + 0.05 * rng.standard_normal(len(T))
    c = RL.dense_courses(T, y, np.zeros(len(T), int), 1, np.array([False]))
    z = RL.fit_zero_order(c)
    q = RL.fit_early_polynomial(c, c.w > 0)
    n = len(T)
    a1 = sm.OLS(y, T[:, None]).fit().aic + 2 * 1 * 2 / (n - 2)
    a2 = sm.OLS(y, np.column_stack([T, T ** 2])).fit().aic + 2 * 2 * 3 / (n - 3)
    floor = np.zeros(1)
    assert (q.aicc(floor) - z.aicc(floor))[0] == pytest.approx(a2 - a1, rel=1e-9)
