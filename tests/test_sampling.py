"""Draws and ranks (screenlab.stats.sampling): draw_matrix against scipy.stats' Student t / normal
distributions, the per-draw order and ranks against numpy's stable argsort of the negated scores
(ties in column order, signed zeros equal: the definition order_desc documents)."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from screenlab.stats import sampling as S


# ------------------------------------------------------------------------------------------- draw_matrix
def test_draw_matrix_variance_of_normal_and_t_columns():
    d = S.draw_matrix([0.0, 1.0], [1.0, 2.0], [np.inf, 5.0], 100_000, np.random.default_rng(0))
    # Student t(5) variance df/(df-2) = 5/3 (scipy.stats.t.var)
    assert d[:, 0].std() == pytest.approx(1.0, rel=0.02)
    assert d[:, 1].var() == pytest.approx(4 * stats.t.var(5), rel=0.03)


@pytest.mark.parametrize("df", [1.0, 2.0, 2.7, 6.0, 40.0, np.inf, 5e4])
def test_draw_matrix_columns_follow_student_t(df):
    # reference distribution: scipy.stats.t / scipy.stats.norm (Kolmogorov-Smirnov at 1e-3)
    d = S.draw_matrix([1.5, -2.0], [0.5, 2.0], [df, df], 40_000, np.random.default_rng(int(min(df, 99))))
    assert d.shape == (40_000, 2) and np.isfinite(d).all()
    ref = stats.norm if not np.isfinite(df) or df > S.NORMAL_DF else stats.t(df)
    for j, (m, s) in enumerate([(1.5, 0.5), (-2.0, 2.0)]):
        assert stats.kstest((d[:, j].astype(float) - m) / s, ref.cdf).pvalue > 1e-3


def test_draw_matrix_mixed_columns_and_tail_quantiles():
    df = np.array([np.inf, 3.0, np.nan, 0.0, 12.5])
    d = S.draw_matrix(np.zeros(5), np.ones(5), df, 200_000, np.random.default_rng(4)).astype(float)
    # 99.5 % points: scipy.stats.t.ppf / scipy.stats.norm.ppf; NaN or zero df is drawn as normal
    exp = [stats.norm.ppf(0.995), stats.t.ppf(0.995, 3), stats.norm.ppf(0.995), stats.norm.ppf(0.995),
           stats.t.ppf(0.995, 12.5)]
    np.testing.assert_allclose(np.quantile(d, 0.995, axis=0), exp, rtol=0.04)
    assert np.corrcoef(d[:, 0], d[:, 1])[0, 1] == pytest.approx(0.0, abs=0.01)   # columns independent


def test_draw_chunks_cover_the_draws_with_their_own_seeds():
    # the rule (common practice, no source): chunks of at most CHUNK_CELLS / (k x per_cell) draws
    # that add up to the draws, one child seed each, the same seeds for the same seed
    chunks = S.draw_chunks(1000, 300, 5, per_cell=2)
    assert sum(d for d, _ in chunks) == 1000
    assert all(d <= max(1, S.CHUNK_CELLS // 600) for d, _ in chunks)
    again = S.draw_chunks(1000, 300, 5, per_cell=2)
    assert [s.entropy for _, s in chunks] == [s.entropy for _, s in again]
    assert [s.spawn_key for _, s in chunks] == [s.spawn_key for _, s in again]
    assert len({s.spawn_key for _, s in chunks}) == len(chunks)


def test_order_stat_index_is_numpys_inverted_cdf():
    # numpy.quantile(method="inverted_cdf") on 0..n-1 (numpy documents the method)
    for n in (1, 2, 7, 1000):
        for q in (0.0, 0.025, 0.5, 0.975, 1.0):
            assert S.order_stat_index(n, q) == int(np.quantile(np.arange(n), q, method="inverted_cdf"))


# ------------------------------------------------------------------------------------------- orders and ranks
def _plain_ranks(order: np.ndarray) -> np.ndarray:
    """ranks[r, order[r, p]] = p + 1 (the inverse permutation of each row)."""
    ranks = np.empty_like(order)
    np.put_along_axis(ranks, order, np.arange(1, order.shape[1] + 1)[None].repeat(order.shape[0], 0), axis=1)
    return ranks


def test_rank_draws_small_example():
    score = np.array([[3.0, 1.0, 2.0], [0.0, 5.0, 4.0]])
    np.testing.assert_array_equal(S.rank_draws(score), [[1, 3, 2], [3, 1, 2]])


def test_order_desc_is_a_stable_argsort_of_the_negated_scores():
    rng = np.random.default_rng(11)
    score = rng.standard_t(2.0, (300, 257)).astype(np.float32) * 50
    score[:, 10:20] = score[:, [3]]                      # ties within rows
    score[::7, 30] = 0.0
    score[::7, 31] = -0.0                                 # signed zeros compare equal
    score[1, :] = np.float32(3.5)                         # a row of equal scores
    score[2, ::2] = -np.float32(np.finfo(np.float32).max)
    score[3, 5] = np.float32(np.finfo(np.float32).tiny) * -1
    score[3, 6] = np.float32(np.finfo(np.float32).tiny)
    expected = np.argsort(-score, axis=1, kind="stable")
    np.testing.assert_array_equal(S.order_desc(score), expected)
    np.testing.assert_array_equal(S.rank_draws(score), _plain_ranks(expected))
    np.testing.assert_array_equal(S.rank_draws(score.astype(np.float64)), _plain_ranks(expected))


@pytest.mark.parametrize("shape", [(1, 1), (1, 2), (3, 1), (5, 2), (7, 300)])
def test_order_and_ranks_small_shapes(shape):
    rng = np.random.default_rng(sum(shape))
    score = rng.integers(-2, 3, shape).astype(np.float32)      # many ties
    score[score == 0] = np.where(rng.random((score == 0).sum()) < 0.5, -0.0, 0.0)
    exp = np.argsort(-score, axis=1, kind="stable")
    np.testing.assert_array_equal(S.order_desc(score), exp)
    got = S.order_desc(score.copy(), overwrite=True)
    np.testing.assert_array_equal(got, exp)
    ranks = _plain_ranks(exp)
    np.testing.assert_array_equal(S.ranks_from_order(exp), ranks)
    np.testing.assert_array_equal(S.ranks_from_order(got.copy(), overwrite=True), ranks)
    np.testing.assert_array_equal(S.ranks_from_order(S.order_desc(score.copy(), True), True), ranks)


def test_order_desc_infinities():
    big = np.float32(np.finfo(np.float32).max)
    score = np.array([[np.inf, -np.inf, big, -big, 0.0, -0.0, np.inf, 1e-45, -1e-45]], np.float32)
    np.testing.assert_array_equal(S.order_desc(score), np.argsort(-score, axis=1, kind="stable"))


def test_desc_int32_orders_like_the_negated_floats():
    # ascending integers = descending floats (IEEE 754 floats of one sign order like their bits)
    rng = np.random.default_rng(2)
    x = np.concatenate([rng.standard_t(1.0, 500), [0.0, -0.0, np.inf, -np.inf, 1e-45, -1e-45]]).astype(np.float32)
    keys = S.desc_int32(x)
    np.testing.assert_array_equal(np.argsort(keys, kind="stable"), np.argsort(-x, kind="stable"))
    assert keys[x.size - 6] == keys[x.size - 5]           # signed zeros equal


@pytest.mark.parametrize("df", [3.0, 300.0, 3000.0, 9000.0])
def test_draw_matrix_t_is_baileys_formula_in_double_precision(df):
    # the same uniforms through T = cos(2 pi U2) sqrt(df (U1^(-2/df) - 1)) in float64 (Bailey 1994):
    # float32 draws agree to float32 precision at every df, the large ones included
    d, k = 2000, 3
    got = S.draw_matrix(np.zeros(k), np.ones(k), np.full(k, df), d, np.random.default_rng(11))
    rng = np.random.default_rng(11)
    u1 = 1.0 - rng.random((d, k), dtype=np.float32).astype(np.float64)
    u2 = rng.random((d, k), dtype=np.float32).astype(np.float64)
    ref = np.cos(2 * np.pi * u2) * np.sqrt(df * np.expm1(-2.0 / df * np.log(u1)))
    np.testing.assert_allclose(got, ref, atol=2e-5 * max(1.0, np.abs(ref).max()), rtol=2e-5)
