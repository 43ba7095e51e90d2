"""The Monte Carlo rank statistics (screenlab.stats.montecarlo): the fixed-draw engine
(``rank_summary`` / ``RankDraws``) against the full draws x k rank matrix of the same draws (numpy's
stable argsort per draw and ``np.quantile(method="inverted_cdf")``: the definition rank_summary
documents), through every path (windows, the exact fallback, many chunks, one or several workers,
failing workers); the adaptive one against closed forms, numerical integration and many full draws,
and its Monte Carlo error claim.

Outside references: scipy.stats.norm / scipy.stats.t distributions and scipy.integrate.quad for
rank probabilities of independent candidates (P(i best) = int f_i(x) prod_j F_j(x) dx, P(i last) =
int f_i(x) prod_j (1 - F_j(x)) dx); numpy's sort / quantile on the full draws x k rank matrix.
"""
from __future__ import annotations

import threading

import numpy as np
import pytest
from scipy import integrate, stats

from screenlab.stats import montecarlo as M
from screenlab import _parallel
from screenlab.stats import sampling as S


def _full_reference(mu, sigma, df, draws, seed, top_k, reference=None, absolute=False):
    """Every candidate ranked in every one of many draws (rank_summary), for comparison."""
    return M.rank_summary(mu, sigma, df, draws, seed, top_k=top_k, reference=reference, absolute=absolute)


def _close(got, ref, n_got, n_ref, z=4.5):
    """|got - ref| within z combined binomial SEs (floored at one count of the smaller run)."""
    p = (np.asarray(got) * n_got + np.asarray(ref) * n_ref) / (n_got + n_ref)
    se = np.sqrt(p * (1 - p) * (1 / n_got + 1 / n_ref))
    return np.abs(np.asarray(got) - np.asarray(ref)) <= z * np.maximum(se, 1.0 / min(n_got, n_ref))


def test_two_normal_candidates_closed_form():
    mu, sig = np.log([100.0, 80.0]), np.array([0.15, 0.125])
    r = M.adaptive_rank_summary(mu, sig, [np.inf, np.inf], seed=1, top_k=1)
    p = stats.norm.cdf((mu[0] - mu[1]) / np.hypot(*sig))       # scipy.stats.norm
    assert r["mc_se"] <= M.MC_SE and r["draws"] >= 0.25 / M.MC_SE ** 2 * 4 * p * (1 - p) * 0.9
    assert r["p_best"][0] == pytest.approx(p, abs=4 * M.MC_SE)
    assert r["p_best"].sum() == pytest.approx(1.0, abs=1e-12) and r["p_top"].sum() == pytest.approx(1.0, abs=1e-12)


def test_three_t_candidates_against_numerical_integration():
    mu, sig, df = np.array([1.0, 0.6, 0.0]), np.array([0.5, 0.4, 0.8]), np.array([3.0, 5.0, 2.5])
    d = [stats.t(df[i], loc=mu[i], scale=sig[i]) for i in range(3)]

    def p_best(i):
        return integrate.quad(lambda x: d[i].pdf(x) * np.prod([d[j].cdf(x) for j in range(3) if j != i]),
                              -np.inf, np.inf, limit=200)[0]

    def p_last(i):
        return integrate.quad(lambda x: d[i].pdf(x) * np.prod([d[j].sf(x) for j in range(3) if j != i]),
                              -np.inf, np.inf, limit=200)[0]

    r = M.adaptive_rank_summary(mu, sig, df, seed=2, top_k=2, reference=2)
    assert r["mc_se"] <= M.MC_SE
    for i in range(3):
        assert r["p_best"][i] == pytest.approx(p_best(i), abs=4 * M.MC_SE)
        assert r["p_top"][i] == pytest.approx(1 - p_last(i), abs=4 * M.MC_SE)      # top 2 of 3 = not last
    # P(beats the benchmark, column 2) = P(X_i > X_2) = int f_2(x) S_i(x) dx
    for i in range(2):
        exact = integrate.quad(lambda x: d[2].pdf(x) * d[i].sf(x), -np.inf, np.inf, limit=200)[0]
        assert r["p_beats"][i] == pytest.approx(exact, abs=4 * M.MC_SE)
    assert np.isnan(r["p_beats"][2])


def test_exchangeable_candidates():
    k = 30
    r = M.adaptive_rank_summary(np.zeros(k), np.ones(k), np.full(k, 4.0), seed=3, top_k=5)
    np.testing.assert_allclose(r["p_best"], 1 / k, atol=4 * M.MC_SE)       # symmetry
    np.testing.assert_allclose(r["p_top"], 5 / k, atol=4 * M.MC_SE)
    assert r["p_best"].sum() == pytest.approx(1.0, abs=1e-12) and r["p_top"].sum() == pytest.approx(5.0, abs=1e-12)


@pytest.mark.parametrize("case", ["heavy", "wide_tail", "crowded_top"])
def test_adaptive_matches_the_full_draw_reference(case):
    rng = np.random.default_rng({"heavy": 5, "wide_tail": 6, "crowded_top": 7}[case])
    if case == "heavy":                     # realistic: log TOF spread, t with 2-5 df
        k, top = 150, 5
        mu, sig, df = rng.normal(3.4, 1.0, k), rng.uniform(0.03, 0.2, k), rng.uniform(2.0, 5.0, k)
    elif case == "wide_tail":               # far candidates with Cauchy tails reach the top now and then
        k, top = 120, 3
        mu = np.concatenate([[5.0, 4.8, 4.7, 4.5], rng.normal(0.0, 0.5, k - 4)])
        sig = np.concatenate([np.full(4, 0.2), np.full(k - 4, 0.05)])
        df = np.concatenate([np.full(4, 30.0), np.full(k - 4, 1.0)])
    else:                                   # K close to k: in the draws with fewer than K scores above the
        k, top = 30, 25                     # threshold, the resolved ones (just below it) take some places
        mu = np.concatenate([np.full(25, 3.0), np.full(5, 1.25)])
        sig = np.concatenate([np.full(25, 0.4), np.full(5, 0.15)])
        df = np.full(k, np.inf)
    # a tighter target than the default, so that the probability phase (contenders drawn, the rest
    # resolved) does most of the draws even for these small k
    target = 0.001 if case == "crowded_top" else 0.002
    got = M.adaptive_rank_summary(mu, sig, df, seed=11, top_k=top, reference=3, mc_se=target)
    n_ref = 400_000
    ref = _full_reference(mu, sig, df, n_ref, 99, top, reference=3)
    assert got["mc_se"] <= target and got["draws"] > 2 * got["draws_ranked"]
    for key in ("p_top", "p_best"):
        assert _close(got[key], ref[key], got["draws"], n_ref).all(), key
    keep = np.arange(k) != 3
    assert _close(got["p_beats"][keep], ref["p_beats"][keep], got["draws_ranked"], n_ref).all()
    # rank bounds: within their stated tolerance for most candidates, never far off
    for side in ("rank_low", "rank_high"):
        diff = np.abs(got[side] - ref[side])
        tol = M.rank_tolerance(ref["rank_low"], ref["rank_high"])
        assert np.mean(diff <= tol) >= 0.9 and (diff <= 4 * tol + 1).all(), side
    if case != "heavy":
        # the far candidates were resolved (not drawn in every draw) yet their share of the top is kept:
        # through their draws above the threshold (wide_tail) or in the draws where fewer than K
        # scores reach it (crowded_top)
        first = {"wide_tail": 4, "crowded_top": 25}[case]
        assert got["n_contenders"] <= first + (k - first) // 2
        far = np.arange(first, k)
        share, ref_share = got["p_top"][far].sum(), ref["p_top"][far].sum()
        assert ref_share > 5e-4
        assert share == pytest.approx(ref_share, abs=4 * np.sqrt(ref_share / got["draws"] + ref_share / n_ref))


@pytest.mark.parametrize("target", [M.MC_SE, 0.002])
def test_monte_carlo_error_claim_holds_across_seeds(target):
    # the reported probabilities' spread over independent seeds is what mc_se says (<= the target);
    # at 0.002 most draws are in the probability phase (contenders drawn, the rest resolved)
    rng = np.random.default_rng(8)
    k = 400
    mu, sig, df = rng.normal(0.0, 1.0, k), rng.uniform(0.1, 0.4, k), rng.uniform(2.0, 8.0, k)
    mu[:2] = 3.5                                     # a near tie at the top: P(best) about 1/2
    runs = [M.adaptive_rank_summary(mu, sig, df, seed=s, top_k=5, reference=0, mc_se=target) for s in range(12)]
    assert max(r["mc_se"] for r in runs) <= target
    if target < M.MC_SE:
        assert all(r["draws"] > 3 * r["draws_ranked"] for r in runs)
    for key in ("p_top", "p_best"):
        sd = np.std([r[key] for r in runs], axis=0, ddof=1)
        # 12 runs: the SD estimate itself is within about +/-40 % of the truth (chi-square, 11 df)
        assert sd.max() <= 1.45 * target, key
    beats = np.array([r["p_beats"] for r in runs])
    keep = ~np.isnan(beats).any(axis=0)
    assert np.std(beats[:, keep], axis=0, ddof=1).max() <= 1.45 * target


def test_reproducible_and_reported():
    rng = np.random.default_rng(9)
    mu, sig, df = rng.normal(0, 1, 50), rng.uniform(0.1, 0.4, 50), np.full(50, 3.0)
    a = M.adaptive_rank_summary(mu, sig, df, seed=4, top_k=3)
    b = M.adaptive_rank_summary(mu, sig, df, seed=4, top_k=3)
    for key in ("p_top", "p_best", "rank_low", "rank_high"):
        np.testing.assert_array_equal(a[key], b[key])
    assert a["draws"] >= a["draws_ranked"] >= M.MIN_RANK_DRAWS
    assert 0 < a["rank_bound_stable_share"] <= 1 and a["rank_bound_halfwidth"] >= 0


# ------------------------------------------------------------------------------------------- rank_summary options
def _ranks(mu, sigma, df, draws, seed, absolute=False):
    """The full draws x k rank matrix from rank_summary's own chunks (same seeds), for the references."""
    key = np.abs(mu) if absolute else mu
    perm = np.argsort(-key, kind="stable")
    score = np.concatenate([S.draw_matrix(mu[perm], sigma[perm], df[perm], d, np.random.default_rng(ss))
                            for d, ss in S.draw_chunks(draws, mu.size, seed)])
    if absolute:
        score = np.abs(score)
    order = np.argsort(-score, axis=1, kind="stable")
    ranks_s = np.empty_like(order)
    np.put_along_axis(ranks_s, order, np.arange(1, mu.size + 1)[None, :].repeat(len(order), 0), axis=1)
    ranks = np.empty_like(ranks_s)
    ranks[:, perm] = ranks_s
    return ranks


def test_rank_summary_folded_scores_and_interval_readout():
    rng = np.random.default_rng(10)
    k, n = 25, 3000
    mu, sig, df = rng.normal(0, 1, k), rng.uniform(0.3, 1.5, k), rng.choice([2.0, np.inf], k)
    got = M.rank_summary(mu, sig, df, n, seed=5, top_k=3, absolute=True, ci_z=M.CI_Z)
    ranks = _ranks(mu, sig, df, n, 5, absolute=True)
    q = (1 - 0.95) / 2
    np.testing.assert_array_equal(got["rank_low"], np.quantile(ranks, q, axis=0, method="inverted_cdf"))
    np.testing.assert_array_equal(got["rank_high"], np.quantile(ranks, 1 - q, axis=0, method="inverted_cdf"))
    np.testing.assert_allclose(got["p_top"], (ranks <= 3).mean(axis=0), atol=1e-12)
    srt = np.sort(ranks, axis=0)
    for side, level in (("low", q), ("high", 1 - q)):
        h = M.CI_Z * np.sqrt(level * (1 - level) / n)
        lo = S.order_stat_index(n, max(0.0, level - h))
        hi = S.order_stat_index(n, min(1.0, level + h))
        np.testing.assert_array_equal(got[f"rank_{side}_ci"][0], srt[lo])
        np.testing.assert_array_equal(got[f"rank_{side}_ci"][1], srt[hi])


def test_rank_summary_plan_stops_at_whole_chunks():
    rng = np.random.default_rng(12)
    k = 400
    mu, sig, df = rng.normal(0, 1, k), rng.uniform(0.2, 0.6, k), np.full(k, 3.0)
    chunk = S.CHUNK_CELLS // k
    planned = M.rank_summary(mu, sig, df, 8 * chunk, seed=6, top_k=4, reference=2, pilot_draws=chunk,
                             plan=lambda by_col, n_pilot: int(1.5 * chunk))
    assert planned["draws"] == 2 * chunk
    direct = M.rank_summary(mu, sig, df, 2 * chunk, seed=6, top_k=4, reference=2, pilot_draws=chunk)
    for key in ("rank_low", "rank_high", "p_top", "p_best", "p_beats"):
        np.testing.assert_array_equal(planned[key], direct[key])


# ------------------------------------------------------------------------------------------- rank_summary vs the full matrix
def _ref_summary(mu, sigma, df, draws, seed, top_k, confidence, reference):
    """The full draws x k matrix from the same chunk seeds, columns drawn in point-estimate order (as
    rank_summary documents: ties in a draw go to the column placed first by estimate), one stable
    argsort per draw, np.quantile with inverted_cdf; P(beats) = share of draws above the reference."""
    mu, sigma, df = (np.asarray(v, dtype=float) for v in (mu, sigma, df))
    k = mu.size
    perm = np.argsort(-mu, kind="stable")
    score_s = np.concatenate([S.draw_matrix(mu[perm], sigma[perm], df[perm], d, np.random.default_rng(ss))
                              for d, ss in S.draw_chunks(draws, k, seed)])
    ranks = _ranks(mu, sigma, df, draws, seed)
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


@pytest.mark.parametrize("window_cells", [M.WINDOW_CELLS, 40])   # 40 cells: most quantiles miss -> fallback
@pytest.mark.parametrize("case", range(4))
def test_rank_summary_matches_full_matrix(monkeypatch, case, window_cells):
    rng = np.random.default_rng(100 + case)
    k = [7, 40, 120, 300][case]
    mu = rng.normal(0, 1, k)
    mu[: k // 5] = mu[0]                                  # ties in the point estimates
    sigma = rng.uniform(0.05, 1.0, k)
    df = rng.uniform(1.5, 12, k)
    df[rng.random(k) < 0.3] = np.inf                      # some normal columns
    monkeypatch.setattr(S, "CHUNK_CELLS", 997)            # many small chunks
    monkeypatch.setattr(M, "WINDOW_CELLS", window_cells)
    monkeypatch.setattr(M, "BLOCK_CELLS", 64 if case % 2 else M.BLOCK_CELLS)   # many column blocks
    draws, top_k, conf, ref = 1500, 3, [0.95, 0.9, 0.8, 0.5][case], k // 2
    got = M.rank_summary(mu, sigma, df, draws, seed=case, top_k=top_k, confidence=conf, reference=ref)
    _check(got, _ref_summary(mu, sigma, df, draws, case, top_k, conf, ref))


def test_rank_summary_reproducible_and_bounded():
    mu, sig, df = np.linspace(0, 1, 50), np.full(50, 0.3), np.full(50, 4.0)
    a = M.rank_summary(mu, sig, df, 3000, seed=7)
    b = M.rank_summary(mu, sig, df, 3000, seed=7)
    for c in a:
        np.testing.assert_array_equal(a[c], b[c])
    assert a["p_best"].sum() == pytest.approx(1.0, abs=1e-12)
    assert (a["rank_low"] <= a["rank_high"]).all() and a["rank_low"].min() >= 1 and a["rank_high"].max() <= 50


def test_rank_summary_is_the_engine_run():
    mu, sig, df = _case(30, "mixed", 3)
    a = M.rank_summary(mu, sig, df, 700, seed=2, top_k=4, reference=1, ci_z=M.CI_Z, kth=True)
    b = M.RankDraws(mu, sig, df, 700, 2, top_k=4, reference=1, ci_z=M.CI_Z, kth=True).run()
    assert a.keys() == b.keys()
    for key in a:
        np.testing.assert_array_equal(np.asarray(a[key]), np.asarray(b[key]))


@pytest.mark.parametrize("k", [1, 2, 5])
@pytest.mark.parametrize("draws", [1, 2, 7, 60])
@pytest.mark.parametrize("kind", ["mixed", "equal", "tiny", "huge", "both"])
def test_rank_summary_edge_cases(k, draws, kind):
    mu, sigma, df = _case(k, kind)
    for top_k, conf, ref in [(1, 0.95, None), (2, 1e-9, 0), (k + 3, 1 - 1e-9, k - 1), (1, 0.5, k // 2)]:
        got = M.rank_summary(mu, sigma, df, draws, seed=3, top_k=top_k, confidence=conf, reference=ref)
        _check(got, _ref_summary(mu, sigma, df, draws, 3, top_k, conf, ref))
        assert got["p_best"].sum() == pytest.approx(1.0, abs=1e-12)
        assert got["p_top"].sum() == pytest.approx(min(top_k, k), abs=1e-9)


def test_rank_summary_without_candidates():
    out = M.rank_summary([], [], [], 100, seed=0, ci_z=M.CI_Z)
    assert out["draws"] == 100 and out["p_best"].size == 0 and out["rank_low_ci"][0].size == 0


@pytest.mark.parametrize("conf", [0.0, 1e-6, 0.5, 0.95, 0.999999, 1.0])
def test_rank_summary_confidence_extremes(conf):
    mu, sigma, df = _case(40, "mixed", 1)
    got = M.rank_summary(mu, sigma, df, 333, seed=5, top_k=4, confidence=conf, reference=7)
    _check(got, _ref_summary(mu, sigma, df, 333, 5, 4, conf, 7))
    assert (got["rank_low"] <= got["rank_high"]).all()


@pytest.mark.parametrize("kind", ["mixed", "tiny", "both"])
@pytest.mark.parametrize("patch", [
    {"WINDOW_CELLS": 1},                                       # windows squeezed to one rank: fallback
    {"WINDOW_CELLS": 5, "FALLBACK_CELLS": 1},                  # fallback one column at a time, 1-draw pilot
    {"FALLBACK_CELLS": 7, "pilot_draws": 3},                   # pilot smaller than a chunk of draws
    {"CHUNK_CELLS": 1},                                        # one draw per chunk: hundreds of tasks
    {"CHUNK_CELLS": 37, "BLOCK_CELLS": 1},                     # many chunks, one column per bincount
    {"pilot_draws": 1, "CHUNK_CELLS": 50},                     # a tiny pilot: windows often miss
])
def test_rank_summary_paths(monkeypatch, patch, kind):
    pilot = patch.get("pilot_draws", M.PILOT_DRAWS)
    for name, value in patch.items():
        if name != "pilot_draws":
            monkeypatch.setattr(S if name == "CHUNK_CELLS" else M, name, value)
    mu, sigma, df = _case(23, kind, 2)
    for draws in (2, 7, 301):
        got = M.rank_summary(mu, sigma, df, draws, seed=draws, top_k=3, confidence=0.9, reference=0,
                             pilot_draws=pilot)
        _check(got, _ref_summary(mu, sigma, df, draws, draws, 3, 0.9, 0))


@pytest.mark.parametrize("workers", [1, 3])
def test_rank_summary_workers_give_the_same_numbers(monkeypatch, workers):
    monkeypatch.setattr(S, "CHUNK_CELLS", 64)                 # ~ 3 draws per chunk at k = 20
    mu, sigma, df = _case(20, "mixed", 4)
    monkeypatch.setattr(_parallel, "n_workers", lambda n: workers)
    got = M.rank_summary(mu, sigma, df, 400, seed=9, top_k=2, confidence=0.8, reference=19, pilot_draws=10)
    _check(got, _ref_summary(mu, sigma, df, 400, 9, 2, 0.8, 19))
    monkeypatch.setattr(M, "WINDOW_CELLS", 3)                 # and through the fallback
    got = M.rank_summary(mu, sigma, df, 400, seed=9, top_k=2, confidence=0.8, reference=19, pilot_draws=10)
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
    real = M.draw_matrix
    calls = {"n": 0}
    k, draws = 10, 200
    monkeypatch.setattr(S, "CHUNK_CELLS", 10 * k)            # 10 draws per chunk: 20 chunks
    monkeypatch.setattr(_parallel, "n_workers", lambda n: workers)
    pilot = M.PILOT_DRAWS
    if where == "pilot":
        pilot, fail_at = 100, 3                               # 10 pilot chunks; the 3rd fails
    elif where == "after_pilot":
        pilot, fail_at = 20, 3                                # 2 pilot chunks; the 3rd chunk fails
    else:
        monkeypatch.setattr(M, "WINDOW_CELLS", 1)             # every quantile goes to the fallback
        fail_at = draws // 10 + 3                             # the 3rd chunk drawn again

    def flaky(*args, **kw):
        with threading.Lock():
            calls["n"] += 1
            n = calls["n"]
        if n == fail_at:
            raise RuntimeError("boom in chunk")
        return real(*args, **kw)

    monkeypatch.setattr(M, "draw_matrix", flaky)
    mu, sigma, df = _case(k, "mixed", 5)
    box = _run_with_timeout(lambda: M.rank_summary(mu, sigma, df, draws, seed=1, reference=0, pilot_draws=pilot))
    assert isinstance(box.get("error"), RuntimeError), box
    # and the module still works afterwards (no state left behind)
    monkeypatch.setattr(M, "draw_matrix", real)
    _check(M.rank_summary(mu, sigma, df, draws, seed=1, reference=0, pilot_draws=pilot),
           _ref_summary(mu, sigma, df, draws, 1, 5, 0.95, 0))


def test_rank_summary_reference_out_of_range_is_an_error():
    # callers pass a valid column; a wrong one must fail loudly rather than give numbers
    mu, sigma, df = _case(4, "mixed")
    with pytest.raises(IndexError):
        M.rank_summary(mu, sigma, df, 10, reference=4)


def test_student_t_quantile_of_the_draws():
    # the conditioned draws use the one-sided t quantile (screenlab.uncertainty.t_ppf; scipy.stats.t.ppf
    # / scipy.stats.norm.ppf as the reference), normal where draw_matrix draws normal
    p = np.array([1e-9, 0.01, 0.5, 0.975, 0.999])
    df = np.array([3.0, np.inf, 2e4, np.nan, 12.0])
    exp = [stats.t.ppf(1e-9, 3), stats.norm.ppf(0.01), stats.norm.ppf(0.5), stats.norm.ppf(0.975),
           stats.t.ppf(0.999, 12)]
    np.testing.assert_allclose(M._std_ppf(p, df), exp, rtol=1e-10)
