"""Pareto sets (screenlab.stats.pareto): fronts and dominance on small cases stated by hand, the
dominator counts and the fronts of the draws against the plain every-pair definition (a dominates
b when a is at least as good on every metric and better on one; common practice, no source), and
P(on the front) against a closed form."""
from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from screenlab.errors import UsageError
from screenlab.stats import pareto as P
from screenlab.stats import sampling as S
from screenlab.stats.pareto import front_share, pareto


def _dominates(pts: np.ndarray) -> np.ndarray:
    """(draws, k, m) scores, higher better -> (draws, k, k): [d, i, j] = i dominates j (the definition)."""
    a, b = pts[:, :, None, :], pts[:, None, :, :]
    return (a >= b).all(axis=3) & (a > b).any(axis=3)


def _plain_front(cube: np.ndarray) -> np.ndarray:
    return ~_dominates(cube).any(axis=1)


def _plain_front_share(params, draws, seed):
    """Every pair in every draw (the O(draws k^2) definition), from the same chunk seeds as front_share."""
    k, m = len(params[0][0]), len(params)
    hits = np.zeros(k)
    for d, ss in S.draw_chunks(draws, k, seed, per_cell=m):
        rng = np.random.default_rng(ss)
        cube = np.stack([S.draw_matrix(mu, sig, df, d, rng) for mu, sig, df in params], axis=2)
        hits += _plain_front(cube).sum(axis=0)
    return hits / draws


# ------------------------------------------------------------------------------------------- pareto()
def test_pareto_front_and_dominance(fake_kin):
    # K0 best TOF, K1 best Ea, K2 dominated by all three others, K3 dominated by K0 only
    kin = fake_kin([100.0, 50.0, 40.0, 60.0], [1.0, 1.0, 1.0, 1.0], ea=[70.0, 50.0, 75.0, 72.0],
                   ea_se=[0.5, 0.5, 0.5, 0.5])
    p = pareto(kin, metrics=("tof", "ea"), draws=2000, seed=1).set_index("catalyst")
    assert p.loc["K0", "on_front"] and p.loc["K1", "on_front"]
    assert not p.loc["K2", "on_front"] and p.loc["K2", "dominated_by"] == "K0;K1;K3"
    assert p.loc["K3", "dominated_by"] == "K0" and p.loc["K3", "dominated_by_count"] == 1
    assert p.loc["K0", "p_front"] == 1.0 and p.loc["K2", "p_front"] == 0.0
    assert list(p.columns[1:4]) == ["family", "tof_per_h", "ea_kj_mol"]
    # three metrics; a candidate without an Ea is listed with its reason, not compared
    kin2 = fake_kin([100.0, 50.0], [1.0, 1.0], ea=[70.0, 50.0], ea_se=[0.5, np.nan])
    p3 = pareto(kin2, metrics=("tof", "enhancement", "ea")).set_index("catalyst")
    assert p3.loc["K1", "reason"].startswith("ea:") and not p3.loc["K1", "on_front"]
    assert p3.loc["K0", "on_front"] and np.isnan(p3.loc["K0", "p_front"])


def test_pareto_p_front_close_call(fake_kin):
    # two candidates alike on both metrics: independent continuous draws put K0 off the front only
    # when K1 beats it on both, probability 1/2 x 1/2, so P(front) = 3/4 (closed form)
    kin = fake_kin([100.0, 100.0], [10.0, 10.0], ea=[60.0, 60.0], ea_se=[1.0, 1.0])
    p = pareto(kin, metrics=("tof", "ea"), draws=20_000, seed=2).set_index("catalyst")
    np.testing.assert_allclose(p["p_front"], 0.75, atol=0.01)


def test_pareto_respects_the_requirements(fake_kin):
    kin = fake_kin([100.0, 50.0, 40.0], [1.0, 1.0, 1.0], ea=[70.0, 50.0, 75.0], ea_se=[0.5, 0.5, 0.5])
    kin = dataclasses.replace(kin, rates=kin.rates.assign(selectivity_pct=[60.0, 95.0, 96.0],
                                                          selectivity_ci_low=[55.0, 93.0, 94.0],
                                                          selectivity_ci_high=[65.0, 97.0, 98.0]))
    p = pareto(kin, metrics=("tof", "ea"), require=["selectivity_pct>=90"]).set_index("catalyst")
    assert not p.loc["K0", "on_front"] and "is below 90" in p.loc["K0", "reason"]
    assert p.loc["K1", "on_front"] and not p.loc["K2", "on_front"]     # K2 is beaten by K1 on both
    assert p.loc["K2", "dominated_by"] == "K1"
    assert p.attrs["requirements"] == ["selectivity_pct>=90"]


def test_pareto_needs_two_or_three_different_metrics(fake_kin):
    kin = fake_kin([10.0], [1.0])
    for metrics in (("tof",), ("tof", "tof"), ("tof", "enhancement", "ea", "ton")):
        with pytest.raises(UsageError, match="two or three"):
            pareto(kin, metrics=metrics)


# ------------------------------------------------------------------------------------------- point dominance
@pytest.mark.parametrize("m", [2, 3, 4])
@pytest.mark.parametrize("k", [1, 2, 3, 4, 8, 9, 10, 15, 16, 17, 26, 101])
def test_dominator_counts_adversarial(m, k):
    rng = np.random.default_rng(k * 7 + m)
    for kind in ("coarse", "dup", "const_first", "const_rest", "zeros"):
        if kind == "coarse":
            pts = rng.integers(0, 3, (k, m)).astype(float)
        elif kind == "dup":
            pts = np.repeat(rng.normal(size=(max(1, k // 3), m)), 3, axis=0)[:k]
            pts = pts[rng.permutation(len(pts))]
        elif kind == "const_first":
            pts = rng.integers(0, 4, (k, m)).astype(float)
            pts[:, 0] = 1.5
        elif kind == "const_rest":
            pts = rng.normal(size=(k, m))
            pts[:, 1:] = -2.0
        else:                                                  # signed zeros compare equal
            pts = rng.choice([0.0, -0.0, 1.0], (k, m))
        if len(pts) < k:
            pts = np.vstack([pts, pts[: k - len(pts)]])
        dom = _dominates(pts[None])[0]
        np.testing.assert_array_equal(P._dominator_counts(pts), dom.sum(axis=0), err_msg=kind)
        names = np.array([f"n{i:03d}" for i in range(k)], dtype=object)
        cnt, by = P._point_dominance(pts, names, cap=2)
        np.testing.assert_array_equal(cnt, dom.sum(axis=0))
        assert list(by) == [";".join(names[dom[:, j]][:2]) for j in range(k)]


@pytest.mark.parametrize("cells", [1, 5000])                  # 1: one dominator row per block
@pytest.mark.parametrize("m", [2, 3])
def test_point_dominance_coarse_values_many_blocks(monkeypatch, cells, m):
    monkeypatch.setattr(P, "CHUNK_CELLS", cells)
    rng = np.random.default_rng(7)
    k = 60 if cells == 1 else 200
    pts = rng.integers(0, 6 if cells > 1 else 4, size=(k, m)).astype(float)   # many ties and duplicates
    names = np.array([f"C{i:03d}" for i in range(k)], dtype=object)
    cnt, by = P._point_dominance(pts, names, cap=4)
    dom = _dominates(pts[None])[0]
    np.testing.assert_array_equal(cnt, dom.sum(axis=0))
    assert list(by) == [";".join(names[dom[:, j]][:4]) for j in range(k)]


@pytest.mark.parametrize("m", [2, 3, 4])
@pytest.mark.parametrize("k", [0, 1, 2, 17, 350])
@pytest.mark.parametrize("cap", [1, 10])
def test_point_dominance_continuous_and_mixed(monkeypatch, m, k, cap):
    # continuous values, a block of exact duplicates, ties on one metric, several row blocks
    rng = np.random.default_rng(k * 10 + m + cap)
    monkeypatch.setattr(P, "CHUNK_CELLS", 2048)
    pts = rng.normal(size=(k, m))
    if k > 10:
        pts[3:8] = pts[2]                                 # duplicates
        pts[10:14, 0] = pts[9, 0]                         # ties on the first metric only
        pts[rng.permutation(k)[:k // 3], 1] = 0.5         # ties on the second
    names = np.array([f"N{i:04d}" for i in rng.permutation(k)], dtype=object)
    cnt, by = P._point_dominance(pts, names, cap=cap)
    dom = _dominates(pts[None])[0] if k else np.zeros((0, 0), bool)
    np.testing.assert_array_equal(cnt, dom.sum(axis=0))
    assert list(by) == [";".join(names[dom[:, j]][:cap]) for j in range(k)]


# ------------------------------------------------------------------------------------------- fronts of the draws
@pytest.mark.parametrize("k", [1, 2, 63, 64, 65, 300])
def test_front_3_matches_pairwise(k):
    # heavy-tailed and correlated scores, k around the block size
    rng = np.random.default_rng(k)
    base = rng.standard_t(1.5, (40, k, 1))
    cube = (base + rng.standard_t(2.0, (40, k, 3)) * [0.3, 1.0, 0.5]).astype(np.float32)
    np.testing.assert_array_equal(P._front_3(cube), _plain_front(cube))


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_front_2_and_3_exact_with_ties_and_duplicates(dtype):
    # coarse values: ties on every metric, exact duplicates
    rng = np.random.default_rng(21)
    cube = rng.integers(0, 4, (25, 90, 3)).astype(dtype)
    cube[:, 10:15] = cube[:, [9]]                         # a block of duplicates in every draw
    cube[:3, :, 0] = 1.0                                  # draws tied on the first metric throughout
    for m, front in ((2, lambda c: P._front_2(c[:, :, 0], c[:, :, 1])), (3, P._front_3)):
        c = np.ascontiguousarray(cube[:, :, :m])
        np.testing.assert_array_equal(front(c), _plain_front(c))


@pytest.mark.parametrize("k", [1, 2, 3, 63, 64, 65, 129, 200])
def test_front_3_ties_in_metrics_2_and_3(k):
    # metric 1 continuous (the documented assumption), metrics 2 and 3 on a coarse grid
    rng = np.random.default_rng(k)
    cube = np.concatenate([rng.normal(size=(25, k, 1)), rng.integers(0, 3, (25, k, 2))], axis=2)
    cube = cube.astype(np.float32)
    np.testing.assert_array_equal(P._front_3(cube), _plain_front(cube))
    cube[:, :, 2] = cube[:, :, 1]                              # metric 3 a copy of metric 2
    np.testing.assert_array_equal(P._front_3(cube), _plain_front(cube))


def test_front_3_small_staircase_growth(monkeypatch):
    # blocks of one candidate: the staircase is rebuilt after every point
    monkeypatch.setattr(P, "FRONT_BLOCK", 1)
    rng = np.random.default_rng(2)
    cube = np.concatenate([rng.normal(size=(10, 40, 1)), rng.integers(0, 4, (10, 40, 2))], axis=2)
    cube = cube.astype(np.float32)
    np.testing.assert_array_equal(P._front_3(cube), _plain_front(cube))


@pytest.mark.parametrize("k", [2, 5, 70])
def test_front_3_equal_scores(k):
    cube = np.ones((4, k, 3), np.float32)                      # all candidates identical: all on the front
    np.testing.assert_array_equal(P._front_3(cube), np.ones((4, k), bool))


def test_front_3_ties_on_metric_1():
    rng = np.random.default_rng(3)
    cube = rng.integers(0, 3, (30, 40, 3)).astype(np.float32)
    np.testing.assert_array_equal(P._front_3(cube), _plain_front(cube))


def test_front_2_equal_scores():
    cube = np.ones((4, 5, 2), np.float32)
    np.testing.assert_array_equal(P._front_2(cube[:, :, 0], cube[:, :, 1]), np.ones((4, 5), bool))


@pytest.mark.parametrize("m", [2, 3, 4])
@pytest.mark.parametrize("case", range(3))
def test_front_share_matches_pairwise(monkeypatch, m, case):
    rng = np.random.default_rng(200 + case)
    k = [5, 60, 250][case]
    monkeypatch.setattr(S, "CHUNK_CELLS", 3001)
    base = rng.normal(0, 1, k)
    # correlated metrics (as TOF and enhancement are) give a small front and many prunable candidates
    params = [(base + rng.normal(0, s, k), rng.uniform(0.02, 0.5, k), rng.choice([2.5, 6.0, np.inf], k))
              for s in (0.3, 1.0, 0.2, 0.6)[:m]]
    got = front_share(params, 400, seed=case)
    np.testing.assert_allclose(got, _plain_front_share(params, 400, case), rtol=0, atol=1e-12)
    assert (got * 400).sum() >= 400            # every draw has at least one candidate on its front


@pytest.mark.parametrize("m", [2, 3, 4])
@pytest.mark.parametrize("draws", [1, 2, 7, 300])
def test_front_share_small_draws_and_chunks(monkeypatch, m, draws):
    monkeypatch.setattr(S, "CHUNK_CELLS", 97)
    rng = np.random.default_rng(m * 100 + draws)
    k = 30
    params = [(rng.normal(0, 1, k), rng.uniform(0.05, 2.0, k), rng.choice([1.0, 1.0001, 3.0, np.inf], k))
              for _ in range(m)]
    np.testing.assert_allclose(front_share(params, draws, seed=4), _plain_front_share(params, draws, 4),
                               rtol=0, atol=1e-12)


@pytest.mark.parametrize("m", [2, 3, 4])
def test_front_share_tied_draws(m):
    # every draw equal (sigma below float32 resolution): nobody dominates anybody, all on the front
    k = 6
    params = [(np.ones(k), np.full(k, 1e-12), np.full(k, np.inf)) for _ in range(m)]   # draws == 1.0f
    np.testing.assert_allclose(front_share(params, 50, seed=0), _plain_front_share(params, 50, 0),
                               rtol=0, atol=1e-12)
    np.testing.assert_allclose(front_share(params, 50, seed=0), 1.0, rtol=0, atol=1e-12)


def test_front_share_folds_an_ee_by_magnitude_as_the_ranking_does():
    # A: ee 0 +/- 0.3 (either enantiomer), TOF 1.0 +/- 0.05; B: ee 0.2 +/- 0.02, TOF 1.2 +/- 0.05.
    # B dominates A when |ee_A| <= |ee_B| and TOF_A <= TOF_B: closed form from scipy.stats.norm
    # (|ee_B| ~ 0.2 exactly enough; the two TOFs independent normals)
    from scipy import stats

    params = [(np.array([0.0, 0.2]), np.array([0.3, 0.02]), np.array([np.inf, np.inf]), 1.0),
              (np.array([1.0, 1.2]), np.array([0.05, 0.05]), np.array([np.inf, np.inf]))]
    draws = 40_000
    p = front_share(params, draws, seed=5)
    p_dom = (2 * stats.norm.cdf(0.2 / 0.3) - 1) * stats.norm.cdf(0.2 / (0.05 * np.sqrt(2)))
    se = np.sqrt(p_dom * (1 - p_dom) / draws)
    assert abs(p[0] - (1 - p_dom)) < 4 * se + 0.002
    p_dom_b = (2 - 2 * stats.norm.cdf(0.2 / 0.3)) * stats.norm.sf(0.2 / (0.05 * np.sqrt(2)))   # A dominates B
    assert abs(p[1] - (1 - p_dom_b)) < 4 * np.sqrt(p_dom_b / draws) + 1e-4


def test_pareto_folds_an_ee_whose_interval_spans_zero(fake_kin):
    # the pareto() path builds the folded |ee| draws: K0 (ee 0 +/- 30 %, either enantiomer) against
    # K1 (ee 20 +/- 2 %, faster): K0 is on the front when |ee_K0| > 20, P = 1 - (2 Phi(2/3) - 1)
    # (scipy.stats.norm; the TOFs far apart, normal draws: df missing)
    from scipy import stats

    kin = fake_kin([100.0, 200.0], [1.0, 2.0], df=np.nan)
    kin = dataclasses.replace(kin, rates=kin.rates.assign(ee_pct=[0.0, 20.0], ee_se=[30.0, 2.0], ee_df=np.nan))
    f = pareto(kin, None, ("tof", "ee"), draws=40_000, seed=3).set_index("catalyst")
    p = 1 - (2 * stats.norm.cdf(20 / 30) - 1)
    assert f.loc["K0", "p_front"] == pytest.approx(p, abs=4 * np.sqrt(p * (1 - p) / 40_000) + 0.003)
