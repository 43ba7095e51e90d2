"""Adaptive Monte Carlo rank statistics: as many draws as the reported numbers need, no more.

:func:`screenlab.stats.ranking.rank_summary` ranks every candidate in every one of a fixed number
of draws. Most of that work serves nothing: the rank interval of a candidate placed 1,500th is
known well enough after a few thousand draws, and whether a candidate is in the top 5 is only in
doubt for the few that can get there. :func:`adaptive_rank_summary` therefore works in two phases:

1. **Rank intervals.** Every candidate is ranked in every draw (:func:`rank_summary`), for as many
   draws as make the reported rank bounds *stable*: the distribution-free 95 % confidence interval
   of each bound (the ranks at the order statistics ``n q -/+ 1.96 sqrt(n q (1 - q))``, a binomial
   argument on the order statistics; any text on order statistics, e.g. David & Nagaraja, *Order
   Statistics*, 3rd ed., section 7.1, from memory) lies within :func:`rank_tolerance` of the bound:
   one rank, or :data:`RANK_TOL_REL` of the candidate's rank-interval width when that is more.
   The number of draws is planned from the first :data:`~screenlab.stats.ranking.PILOT_DRAWS`
   draws (the half-width shrinks as 1/sqrt(n)) and checked afterwards (``rank_bound_stable``).
2. **Probabilities.** P(top K), P(best) and P(beats the benchmark) are drawn further until the Monte
   Carlo standard error of every one of them is below ``mc_se`` (default :data:`MC_SE`; the SE of
   a share x/n is sqrt(p (1 - p) / n), with p = (x + 1/2) / (n + 1) so that a share of 0 or 1 is not
   taken as exact). Only the candidates that matter are drawn in every draw: the *contenders*,
   which have a real chance of scoring above a threshold T placed so that at least K candidates
   are almost surely above it. (P(beats the benchmark) is pairwise: the candidates whose value is
   still uncertain are drawn further together with the benchmark alone, no ranking needed.) The
   others ("resolved") are not ignored, which would bias the result, but
   drawn exactly in distribution at a fraction of the cost: for each one the number of draws in
   which it scores above T is Binomial(n, P(X > T)) (P from the t distribution:
   ``scipy.special.stdtr``), those draws are chosen at random, and its score there is drawn from
   the distribution conditioned on exceeding T (inverse CDF). A draw in which fewer than K scores
   reach T (rare by the choice of T) gets every resolved candidate's score below T as well (drawn
   by rejection). In every other draw the top K and the best are among the scores above T, so
   they are found among those scores alone. Every probability is thus an unbiased Monte Carlo
   estimate over all draws, for every candidate.

The result has the keys of :func:`rank_summary` plus ``draws`` (draws behind the probabilities),
``draws_ranked`` (draws in which every candidate was ranked), ``mc_se`` (the largest Monte Carlo SE
of a reported probability), ``rank_bound_halfwidth`` (the largest CI half-width of a rank bound, in
ranks), ``rank_bound_stable``, ``n_contenders`` and ``threshold``.
"""
from __future__ import annotations

import numpy as np
from scipy import special as _sp

from screenlab.stats.ranking import (CHUNK_CELLS, NORMAL_DF, _executor, _order_desc, _order_stat_index, draw_matrix,
                                     rank_summary)

#: target Monte Carlo standard error of every reported probability
MC_SE = 0.005
#: a rank bound is stable when its 95 % CI lies within max(1 rank, RANK_TOL_REL x the candidate's
#: rank-interval width, RANK_TOL_POS x its lower rank bound): ranks near the top are held to a rank
RANK_TOL_REL = 0.10
RANK_TOL_POS = 0.02
#: the draws are planned for this share of candidates' bounds to be stable (the share reached is reported)
RANK_STABLE_SHARE = 0.95
#: z of the rank bounds' confidence intervals
CI_Z = 1.959963984540054
#: draws in which every candidate is ranked: at least, at most
MIN_RANK_DRAWS = 2000
MAX_RANK_DRAWS = 10000
#: draws behind the probabilities, at most
MAX_DRAWS = 400_000
#: a resolved candidate exceeds the threshold in at most this share of draws
TAIL_EACH = 0.02
#: the threshold is this quantile of the K-th best score seen in the ranked draws
KTH_QUANTILE = 0.005


def rank_tolerance(rank_low, rank_high) -> np.ndarray:
    """Allowed half-width (ranks) of a rank bound's confidence interval (see the module docstring)."""
    lo, hi = np.asarray(rank_low, float), np.asarray(rank_high, float)
    return np.maximum(np.maximum(1.0, RANK_TOL_REL * (hi - lo)), RANK_TOL_POS * lo)


def share_se(count, n) -> np.ndarray:
    """Monte Carlo SE of a share ``count / n`` (module docstring)."""
    count, n = np.asarray(count, float), np.asarray(n, float)
    p = (count + 0.5) / (n + 1.0)
    return np.sqrt(p * (1.0 - p) / n)


def _normal_cols(df: np.ndarray) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        return ~(np.isfinite(df) & (df > 0) & (df <= NORMAL_DF))


def _std_sf(z: np.ndarray, df: np.ndarray) -> np.ndarray:
    """P(T > z) for Student t(df) (normal where draw_matrix draws normal)."""
    norm = _normal_cols(df)
    out = np.empty(np.broadcast(z, df).shape)
    out[...] = _sp.ndtr(-z) if norm.all() else np.where(norm, _sp.ndtr(-z), _sp.stdtr(np.where(norm, 1.0, df), -z))
    return out


def _std_ppf(p: np.ndarray, df: np.ndarray) -> np.ndarray:
    """The p quantile of Student t(df) (normal where draw_matrix draws normal)."""
    norm = _normal_cols(df)
    with np.errstate(over="ignore", invalid="ignore"):
        return np.where(norm, _sp.ndtri(p), _sp.stdtrit(np.where(norm, 1.0, df), p))


def tail_probability(mu, sigma, df, x, absolute: bool = False) -> np.ndarray:
    """P(score > x) per candidate, score = mu + sigma T_df (or its absolute value)."""
    mu, sigma, df = (np.asarray(v, float) for v in (mu, sigma, df))
    with np.errstate(divide="ignore", invalid="ignore"):
        up = _std_sf((x - mu) / sigma, df)
        if absolute:
            up = up + (1.0 - _std_sf((-x - mu) / sigma, df)) if x >= 0 else np.ones_like(mu)
    return np.clip(up, 0.0, 1.0)


def _draw_above(mu, sigma, df, x, absolute: bool, rng: np.random.Generator) -> np.ndarray:
    """One score per entry, drawn from its distribution conditioned on exceeding ``x`` (inverse CDF)."""
    n = mu.size
    u = rng.random(n)
    with np.errstate(divide="ignore", invalid="ignore"):
        p_up = _std_sf((x - mu) / sigma, df)
        if not absolute:
            return mu + sigma * -_std_ppf(u * p_up, df)     # P(T > t) = u p_up  <=>  t = -ppf(u p_up)
        p_dn = 1.0 - _std_sf((-x - mu) / sigma, df)        # P(score < -x)
        upper = rng.random(n) * (p_up + p_dn) < p_up
        hi = mu + sigma * -_std_ppf(u * p_up, df)
        lo = mu + sigma * _std_ppf(u * p_dn, df)
        return np.abs(np.where(upper, hi, lo))


def _draw_below(mu, sigma, df, x, absolute: bool, rng: np.random.Generator) -> np.ndarray:
    """One float32 score per entry, conditioned on being below ``x`` (rejection: the event has
    probability >= 1 - TAIL_EACH, so few rounds)."""
    out = draw_matrix(mu, sigma, df, 1, rng)[0]
    if absolute:
        np.abs(out, out=out)
    bad = np.flatnonzero(out >= x)
    while bad.size:                                  # a loop over rejection rounds, not entries
        new = draw_matrix(mu[bad], sigma[bad], df[bad], 1, rng)[0]
        if absolute:
            np.abs(new, out=new)
        out[bad] = new
        bad = bad[new >= x]
    return out


def _distinct_rows(cols: np.ndarray, d: int, rng: np.random.Generator) -> np.ndarray:
    """A random draw index for every entry, distinct among the entries of the same column (so that
    each column's m entries are a uniform random m-subset of the d draws)."""
    rows = rng.integers(0, d, cols.size)
    while True:                                      # a loop over (rare) rounds of duplicates
        key = cols.astype(np.int64) * d + rows
        _, first = np.unique(key, return_index=True)
        dup = np.ones(cols.size, bool)
        dup[first] = False
        if not dup.any():
            return rows
        rows[dup] = rng.integers(0, d, int(dup.sum()))


def _phase_b(mu, sigma, df, absolute, pos, D, R, p_R, thr, draws, seq, top_k):
    """P(top K) and P(best) counts of every candidate over ``draws`` new draws: the D columns drawn
    in every draw, the R ones only where they score above ``thr`` (and in full in the draws where
    fewer than K scores reach it)."""
    k = mu.size
    perm = np.argsort(pos)                           # position -> candidate
    D = D[np.argsort(pos[D], kind="stable")]         # drawn in every draw, in point-estimate order (ties)
    mu_d, sig_d, df_d = mu[D], sigma[D], df[D]
    thr32 = np.float32(thr)
    expected = float(np.sum(p_R)) if R.size else 0.0
    rows_per = max(1, CHUNK_CELLS // max(1, D.size + int(4 * expected) + 1, int(0.02 * k)))
    sizes = [min(rows_per, draws - s) for s in range(0, draws, rows_per)]
    seeds = seq.spawn(len(sizes))

    def tally(top, best, scores, ids):
        """Top K and best of each row of ``scores`` (candidate ``ids`` per cell, columns in tie order)."""
        o = _order_desc(scores, overwrite=True)
        first = np.take_along_axis(ids, o[:, :top_k], axis=1) if ids.ndim == 2 else ids[o[:, :top_k]]
        top += np.bincount(first.ravel(), minlength=k)
        best += np.bincount(first[:, 0], minlength=k)

    def one(d, ss):
        rng = np.random.default_rng(ss)
        top = np.zeros(k, np.int64)
        best = np.zeros(k, np.int64)
        s = draw_matrix(mu_d, sig_d, df_d, d, rng)
        if absolute:
            np.abs(s, out=s)
        # the resolved candidates above the threshold: how many draws each, which, and their scores
        m = rng.binomial(d, p_R) if R.size else np.zeros(0, np.int64)
        cols = np.repeat(R, m)
        rows = _distinct_rows(cols, d, rng) if cols.size else np.zeros(0, np.int64)
        vals = _draw_above(mu[cols], sigma[cols], df[cols], thr, absolute, rng).astype(np.float32) \
            if cols.size else np.zeros(0, np.float32)
        n_exc = np.bincount(rows, minlength=d)
        rare = np.count_nonzero(s >= thr32, axis=1) + n_exc < top_k
        plain = np.flatnonzero(~rare & (n_exc == 0))
        if plain.size:                               # the top K are among the drawn columns
            tally(top, best, s[plain], D)
        extra = np.flatnonzero(~rare & (n_exc > 0))
        if extra.size:                               # ... and the few resolved ones above the threshold
            width = int(n_exc[extra].max())
            where = np.full(d, -1, np.int64)
            where[extra] = np.arange(extra.size)
            sc = np.full((extra.size, D.size + width), -np.inf, np.float32)
            ids = np.zeros((extra.size, D.size + width), np.int64)
            sc[:, :D.size] = s[extra]
            ids[:, :D.size] = D
            sel = where[rows] >= 0
            r_i, c_i, v_i = where[rows[sel]], cols[sel], vals[sel]
            o = np.lexsort((pos[c_i], r_i))          # per row, in point-estimate order
            r_i, c_i, v_i = r_i[o], c_i[o], v_i[o]
            slot = np.arange(r_i.size) - np.searchsorted(r_i, r_i, side="left")
            sc[r_i, D.size + slot] = v_i
            ids[r_i, D.size + slot] = c_i
            tally(top, best, sc, ids)
        rr = np.flatnonzero(rare)
        if rr.size:                                  # fewer than K above the threshold: every score
            where = np.full(d, -1, np.int64)
            where[rr] = np.arange(rr.size)
            full = np.full((rr.size, k), -np.inf, np.float32)              # columns in point-estimate order
            full[:, pos[D]] = s[rr]
            if R.size:
                cell_r = np.repeat(np.arange(rr.size), R.size)
                cell_c = np.tile(R, rr.size)
                full[cell_r, pos[cell_c]] = _draw_below(mu[cell_c], sigma[cell_c], df[cell_c], thr32, absolute, rng)
            sel = where[rows] >= 0
            full[where[rows[sel]], pos[cols[sel]]] = vals[sel]
            tally(top, best, full, perm)
        return top, best

    top = np.zeros(k, np.int64)
    best = np.zeros(k, np.int64)
    with _executor(len(sizes)) as pool:
        for f in [pool.submit(one, d, ss) for d, ss in zip(sizes, seeds)]:
            t_c, b_c = f.result()
            top += t_c
            best += b_c
    return top, best


def _threshold(mu, sigma, df, top_k: int, absolute: bool) -> float:
    """A score that at least ``top_k`` candidates exceed each with probability >= 1 - eps
    (eps = min(1e-3, 0.01 / K)): the K-th largest of the candidates' eps-quantiles."""
    eps = min(1e-3, 0.01 / max(1, top_k))
    q = _std_ppf(np.full(mu.size, eps), df)          # < 0
    low = mu + sigma * q
    if absolute:                                     # |X| >= |mu| - sigma |q| whenever X is within its quantiles
        low = np.maximum(0.0, np.abs(mu) + sigma * q)
    low = np.where(np.isfinite(low), low, -np.inf)
    kk = min(top_k, mu.size)
    return float(np.partition(low, mu.size - kk)[mu.size - kk])


def _plan(confidence: float):
    """The pilot -> number of draws rule of phase 1 (module docstring)."""
    alpha = (1 - confidence) / 2

    def plan(by_col: np.ndarray, n: int) -> int:
        r_lo = by_col[:, _order_stat_index(n, alpha)].astype(float)
        r_hi = by_col[:, _order_stat_index(n, 1 - alpha)].astype(float)
        tol = rank_tolerance(r_lo, r_hi)
        need = np.zeros(by_col.shape[0])
        for q, r in ((alpha, r_lo), (1 - alpha, r_hi)):
            h = CI_Z * np.sqrt(q * (1 - q) / n)
            a = by_col[:, _order_stat_index(n, max(0.0, q - h))].astype(float)
            b = by_col[:, _order_stat_index(n, min(1.0, q + h))].astype(float)
            need = np.maximum(need, n * (np.maximum(r - a, b - r) / tol) ** 2)
        want = float(np.quantile(need, RANK_STABLE_SHARE)) if need.size else 0.0
        return int(np.clip(want, MIN_RANK_DRAWS, MAX_RANK_DRAWS))

    return plan


def adaptive_rank_summary(mu, sigma, df, seed=0, *, top_k: int = 5, confidence: float = 0.95,
                          reference: int | None = None, absolute: bool = False, mc_se: float = MC_SE,
                          max_draws: int = MAX_DRAWS) -> dict:
    """Rank statistics of candidates with ``mu + sigma * T_df`` scores (higher is better) from as
    many draws as they need (module docstring). Same ``seed`` -> same output."""
    mu, sigma, df = (np.asarray(v, dtype=float).ravel() for v in (mu, sigma, df))
    k = mu.size
    top_k = max(1, int(top_k))
    a = rank_summary(mu, sigma, df, MAX_RANK_DRAWS, seed, top_k=top_k, confidence=confidence, reference=reference,
                     absolute=absolute, plan=_plan(confidence), ci_z=CI_Z, pilot_draws=MIN_RANK_DRAWS, kth=True)
    n_a = int(a["draws"])
    out = dict(a)
    out["draws_ranked"] = n_a
    if k == 0:
        out.update(draws=0, mc_se=0.0, rank_bound_halfwidth=0.0, rank_bound_stable=True, rank_bound_stable_share=1.0,
                   n_contenders=0, threshold=np.nan)
        return out
    half = np.zeros(k)
    for side in ("low", "high"):
        lo_ci, hi_ci = a[f"rank_{side}_ci"]
        half = np.maximum(half, np.maximum(a[f"rank_{side}"] - lo_ci, hi_ci - a[f"rank_{side}"]))
    share = float(np.mean(half <= rank_tolerance(a["rank_low"], a["rank_high"])))
    out["rank_bound_halfwidth"] = float(half.max())
    out["rank_bound_stable_share"] = share
    out["rank_bound_stable"] = share >= RANK_STABLE_SHARE

    top = np.rint(a["p_top"] * n_a).astype(np.int64)
    best = np.rint(a["p_best"] * n_a).astype(np.int64)
    has_ref = reference is not None
    beats = np.rint(np.nan_to_num(a["p_beats"]) * n_a).astype(np.int64)
    n_beats = np.full(k, n_a, np.int64)
    n = n_a
    kk = min(top_k, k)
    # the threshold: a low quantile of the K-th best score over the draws made (a fixed number for
    # the draws that follow, which stay exact whatever it is; it only decides how much work they are)
    kth = a.get("kth_score")
    thr = float(np.quantile(kth, KTH_QUANTILE)) if kth is not None and kth.size else \
        _threshold(mu, sigma, df, kk, absolute)
    p_exc = tail_probability(mu, sigma, df, thr, absolute)
    # resolved: those that rarely exceed the threshold (their few draws above it are drawn alone)
    resolved = p_exc <= TAIL_EACH
    pos = np.empty(k, np.int64)
    pos[np.argsort(-(np.abs(mu) if absolute else mu), kind="stable")] = np.arange(k)
    root = np.random.SeedSequence(seed)
    it = 0
    D = np.flatnonzero(~resolved)
    R = np.flatnonzero(resolved)
    n_beats_draws = n                                # draws behind the p_beats of the still uncertain ones

    def needed(count, nn):
        p = (count + 0.5) / (nn + 1.0)
        return p * (1 - p) / mc_se ** 2

    while True:                                      # a loop over a few rounds of more draws
        se_top, se_best = share_se(top, n), share_se(best, n)
        se_beats = share_se(beats, n_beats) if has_ref else np.zeros(k)
        if has_ref:
            se_beats[reference] = 0.0
        worst = max(float(se_top.max()), float(se_best.max()), float(se_beats.max()))
        if worst <= mc_se or max(n, n_beats_draws) >= max_draws:
            break
        seq = np.random.SeedSequence(root.entropy, spawn_key=(1 << 30, it))
        # the top K and the best: the contenders drawn, the others' draws above the threshold sampled
        want = max(float(needed(top, n).max()), float(needed(best, n).max()))
        if want > n:
            add = int(min(max_draws - n, max(1000, np.ceil(1.1 * want) - n)))
            t_c, b_c = _phase_b(mu, sigma, df, absolute, pos, D, R, p_exc[R], thr, add, seq, kk)
            top += t_c
            best += b_c
            n += add
        # P(beats the benchmark), pairwise: only the still uncertain ones, against the benchmark's own draws
        unsure = se_beats > mc_se
        if unsure.any():
            want_b = float((needed(beats, n_beats)[unsure]).max())
            U = np.flatnonzero(unsure)
            add_b = int(min(max_draws - int(n_beats[U].min()), max(1000, np.ceil(1.1 * want_b) - n_beats[U].min())))
            beats[U] += _beats_counts(mu, sigma, df, absolute, U, reference, add_b,
                                      np.random.SeedSequence(root.entropy, spawn_key=(1 << 30, it, 1)))
            n_beats[U] += add_b
            n_beats_draws = max(n_beats_draws, int(n_beats[U].max()))
        it += 1
    out["p_top"] = top / n
    out["p_best"] = best / n
    if has_ref:
        pb = beats / n_beats
        pb[reference] = np.nan
        out["p_beats"] = pb
    out.update(draws=int(max(n, n_beats_draws)), mc_se=worst, n_contenders=int(D.size), threshold=thr)
    return out


def _beats_counts(mu, sigma, df, absolute, U, reference, draws, seq) -> np.ndarray:
    """How often each candidate of U scores above the benchmark over ``draws`` new draws (pairs drawn
    together; no ranking needed)."""
    cols = np.append(U, reference)
    rows_per = max(1, CHUNK_CELLS // cols.size)
    sizes = [min(rows_per, draws - s) for s in range(0, draws, rows_per)]
    out = np.zeros(U.size, np.int64)

    def one(d, ss):
        sc = draw_matrix(mu[cols], sigma[cols], df[cols], d, np.random.default_rng(ss))
        if absolute:
            np.abs(sc, out=sc)
        return np.count_nonzero(sc[:, :-1] > sc[:, -1:], axis=0)

    with _executor(len(sizes)) as pool:
        for f in [pool.submit(one, d, ss) for d, ss in zip(sizes, seq.spawn(len(sizes)))]:
            out += f.result()
    return out


__all__ = ["MC_SE", "adaptive_rank_summary", "rank_tolerance", "share_se", "tail_probability"]
