"""The adaptive Monte Carlo ranking (screenlab.stats.montecarlo) against closed forms, numerical
integration and the full-draw reference, and its Monte Carlo error claim.

Outside references: scipy.stats.norm / scipy.stats.t distributions and scipy.integrate.quad for
rank probabilities of independent candidates (P(i best) = int f_i(x) prod_j F_j(x) dx, P(i last) =
int f_i(x) prod_j (1 - F_j(x)) dx); numpy's sort / quantile on the full draws x k rank matrix for
the rank statistics of rank_summary's new options.
"""
from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

import screenlab.stats.ranking as R
from screenlab.stats import montecarlo as M


def _full_reference(mu, sigma, df, draws, seed, top_k, reference=None, absolute=False):
    """Every candidate ranked in every one of many draws (rank_summary), for comparison."""
    return R.rank_summary(mu, sigma, df, draws, seed, top_k=top_k, reference=reference, absolute=absolute)


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


def test_rank_candidates_reports_its_draws():
    from fake_kinetics import fake_kin

    r = R.rank_candidates(fake_kin([100.0, 90.0, 50.0], [10.0, 10.0, 5.0]), seed=1)
    mc = r.attrs["monte_carlo"]
    assert mc["mc_se"] <= mc["mc_se_target"] == M.MC_SE and mc["draws"] >= mc["draws_ranked"] > 0
    fixed = R.rank_candidates(fake_kin([100.0, 90.0, 50.0], [10.0, 10.0, 5.0]), seed=1, draws=400)
    assert fixed.attrs["monte_carlo"]["draws"] == 400 and fixed.attrs["monte_carlo"]["mc_se"] > M.MC_SE


# ------------------------------------------------------------------------------------------- rank_summary options
def _ranks(mu, sigma, df, draws, seed, absolute=False):
    """The full draws x k rank matrix from rank_summary's own chunks (same seeds), for the references."""
    key = np.abs(mu) if absolute else mu
    perm = np.argsort(-key, kind="stable")
    score = np.concatenate([R.draw_matrix(mu[perm], sigma[perm], df[perm], d, np.random.default_rng(ss))
                            for d, ss in R._chunks(draws, mu.size, seed)])
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
    got = R.rank_summary(mu, sig, df, n, seed=5, top_k=3, absolute=True, ci_z=M.CI_Z)
    ranks = _ranks(mu, sig, df, n, 5, absolute=True)
    q = (1 - 0.95) / 2
    np.testing.assert_array_equal(got["rank_low"], np.quantile(ranks, q, axis=0, method="inverted_cdf"))
    np.testing.assert_array_equal(got["rank_high"], np.quantile(ranks, 1 - q, axis=0, method="inverted_cdf"))
    np.testing.assert_allclose(got["p_top"], (ranks <= 3).mean(axis=0), atol=1e-12)
    srt = np.sort(ranks, axis=0)
    for side, level in (("low", q), ("high", 1 - q)):
        h = M.CI_Z * np.sqrt(level * (1 - level) / n)
        lo = R._order_stat_index(n, max(0.0, level - h))
        hi = R._order_stat_index(n, min(1.0, level + h))
        np.testing.assert_array_equal(got[f"rank_{side}_ci"][0], srt[lo])
        np.testing.assert_array_equal(got[f"rank_{side}_ci"][1], srt[hi])


def test_rank_summary_plan_stops_at_whole_chunks():
    rng = np.random.default_rng(12)
    k = 400
    mu, sig, df = rng.normal(0, 1, k), rng.uniform(0.2, 0.6, k), np.full(k, 3.0)
    chunk = R.CHUNK_CELLS // k
    planned = R.rank_summary(mu, sig, df, 8 * chunk, seed=6, top_k=4, reference=2, pilot_draws=chunk,
                             plan=lambda by_col, n_pilot: int(1.5 * chunk))
    assert planned["draws"] == 2 * chunk
    direct = R.rank_summary(mu, sig, df, 2 * chunk, seed=6, top_k=4, reference=2, pilot_draws=chunk)
    for key in ("rank_low", "rank_high", "p_top", "p_best", "p_beats"):
        np.testing.assert_array_equal(planned[key], direct[key])
