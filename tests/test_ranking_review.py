"""Review tests for the Monte Carlo ranking and Pareto helpers: edge cases, the exact fallback,
many chunks, one or several workers, failing workers, and adversarial ties, each against a plain
reference (full rank matrix + np.quantile(method="inverted_cdf"); every-pair dominance)."""
from __future__ import annotations

import threading

import numpy as np
import pandas as pd
import pytest

import screenlab.stats.ranking as R

from ranking_refs import _merge_codes_ref, _plain_front_share


# ---------------------------------------------------------------------------------------------
# references

def _ref_summary(mu, sigma, df, draws, seed, top_k, confidence, reference):
    """Full draws x k matrix from the same chunk seeds, columns in point-estimate order (as
    rank_summary documents: ties in a draw go to the column placed first by estimate), one stable
    argsort per draw, np.quantile with inverted_cdf."""
    mu, sigma, df = (np.asarray(v, dtype=float) for v in (mu, sigma, df))
    k = mu.size
    perm = np.argsort(-mu, kind="stable")
    score_s = np.concatenate([R.draw_matrix(mu[perm], sigma[perm], df[perm], d, np.random.default_rng(ss))
                              for d, ss in R._chunks(draws, k, seed)])
    order = np.argsort(-score_s, axis=1, kind="stable")
    ranks_s = np.empty_like(order)
    np.put_along_axis(ranks_s, order, np.arange(1, k + 1)[None, :].repeat(len(order), 0), axis=1)
    ranks = np.empty_like(ranks_s)
    ranks[:, perm] = ranks_s
    a = (1 - confidence) / 2
    out = {"rank_low": np.quantile(ranks, a, axis=0, method="inverted_cdf"),
           "rank_high": np.quantile(ranks, 1 - a, axis=0, method="inverted_cdf"),
           "p_top": (ranks <= top_k).mean(axis=0), "p_best": (ranks == 1).mean(axis=0),
           "p_beats": np.full(k, np.nan)}
    if reference is not None:
        score = np.empty_like(score_s)
        score[:, perm] = score_s
        out["p_beats"] = (score > score[:, [reference]]).mean(axis=0)
    return out


def _check(got, exp):
    np.testing.assert_array_equal(got["rank_low"], exp["rank_low"])
    np.testing.assert_array_equal(got["rank_high"], exp["rank_high"])
    for c in ("p_top", "p_best", "p_beats"):
        np.testing.assert_allclose(got[c], exp[c], rtol=0, atol=1e-12)


def _case(k, kind, seed=0):
    rng = np.random.default_rng(seed + 31 * k)
    if kind == "mixed":
        mu = rng.normal(0, 1, k)
        mu[: k // 3] = mu[0]                                   # ties in the point estimates
        sigma = rng.uniform(0.05, 1.0, k)
        df = rng.choice([1.0, 1.0001, 2.5, 30.0, 2e4, np.inf], k)   # Cauchy, near-Cauchy, normal
    elif kind == "equal":                                      # all candidates alike
        mu, sigma, df = np.full(k, 0.7), np.full(k, 0.3), np.full(k, 4.0)
    elif kind == "tiny":                                       # below float32 resolution: every draw ties
        mu, sigma, df = rng.normal(0, 1, k).round(1), np.full(k, 1e-12), np.full(k, np.inf)
    elif kind == "huge":                                       # heavy tails, very wide
        mu, sigma, df = rng.normal(0, 1, k), rng.uniform(1e3, 1e6, k), rng.choice([1.0, np.inf], k)
    else:                                                      # tiny and huge sigma side by side
        mu = rng.normal(0, 1, k)
        sigma = np.where(rng.random(k) < 0.5, 1e-9, 50.0)
        df = rng.choice([1.0, np.inf], k)
    return mu, sigma, df


# ---------------------------------------------------------------------------------------------
# rank_summary: edge cases against the plain reference

@pytest.mark.parametrize("k", [1, 2, 5])
@pytest.mark.parametrize("draws", [1, 2, 7, 60])
@pytest.mark.parametrize("kind", ["mixed", "equal", "tiny", "huge", "both"])
def test_rank_summary_edge_cases(k, draws, kind):
    mu, sigma, df = _case(k, kind)
    for top_k, conf, ref in [(1, 0.95, None), (2, 1e-9, 0), (k + 3, 1 - 1e-9, k - 1), (1, 0.5, k // 2)]:
        got = R.rank_summary(mu, sigma, df, draws, seed=3, top_k=top_k, confidence=conf, reference=ref)
        _check(got, _ref_summary(mu, sigma, df, draws, 3, top_k, conf, ref))
        assert got["p_best"].sum() == pytest.approx(1.0, abs=1e-12)
        assert got["p_top"].sum() == pytest.approx(min(top_k, k), abs=1e-9)


@pytest.mark.parametrize("conf", [0.0, 1e-6, 0.5, 0.95, 0.999999, 1.0])
def test_rank_summary_confidence_extremes(conf):
    mu, sigma, df = _case(40, "mixed", 1)
    got = R.rank_summary(mu, sigma, df, 333, seed=5, top_k=4, confidence=conf, reference=7)
    _check(got, _ref_summary(mu, sigma, df, 333, 5, 4, conf, 7))
    assert (got["rank_low"] <= got["rank_high"]).all()


@pytest.mark.parametrize("kind", ["mixed", "tiny", "both"])
@pytest.mark.parametrize("patch", [
    {"WINDOW_CELLS": 1},                                       # windows squeezed to one rank: fallback
    {"WINDOW_CELLS": 5, "FALLBACK_CELLS": 1},                  # fallback one column at a time, 1-draw pilot
    {"FALLBACK_CELLS": 7, "PILOT_DRAWS": 3},                   # pilot smaller than a chunk of draws
    {"CHUNK_CELLS": 1},                                        # one draw per chunk: hundreds of tasks
    {"CHUNK_CELLS": 37, "BLOCK_CELLS": 1},                     # many chunks, one column per bincount
    {"PILOT_DRAWS": 1, "CHUNK_CELLS": 50},                     # a tiny pilot: windows often miss
])
def test_rank_summary_paths(monkeypatch, patch, kind):
    for name, value in patch.items():
        monkeypatch.setattr(R, name, value)
    mu, sigma, df = _case(23, kind, 2)
    for draws in (2, 7, 301):
        got = R.rank_summary(mu, sigma, df, draws, seed=draws, top_k=3, confidence=0.9, reference=0)
        _check(got, _ref_summary(mu, sigma, df, draws, draws, 3, 0.9, 0))


@pytest.mark.parametrize("workers", [1, 3])
def test_rank_summary_workers_give_the_same_numbers(monkeypatch, workers):
    monkeypatch.setattr(R, "CHUNK_CELLS", 64)                 # ~ 3 draws per chunk at k = 20
    monkeypatch.setattr(R, "PILOT_DRAWS", 10)
    mu, sigma, df = _case(20, "mixed", 4)
    monkeypatch.setattr(R, "_n_workers", lambda n: workers)
    got = R.rank_summary(mu, sigma, df, 400, seed=9, top_k=2, confidence=0.8, reference=19)
    _check(got, _ref_summary(mu, sigma, df, 400, 9, 2, 0.8, 19))
    monkeypatch.setattr(R, "WINDOW_CELLS", 3)                 # and through the fallback
    got = R.rank_summary(mu, sigma, df, 400, seed=9, top_k=2, confidence=0.8, reference=19)
    _check(got, _ref_summary(mu, sigma, df, 400, 9, 2, 0.8, 19))


def _run_with_timeout(fn, timeout=20.0):
    box = {}

    def target():
        try:
            box["value"] = fn()
        except BaseException as exc:                          # noqa: BLE001 - handed to the test
            box["error"] = exc

    th = threading.Thread(target=target, daemon=True)
    th.start()
    th.join(timeout)
    assert not th.is_alive(), "rank_summary hung after a failing chunk"
    return box


@pytest.mark.parametrize("workers", [1, 3])
@pytest.mark.parametrize("where", ["pilot", "after_pilot", "fallback"])
def test_rank_summary_worker_exception_raises(monkeypatch, workers, where):
    real = R.draw_matrix
    calls = {"n": 0}
    k, draws = 10, 200
    monkeypatch.setattr(R, "CHUNK_CELLS", 10 * k)            # 10 draws per chunk: 20 chunks
    monkeypatch.setattr(R, "_n_workers", lambda n: workers)
    if where == "pilot":
        monkeypatch.setattr(R, "PILOT_DRAWS", 100)            # 10 pilot chunks; the 3rd fails
        fail_at = 3
    elif where == "after_pilot":
        monkeypatch.setattr(R, "PILOT_DRAWS", 20)             # 2 pilot chunks; the 3rd chunk fails
        fail_at = 3
    else:
        monkeypatch.setattr(R, "WINDOW_CELLS", 1)             # every quantile goes to the fallback
        fail_at = draws // 10 + 3                             # the 3rd chunk drawn again

    def flaky(*args, **kw):
        with threading.Lock():
            calls["n"] += 1
            n = calls["n"]
        if n == fail_at:
            raise RuntimeError("boom in chunk")
        return real(*args, **kw)

    monkeypatch.setattr(R, "draw_matrix", flaky)
    mu, sigma, df = _case(k, "mixed", 5)
    box = _run_with_timeout(lambda: R.rank_summary(mu, sigma, df, draws, seed=1, reference=0))
    assert isinstance(box.get("error"), RuntimeError), box
    # and the module still works afterwards (no state left behind)
    monkeypatch.setattr(R, "draw_matrix", real)
    _check(R.rank_summary(mu, sigma, df, draws, seed=1, reference=0),
           _ref_summary(mu, sigma, df, draws, 1, 5, 0.95, 0))


def test_rank_summary_reference_out_of_range_is_an_error():
    # callers pass a valid column; a wrong one must fail loudly rather than give numbers
    mu, sigma, df = _case(4, "mixed")
    with pytest.raises(IndexError):
        R.rank_summary(mu, sigma, df, 10, reference=4)


# ---------------------------------------------------------------------------------------------
# _order_desc / _ranks_from_order

@pytest.mark.parametrize("shape", [(1, 1), (1, 2), (3, 1), (5, 2), (7, 300)])
def test_order_and_ranks_small_shapes(shape):
    rng = np.random.default_rng(sum(shape))
    score = rng.integers(-2, 3, shape).astype(np.float32)      # many ties
    score[score == 0] = np.where(rng.random((score == 0).sum()) < 0.5, -0.0, 0.0)
    exp = np.argsort(-score, axis=1, kind="stable")
    np.testing.assert_array_equal(R._order_desc(score), exp)
    s2 = score.copy()
    got = R._order_desc(s2, overwrite=True)
    np.testing.assert_array_equal(got, exp)
    ranks = np.empty_like(exp)
    np.put_along_axis(ranks, exp, np.arange(1, shape[1] + 1)[None].repeat(shape[0], 0), axis=1)
    np.testing.assert_array_equal(R._ranks_from_order(exp), ranks)
    np.testing.assert_array_equal(R._ranks_from_order(got.copy(), overwrite=True), ranks)
    np.testing.assert_array_equal(R._ranks_from_order(R._order_desc(score.copy(), True), True), ranks)


def test_order_desc_infinities():
    big = np.float32(np.finfo(np.float32).max)
    score = np.array([[np.inf, -np.inf, big, -big, 0.0, -0.0, np.inf, 1e-45, -1e-45]], np.float32)
    np.testing.assert_array_equal(R._order_desc(score), np.argsort(-score, axis=1, kind="stable"))


# ---------------------------------------------------------------------------------------------
# Pareto helpers

def _pairwise_counts(pts):
    return R._dominance(pts[None])[0].sum(axis=0) if len(pts) else np.zeros(0, np.int64)


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
        np.testing.assert_array_equal(R._dominator_counts(pts), _pairwise_counts(pts), err_msg=kind)
        names = np.array([f"n{i:03d}" for i in range(k)], dtype=object)
        cnt, by = R._point_dominance(pts, names, cap=2)
        dom = R._dominance(pts[None])[0]
        np.testing.assert_array_equal(cnt, dom.sum(axis=0))
        assert list(by) == [";".join(names[dom[:, j]][:2]) for j in range(k)]


def test_point_dominance_many_blocks(monkeypatch):
    monkeypatch.setattr(R, "CHUNK_CELLS", 1)                  # one dominator row per block
    rng = np.random.default_rng(1)
    pts = rng.integers(0, 4, (60, 3)).astype(float)
    names = np.array([f"x{i}" for i in range(60)], dtype=object)
    cnt, by = R._point_dominance(pts, names, cap=3)
    dom = R._dominance(pts[None])[0]
    np.testing.assert_array_equal(cnt, dom.sum(axis=0))
    assert list(by) == [";".join(names[dom[:, j]][:3]) for j in range(60)]


@pytest.mark.parametrize("k", [1, 2, 3, 63, 64, 65, 129, 200])
def test_front_3_ties_in_metrics_2_and_3(k):
    # metric 1 continuous (the documented assumption), metrics 2 and 3 on a coarse grid
    rng = np.random.default_rng(k)
    cube = np.concatenate([rng.normal(size=(25, k, 1)), rng.integers(0, 3, (25, k, 2))], axis=2)
    cube = cube.astype(np.float32)
    np.testing.assert_array_equal(R._front_3(cube), ~R._dominance(cube).any(axis=1))
    cube[:, :, 2] = cube[:, :, 1]                              # metric 3 a copy of metric 2
    np.testing.assert_array_equal(R._front_3(cube), ~R._dominance(cube).any(axis=1))


def test_front_3_small_staircase_growth(monkeypatch):
    # blocks of one candidate: the staircase is rebuilt after every point
    monkeypatch.setattr(R, "FRONT_BLOCK", 1)
    rng = np.random.default_rng(2)
    cube = np.concatenate([rng.normal(size=(10, 40, 1)), rng.integers(0, 4, (10, 40, 2))], axis=2)
    cube = cube.astype(np.float32)
    np.testing.assert_array_equal(R._front_3(cube), ~R._dominance(cube).any(axis=1))


@pytest.mark.parametrize("k", [2, 5, 70])
def test_front_3_equal_scores(k):
    cube = np.ones((4, k, 3), np.float32)                      # all candidates identical: all on the front
    np.testing.assert_array_equal(R._front_3(cube), ~R._dominance(cube).any(axis=1))


def test_front_3_ties_on_metric_1():
    rng = np.random.default_rng(3)
    cube = rng.integers(0, 3, (30, 40, 3)).astype(np.float32)
    np.testing.assert_array_equal(R._front_3(cube), ~R._dominance(cube).any(axis=1))


def test_front_2_equal_scores():
    cube = np.ones((4, 5, 2), np.float32)
    np.testing.assert_array_equal(R._front_2(cube[:, :, 0], cube[:, :, 1]), ~R._dominance(cube).any(axis=1))


@pytest.mark.parametrize("m", [2, 3, 4])
@pytest.mark.parametrize("draws", [1, 2, 7, 300])
def test_front_share_small_draws_and_chunks(monkeypatch, m, draws):
    monkeypatch.setattr(R, "CHUNK_CELLS", 97)
    rng = np.random.default_rng(m * 100 + draws)
    k = 30
    params = [(rng.normal(0, 1, k), rng.uniform(0.05, 2.0, k), rng.choice([1.0, 1.0001, 3.0, np.inf], k))
              for _ in range(m)]
    np.testing.assert_allclose(R.front_share(params, draws, seed=4), _plain_front_share(params, draws, 4),
                               rtol=0, atol=1e-12)


def test_front_share_three_metrics_tied_draws():
    k = 6
    params = [(np.ones(k), np.full(k, 1e-12), np.full(k, np.inf)) for _ in range(3)]   # draws == 1.0f
    np.testing.assert_allclose(R.front_share(params, 50, seed=0), _plain_front_share(params, 50, 0),
                               rtol=0, atol=1e-12)


def test_front_share_two_metrics_tied_draws():
    k = 6
    params = [(np.ones(k), np.full(k, 1e-12), np.full(k, np.inf)) for _ in range(2)]   # draws == 1.0f
    np.testing.assert_allclose(R.front_share(params, 50, seed=0), _plain_front_share(params, 50, 0),
                               rtol=0, atol=1e-12)


def test_front_share_four_metrics_tied_draws_is_exact():
    # the witness-pruned pairwise path (more than three metrics) is exact with ties
    k = 6
    params = [(np.ones(k), np.full(k, 1e-12), np.full(k, np.inf)) for _ in range(4)]   # draws == 1.0f
    np.testing.assert_allclose(R.front_share(params, 50, seed=0), 1.0, rtol=0, atol=1e-12)


# ---------------------------------------------------------------------------------------------
# candidate-table helpers

def test_merge_codes_edge_inputs():
    pool = ["", ";", ";;", "a", "a;a", ";a", "a;", "b;a;b", None, np.nan, pd.NA, "x"]
    rng = np.random.default_rng(8)
    cols = [list(rng.choice(np.array(pool, dtype=object), 300)) for _ in range(4)]
    variants = [cols[0], pd.Series(cols[1], dtype="object"), pd.Series(cols[2], dtype="string"),
                pd.Series([c if isinstance(c, str) else None for c in cols[3]], dtype="category")]
    assert R._merge_codes(*variants) == _merge_codes_ref(*[list(v) for v in variants])
    assert R._merge_codes(["a"]) == ["a"]
    assert R._merge_codes([";"]) == [""]
    assert R._merge_codes(["a;a"]) == ["a"]
    assert R._merge_codes(np.array(["", "q"]), ["", ""]) == ["", "q"]
