"""The t quantile and the Welch-Satterthwaite df (screenlab.uncertainty) against scipy.stats and the formula."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from screenlab.kinetics import orders, selectivity, turnover
from screenlab.uncertainty import norm_ppf, quantiles, t_ppf, t_quantile, welch_df


def test_one_t_quantile_and_one_welch_rule_against_scipy_stats():
    rng = np.random.default_rng(0)
    df = np.concatenate([rng.uniform(0.5, 60, 300), rng.integers(1, 8, 300).astype(float),
                         [np.inf, -np.inf, 0.0, -1.0, np.nan, 2.0, 2.0]])
    # scipy.stats as the reference: t.ppf for finite df > 0, norm.ppf for infinite df, else NaN
    ref = np.where(np.isfinite(df) & (df > 0), stats.t.ppf(0.975, np.where(df > 0, df, 1.0)), np.nan)
    ref = np.where(np.isposinf(df), stats.norm.ppf(0.975), ref)
    np.testing.assert_allclose(t_quantile(0.95, df), ref, rtol=1e-12, equal_nan=True)
    # one rule in the tree: the kinetics modules use this function itself, not a copy
    assert turnover.t_quantile is t_quantile and selectivity.t_quantile is t_quantile
    assert orders.t_quantile is t_quantile
    # Welch-Satterthwaite, written out (Welch, Biometrika 1947): (va + vb)^2 / (va^2/da + vb^2/db)
    assert welch_df(2.0, 3, 1.0, 5) == pytest.approx(9.0 / (4.0 / 3 + 1.0 / 5))
    assert welch_df(2.0, 3, 0.0, 5) == pytest.approx(3.0) and welch_df(0.0, 3, 0.0, 5) == np.inf


def test_t_quantile_of_a_long_column_of_repeated_dfs_is_scipy_stats_elementwise():
    # the distinct-df shortcut must give each element what scipy.stats.t.ppf gives it
    rng = np.random.default_rng(3)
    df = np.concatenate([rng.integers(1, 6, 2000).astype(float), [np.inf, np.nan, 0.0] * 20]).reshape(-1, 2)
    ref = np.where(np.isfinite(df) & (df > 0), stats.t.ppf(0.95, np.where(df > 0, df, 1.0)), np.nan)
    ref = np.where(np.isposinf(df), stats.norm.ppf(0.95), ref)
    got = t_quantile(0.9, df)
    assert got.shape == df.shape
    np.testing.assert_allclose(got, ref, rtol=1e-12, equal_nan=True)


def test_a_long_column_of_distinct_dfs_is_scipy_stats_bit_for_bit(monkeypatch):
    # a column too long and too varied for the distinct-df shortcut (Welch dfs of every well) goes
    # through the two-thread split: each element still what scipy.stats.t.ppf gives it, in order
    from screenlab import _parallel, uncertainty

    monkeypatch.setattr(_parallel, "n_workers", lambda n: 2)
    rng = np.random.default_rng(5)
    df = rng.uniform(0.8, 80.0, uncertainty.SPLIT_MIN * 2 + 7)
    df[::97] = np.nan
    df[::101] = np.inf
    ref = np.where(np.isfinite(df), stats.t.ppf(0.975, np.where(np.isfinite(df), df, 1.0)), np.nan)
    ref = np.where(np.isposinf(df), stats.norm.ppf(0.975), ref)
    np.testing.assert_array_equal(t_quantile(0.95, df), ref)


# t_ppf / norm_ppf / quantiles: the numbers of scipy.stats.t.ppf and norm.ppf without loading
# scipy.stats (reference: scipy.stats itself, bit for bit, where the core calls them)
def test_t_and_normal_quantiles_equal_scipy_stats():
    q = np.array([0.5, 0.8, 0.9, 0.95, 0.975, 0.995, 0.99865, 1 - 1e-9])
    df = np.array([1.0, 1.5, 2.0, 3.0, 7.0, 30.0, 1e3, 1e7])
    qq, dd = np.meshgrid(q, df)
    np.testing.assert_array_equal(t_ppf(qq, dd), stats.t.ppf(qq, dd))
    np.testing.assert_array_equal(quantiles.t.ppf(qq, dd), stats.t.ppf(qq, dd))
    np.testing.assert_array_equal(norm_ppf(q), stats.norm.ppf(q))
    np.testing.assert_array_equal(quantiles.norm.ppf(q), stats.norm.ppf(q))
    # scalar in, scalar out, as the callers use it (the Shewhart limit: 3-sigma tail, df 5)
    assert float(t_ppf(1 - 0.0027 / 2, 5)) == float(stats.t.ppf(1 - 0.0027 / 2, 5))


def test_within_range_cuts_an_interval_at_the_range_but_keeps_the_estimate():
    # the rule written out per element (common practice, no source): cut at the ends, never short
    # of the estimate, which reading noise may put past an end
    from screenlab.uncertainty import within_range

    lo = np.array([-3.0, 95.0, 100.1, np.nan, -101.0])
    hi = np.array([4.0, 103.0, 100.5, np.nan, -99.0])
    est = np.array([0.5, 99.0, 100.3, np.nan, -100.2])
    got_lo, got_hi = within_range(lo, hi, est, -100.0, 100.0)
    want = [(max(a, min(-100.0, e)), min(b, max(100.0, e))) for a, b, e in zip(lo, hi, est)]
    np.testing.assert_array_equal(got_lo, [w[0] for w in want])
    np.testing.assert_array_equal(got_hi, [w[1] for w in want])
    assert got_lo[2] < est[2] == got_hi[2] and got_lo[4] == est[4] < got_hi[4]
