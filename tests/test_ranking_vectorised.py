"""The chunked ranking and Pareto paths against straightforward full-matrix reference implementations."""
from __future__ import annotations

import numpy as np
import pytest

import screenlab.stats.ranking as R

from ranking_refs import _plain_front_share


def _reference_summary(mu, sigma, df, draws, seed, top_k, confidence, reference):
    """Plain version: the full draws x k matrix (same chunk seeds, columns drawn in point-estimate
    order as rank_summary documents), one rank matrix, np.quantile."""
    perm = np.argsort(-mu, kind="stable")
    score_s = np.concatenate([R.draw_matrix(mu[perm], sigma[perm], df[perm], d, np.random.default_rng(ss))
                              for d, ss in R._chunks(draws, len(mu), seed)])
    score = np.empty_like(score_s)
    score[:, perm] = score_s
    ranks = R.rank_draws(score)
    a = (1 - confidence) / 2
    out = {"rank_low": np.quantile(ranks, a, axis=0, method="inverted_cdf"),
           "rank_high": np.quantile(ranks, 1 - a, axis=0, method="inverted_cdf"),
           "p_top": (ranks <= top_k).mean(axis=0), "p_best": (ranks == 1).mean(axis=0)}
    out["p_beats"] = (score > score[:, [reference]]).mean(axis=0) if reference is not None else np.nan
    return out


@pytest.mark.parametrize("window_cells", [R.WINDOW_CELLS, 40])   # 40 cells: most quantiles miss -> fallback
@pytest.mark.parametrize("case", range(4))
def test_rank_summary_matches_full_matrix(monkeypatch, case, window_cells):
    rng = np.random.default_rng(100 + case)
    k = [7, 40, 120, 300][case]
    mu = rng.normal(0, 1, k)
    mu[: k // 5] = mu[0]                                  # ties in the point estimates
    sigma = rng.uniform(0.05, 1.0, k)
    df = rng.uniform(1.5, 12, k)
    df[rng.random(k) < 0.3] = np.inf                      # some normal columns
    monkeypatch.setattr(R, "CHUNK_CELLS", 997)            # many small chunks
    monkeypatch.setattr(R, "WINDOW_CELLS", window_cells)
    monkeypatch.setattr(R, "BLOCK_CELLS", 64 if case % 2 else R.BLOCK_CELLS)   # many column blocks
    draws, top_k, conf, ref = 1500, 3, [0.95, 0.9, 0.8, 0.5][case], k // 2
    got = R.rank_summary(mu, sigma, df, draws, seed=case, top_k=top_k, confidence=conf, reference=ref)
    exp = _reference_summary(mu, sigma, df, draws, case, top_k, conf, ref)
    np.testing.assert_array_equal(got["rank_low"], exp["rank_low"])
    np.testing.assert_array_equal(got["rank_high"], exp["rank_high"])
    for c in ("p_top", "p_best", "p_beats"):
        np.testing.assert_allclose(got[c], exp[c], rtol=0, atol=1e-12)


def test_rank_summary_reproducible_and_bounded():
    mu, sig, df = np.linspace(0, 1, 50), np.full(50, 0.3), np.full(50, 4.0)
    a = R.rank_summary(mu, sig, df, 3000, seed=7)
    b = R.rank_summary(mu, sig, df, 3000, seed=7)
    for c in a:
        np.testing.assert_array_equal(a[c], b[c])
    assert a["p_best"].sum() == pytest.approx(1.0, abs=1e-12)
    assert (a["rank_low"] <= a["rank_high"]).all() and a["rank_low"].min() >= 1 and a["rank_high"].max() <= 50


@pytest.mark.parametrize("m", [2, 3, 4])
@pytest.mark.parametrize("case", range(3))
def test_front_share_matches_pairwise(monkeypatch, m, case):
    rng = np.random.default_rng(200 + case)
    k = [5, 60, 250][case]
    monkeypatch.setattr(R, "CHUNK_CELLS", 3001)
    base = rng.normal(0, 1, k)
    # correlated metrics (as TOF and enhancement are) give a small front and many prunable candidates
    params = [(base + rng.normal(0, s, k), rng.uniform(0.02, 0.5, k), rng.choice([2.5, 6.0, np.inf], k))
              for s in (0.3, 1.0, 0.2, 0.6)[:m]]
    got = R.front_share(params, 400, seed=case)
    np.testing.assert_allclose(got, _plain_front_share(params, 400, case), rtol=0, atol=1e-12)
    assert (got * 400).sum() >= 400            # every draw has at least one candidate on its front


@pytest.mark.parametrize("m", [2, 3])
def test_point_dominance_matches_pairwise(monkeypatch, m):
    rng = np.random.default_rng(7)
    k = 200
    monkeypatch.setattr(R, "CHUNK_CELLS", 5000)           # several column blocks
    pts = rng.integers(0, 6, size=(k, m)).astype(float)   # coarse values: many ties and duplicates
    names = np.array([f"C{i:03d}" for i in range(k)], dtype=object)
    cnt, by = R._point_dominance(pts, names, cap=4)
    dom = R._dominance(pts[None])[0]
    np.testing.assert_array_equal(cnt, dom.sum(axis=0))
    for j in range(k):
        assert by[j] == ";".join(names[dom[:, j]][:4])


@pytest.mark.parametrize("m", [2, 3, 4])
@pytest.mark.parametrize("k", [0, 1, 2, 17, 350])
@pytest.mark.parametrize("cap", [1, 10])
def test_point_dominance_matches_pairwise_continuous_and_mixed(monkeypatch, m, k, cap):
    # the pairwise definition (R._dominance, checked against the plain loop elsewhere) as reference;
    # continuous values, a block of exact duplicates, ties on one metric, several row blocks
    rng = np.random.default_rng(k * 10 + m + cap)
    monkeypatch.setattr(R, "CHUNK_CELLS", 2048)
    pts = rng.normal(size=(k, m))
    if k > 10:
        pts[3:8] = pts[2]                                 # duplicates
        pts[10:14, 0] = pts[9, 0]                         # ties on the first metric only
        pts[rng.permutation(k)[:k // 3], 1] = 0.5         # ties on the second
    names = np.array([f"N{i:04d}" for i in rng.permutation(k)], dtype=object)
    cnt, by = R._point_dominance(pts, names, cap=cap)
    dom = R._dominance(pts[None])[0] if k else np.zeros((0, 0), bool)
    np.testing.assert_array_equal(cnt, dom.sum(axis=0))
    assert list(by) == [";".join(names[dom[:, j]][:cap]) for j in range(k)]


def test_order_desc_is_a_stable_argsort_of_the_negated_scores():
    # reference: numpy's stable argsort (ties in column order), the definition _order_desc documents
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
    np.testing.assert_array_equal(R._order_desc(score), expected)
    np.testing.assert_array_equal(R.rank_draws(score), R._ranks_from_order(expected))
    np.testing.assert_array_equal(R.rank_draws(score.astype(np.float64)), R._ranks_from_order(expected))


@pytest.mark.parametrize("k", [1, 2, 63, 64, 65, 300])
def test_front_3_matches_pairwise(k):
    # heavy-tailed and correlated scores, k around the block size; reference: every pair (R._dominance)
    rng = np.random.default_rng(k)
    base = rng.standard_t(1.5, (40, k, 1))
    cube = (base + rng.standard_t(2.0, (40, k, 3)) * [0.3, 1.0, 0.5]).astype(np.float32)
    expected = ~R._dominance(cube).any(axis=1)
    np.testing.assert_array_equal(R._front_3(cube), expected)


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_front_2_and_3_exact_with_ties_and_duplicates(dtype):
    # coarse values: ties on every metric, exact duplicates; reference: every pair (R._dominance)
    rng = np.random.default_rng(21)
    cube = rng.integers(0, 4, (25, 90, 3)).astype(dtype)
    cube[:, 10:15] = cube[:, [9]]                         # a block of duplicates in every draw
    cube[:3, :, 0] = 1.0                                  # draws tied on the first metric throughout
    for m, front in ((2, lambda c: R._front_2(c[:, :, 0], c[:, :, 1])), (3, R._front_3)):
        c = np.ascontiguousarray(cube[:, :, :m])
        np.testing.assert_array_equal(front(c), ~R._dominance(c).any(axis=1))
