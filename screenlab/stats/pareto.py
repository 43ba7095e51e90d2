"""Pareto sets over two or three metrics, with the share of joint draws in which each candidate is
on the front.

:func:`pareto` builds one candidate table per metric (:mod:`screenlab.stats.candidates`, each metric
with its direction: TOF and enhancement high, Ea low, ee by magnitude), counts per candidate the
candidates that dominate it on the point estimates (:func:`_dominator_counts`, O(k^1.5) for two or
three metrics) and names the first of them (:func:`_point_dominance`). With ``draws`` > 0,
:func:`front_share` draws every metric of every candidate independently (ignoring the correlation
of metrics of one candidate: TOF and Ea come from the same wells) and reports how often each is on
the front: two metrics by a sort and a running maximum (:func:`_front_2`), three by a block sweep
against a staircase (:func:`_front_3`), more by a witness-pruned pairwise test (:func:`_front_n`).
A candidate dominates another when it is at least as good on every metric and better on one.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.errors import UsageError
from screenlab.stats.candidates import (apply_requirements, candidate_table, get_metric, merge_codes,
                                        ranking_temperature, requirements)
from screenlab.stats.sampling import CHUNK_CELLS, desc_int32, draw_chunks, draw_matrix

#: names listed in ``dominated_by`` at most (``dominated_by_count`` has the full number)
MAX_DOMINATORS = 10


def pareto(kin, quality=None, metrics=("tof", "enhancement", "ea"), *, at_temperature_c: float | None = None,
           draws: int = 0, seed: int = 0, confidence: float = 0.95,
           catalysts: pd.DataFrame | None = None, require=(), enantiomers=None,
           include_transport_limited: bool = False) -> pd.DataFrame:
    """Pareto set over 2-3 metrics, each with its direction (TOF and enhancement high, Ea low,
    ee by magnitude).

    A candidate dominates another when it is at least as good on every metric and better on one
    (point estimates). Columns: ``catalyst, role, family``, one estimate column per metric (its
    export name, e.g. ``tof_per_h, enhancement, ea_kj_mol``), ``on_front`` (bool),
    ``dominated_by_count``, ``dominated_by`` (';'-joined names of the first :data:`MAX_DOMINATORS`
    dominating candidates in name order; the count has them all), ``p_front`` (with ``draws`` > 0:
    the share of joint draws in which the candidate is on the front; metrics drawn
    independently), ``flags, reason`` (candidates missing any metric, or clearly outside a
    requirement of ``require`` (as in :func:`rank_candidates`), are listed, not compared).
    Sorted: front first, then by dominated_by_count.
    """
    metrics = tuple(metrics)
    if not 2 <= len(metrics) <= 3 or len(set(metrics)) != len(metrics):
        raise UsageError("pareto needs two or three different metrics")
    specs = [get_metric(x) for x in metrics]
    reqs = requirements(require, kin.rates)
    t_rank = ranking_temperature(kin, at_temperature_c)
    tabs = [apply_requirements(candidate_table(kin, quality, metric=x, at_temperature_c=at_temperature_c,
                                                confidence=confidence, catalysts=catalysts, enantiomers=enantiomers,
                                                include_transport_limited=include_transport_limited),
                                kin, reqs, t_rank, confidence).set_index("catalyst") for x in metrics]
    base = tabs[0][["role", "family"]].copy()
    reasons = pd.concat([tb["reason"].rename(s.name) for tb, s in zip(tabs, specs)], axis=1)
    req_reason = tabs[0]["order"].eq(2) & (tabs[0]["reason"] != "")
    base["reason"] = [";".join(f"{k}: {v}" for k, v in row.items() if v) for row in reasons.to_dict("records")]
    if reqs:                                         # a requirement's reason once, not per metric
        base.loc[req_reason, "reason"] = tabs[0].loc[req_reason, "reason"]
    base["flags"] = merge_codes(*[tb["flags"].reindex(base.index).fillna("") for tb in tabs])
    for tb, s in zip(tabs, specs):
        base[s.column] = tb["estimate"].reindex(base.index)
    ok = (base["reason"] == "").to_numpy()
    names = base.index.to_numpy()[ok]
    sign = np.array([1.0 if s.higher_is_better else -1.0 for s in specs])
    absolute = [bool(tb["absolute"].reindex(base.index).fillna(False).to_numpy(bool)[ok].any()) for tb in tabs]
    mus = [tb["mu"].reindex(base.index).to_numpy(float)[ok] for tb in tabs]
    pts = np.column_stack([np.abs(x) if a else x for x, a in zip(mus, absolute)]) * sign
    cnt = np.zeros(len(base), dtype=np.int64)
    by = np.full(len(base), "", dtype=object)
    cnt[ok], by[ok] = _point_dominance(pts, names, MAX_DOMINATORS)
    base["on_front"] = False
    base.loc[ok, "on_front"] = cnt[ok] == 0
    base["dominated_by_count"] = pd.array(np.where(ok, cnt, 0), dtype="Int64")
    base.loc[~ok, "dominated_by_count"] = pd.NA
    base["dominated_by"] = by
    base["p_front"] = np.nan
    if draws > 0 and ok.sum() > 0:
        # t draws are symmetric, so sign * (mu + sigma T) is drawn as (sign * mu) + sigma T; an ee by
        # magnitude is folded as the ranking folds it, sign * |ee + sigma T| (it matters for an
        # interval that spans 0: drawing |ee| + sigma T would halve such a candidate's chances)
        params = []
        for tb, mu_i, fold, sg in zip(tabs, mus, absolute, sign):
            sig_i, df_i = (tb[c].reindex(names).to_numpy(float) for c in ("sigma", "df"))
            params.append((mu_i, sig_i, df_i, sg) if fold else (sg * mu_i, sig_i, df_i))
        base.loc[ok, "p_front"] = front_share(params, draws, seed)
    base = base.reset_index().rename(columns={"index": "catalyst"})
    base["_o"] = np.where(ok, 0, 1)
    base = base.sort_values(["_o", "on_front", "dominated_by_count", "catalyst"],
                            ascending=[True, False, True, True]).drop(columns="_o")
    cols = ["catalyst", "role", "family", *[s.column for s in specs], "on_front", "dominated_by_count",
            "dominated_by", "p_front", "flags", "reason"]
    out = base[cols].reset_index(drop=True)
    out.attrs = {"requirements": [q.text for q in reqs]}
    return out


def _dominance(pts: np.ndarray) -> np.ndarray:
    """pts: (draws, k, m) scores, higher better. Returns (draws, k, k): [d, i, j] = i dominates j."""
    ge = gt = None
    for c in range(pts.shape[2]):                    # metric by metric: no reduction over a short last axis
        a, b = pts[:, :, None, c], pts[:, None, :, c]
        ge = (a >= b) if ge is None else (ge & (a >= b))
        gt = (a > b) if gt is None else (gt | (a > b))
    return ge & gt


def _dominator_counts(pts: np.ndarray) -> np.ndarray:
    """Per row of ``pts`` (k x m, higher better): how many rows dominate it.

    Rows are sorted lexicographically, best first: a dominator (at least as good everywhere,
    better somewhere) always sorts before the row it dominates, so the dominators of sorted row p
    are the earlier rows at least as good on the other metrics, less the earlier exact duplicates
    (equal rows are neighbours). Two or three metrics: "earlier rows at least as good on metrics
    2 (and 3)" is counted in sqrt(k) blocks of rows - against each earlier block through a
    table of counts over that block's ranks (one binary search per metric and row), pairwise
    inside a block - O(k^1.5) in all. More metrics: pairwise against the earlier rows only, in
    blocks of :data:`CHUNK_CELLS`.
    """
    k, m = pts.shape
    if k == 0:
        return np.zeros(0, np.int64)
    order = np.lexsort(tuple(-pts[:, c] for c in reversed(range(m))))
    s = pts[order]
    n = np.zeros(k, np.int64)
    if m in (2, 3):
        rest = s[:, 1:]                              # metrics 2 (and 3)
        B = max(1, int(np.sqrt(k)))
        nb = -(-k // B)
        full = np.zeros((nb, k), np.int32)           # full[t, p]: rows of block t at least as good as p
        for t in range(nb):                          # a loop over sqrt(k) blocks, not over rows
            blk = rest[t * B:(t + 1) * B]
            srt = [np.sort(blk[:, j]) for j in range(m - 1)]
            # q in the block is at least as good as p on metric j exactly when at least as many of
            # the block's values lie below q as below p (counts from the block's sorted values)
            at_p = [np.searchsorted(srt[j], rest[:, j], side="left") for j in range(m - 1)]
            if m == 2:
                full[t] = blk.shape[0] - at_p[0]
            else:
                size = blk.shape[0] + 1
                below = [np.searchsorted(srt[j], blk[:, j], side="left") for j in range(2)]
                grid = np.bincount(below[0] * size + below[1], minlength=size * size).reshape(size, size)
                grid = grid[::-1, ::-1].cumsum(axis=0).cumsum(axis=1)[::-1, ::-1]   # rows >= (i, j)
                full[t] = grid[at_p[0], at_p[1]]
        block_of = np.arange(k) // B
        before = np.cumsum(full, axis=0, dtype=np.int64)     # rows of blocks 0..t
        n += np.where(block_of > 0, before[np.maximum(block_of - 1, 0), np.arange(k)], 0)
        pad = np.full((nb * B, m - 1), -np.inf)
        pad[:k] = rest
        pad = pad.reshape(nb, B, m - 1)
        inside = np.tri(B, B, -1, dtype=bool).T[None]        # [q, p]: q before p
        for j in range(m - 1):
            inside = inside & (pad[:, :, None, j] >= pad[:, None, :, j])
        n += inside.sum(axis=1).ravel()[:k]
        # equal rows never dominate each other, but were counted as "at least as good"
        n -= np.arange(k) - _run_start((s[1:] == s[:-1]).all(axis=1)[None])[0]
    else:
        step = max(1, CHUNK_CELLS // max(1, k * m))
        for p0 in range(0, k, step):                 # blocks of rows against all rows before them
            p1 = min(k, p0 + step)
            q, p = s[:p1, None, :], s[None, p0:p1, :]
            dom = (q >= p).all(axis=2) & (q > p).any(axis=2)
            n[p0:p1] = dom.sum(axis=0)
    out = np.empty(k, np.int64)
    out[order] = n
    return out


def _point_dominance(pts: np.ndarray, names: np.ndarray, cap: int) -> tuple[np.ndarray, np.ndarray]:
    """Per candidate (rows of pts, higher better): how many candidates dominate it, and the first
    ``cap`` of their names (in the order of ``names``) joined with ';'.

    The counts come from :func:`_dominator_counts`. The names: candidates are scanned as
    dominators in row order, block by block, and a candidate leaves the scan once it has
    ``min(count, cap)`` of them, so the work falls with every block instead of being k^2.
    """
    k, m = pts.shape
    cnt = _dominator_counts(pts)
    by = np.full(k, "", dtype=object)
    want = np.minimum(cnt, cap)
    have = np.zeros(k, np.int64)
    todo = np.flatnonzero(want > 0)
    ii, jj = [], []
    j0 = 0
    while todo.size and j0 < k:
        step = max(1, CHUNK_CELLS // max(1, todo.size * m))
        blk, sub = pts[j0:j0 + step], pts[todo]
        ge = gt = None
        for c in range(m):                           # metric by metric: no reduction over a short axis
            x, y = blk[None, :, c], sub[:, None, c]
            ge = (x >= y) if ge is None else (ge & (x >= y))
            gt = (x > y) if gt is None else (gt | (x > y))
        dom = ge & gt                                # dom[t, q]: row j0 + q dominates todo[t]
        keep = dom & (np.cumsum(dom, axis=1) <= (want[todo] - have[todo])[:, None])
        t, q = np.nonzero(keep)
        ii.append(q + j0)
        jj.append(todo[t])
        have[todo] += keep.sum(axis=1)
        todo = todo[have[todo] < want[todo]]
        j0 += step
    if ii:
        i, j = np.concatenate(ii), np.concatenate(jj)
        o = np.lexsort((i, j))
        joined = pd.Series(names[i[o]]).groupby(j[o], sort=True).agg(";".join)
        by[joined.index.to_numpy()] = joined.to_numpy()
    return cnt, by


def _lex_order(p1: np.ndarray, p2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row of two (draws, k) score matrices: the columns sorted by p1 then p2, both highest
    first, and ``same`` (draws, k - 1): sorted neighbours equal on both.

    float32: one argsort of 64-bit keys (p1's order-preserving integer in the high word, p2's in
    the low word); otherwise two stable argsorts."""
    if p1.dtype == np.float32 and p2.dtype == np.float32:
        key = np.empty(p1.shape, np.int64)
        words = key.view(np.int32).reshape(*p1.shape, 2)
        hi, lo = (1, 0) if np.little_endian else (0, 1)
        desc_int32(p1, out=words[..., hi])
        low = desc_int32(p2, out=words[..., lo])
        low ^= np.int32(-2 ** 31)                    # the low word compares unsigned: shift its order
        order = np.argsort(key, axis=1)
        ks = np.take_along_axis(key, order, axis=1)
        return order, ks[:, 1:] == ks[:, :-1]
    o2 = np.argsort(-p2, axis=1, kind="stable")
    order = np.take_along_axis(o2, np.argsort(-np.take_along_axis(p1, o2, axis=1), axis=1, kind="stable"), axis=1)
    s1, s2 = np.take_along_axis(p1, order, axis=1), np.take_along_axis(p2, order, axis=1)
    return order, (s1[:, 1:] == s1[:, :-1]) & (s2[:, 1:] == s2[:, :-1])


def _run_start(same: np.ndarray) -> np.ndarray:
    """(draws, k) index of the first member of each sorted position's run of equal neighbours."""
    d, n = same.shape[0], same.shape[1] + 1
    new_run = np.ones((d, n), bool)
    new_run[:, 1:] = ~same
    return np.maximum.accumulate(np.where(new_run, np.arange(n), 0), axis=1)


def _front_2(p1: np.ndarray, p2: np.ndarray) -> np.ndarray:
    """(draws, k) on-front mask for two metrics (higher better), without pairwise comparisons.

    Sorted on metric 1 then metric 2 (best first), every dominator of a candidate comes before it,
    and so do its exact duplicates (which do not dominate it; they are its neighbours in the sort).
    A candidate is on the front exactly when everything before its run of duplicates is worse on
    metric 2: a running maximum of metric 2 along each row. Exact with ties.
    """
    order, same = _lex_order(p1, p2)
    q = np.take_along_axis(p2, order, axis=1)
    before = np.maximum.accumulate(q, axis=1)
    if same.any():                                   # duplicates: compare with what precedes their run
        start = _run_start(same)
        prev = np.take_along_axis(before, np.maximum(start - 1, 0), axis=1)
        front_sorted = (start == 0) | (prev < q)
    else:
        front_sorted = np.ones(q.shape, bool)
        front_sorted[:, 1:] = q[:, 1:] > before[:, :-1]
    out = np.zeros(q.shape, bool)
    np.put_along_axis(out, order, front_sorted, axis=1)
    return out


def _directions(m: int) -> np.ndarray:
    """A few non-negative weight vectors (m x n): the unit vectors and the grid {0, 1, 2}^m directions."""
    g = np.array(np.meshgrid(*[np.arange(3)] * m, indexing="ij")).reshape(m, -1).T
    g = g[g.sum(axis=1) > 0].astype(float)
    g /= np.linalg.norm(g, axis=1, keepdims=True)
    return np.unique(np.round(g, 12), axis=0).T


def _front_n(pts: np.ndarray) -> np.ndarray:
    """(draws, k) on-front mask for (draws, k, m) scores (higher better), any m.

    In each draw the maximiser of a positive-weighted sum of the (standardised) metrics is on the
    front, so a handful of weightings gives likely front members ("witnesses") at O(k) cost (with a
    zero weight, as the unit vectors have, a tie may make a witness a dominated one: harmless, as
    every dominance below is checked again). Every
    candidate is first tested against those witnesses; the pairwise test then runs only among the
    candidates no witness dominates (a candidate dominated by anyone is dominated by a front
    member, and front members always survive the first test, so the result is exact).
    """
    d, k, m = pts.shape
    with np.errstate(invalid="ignore", over="ignore"):   # infinite scores: any witness keeps it exact
        centre = pts.mean(axis=(0, 1))
        scale = pts.std(axis=(0, 1))
        scale[~(scale > 0)] = 1.0
        wits = np.argmax(((pts - centre) / scale) @ _directions(m), axis=1)    # (d, n_dir) front members
    dominated = np.zeros((d, k), bool)
    for w in range(wits.shape[1]):                   # a loop over a few weightings, not candidates
        a = np.take_along_axis(pts, wits[:, w, None, None], axis=1)           # (d, 1, m)
        dominated |= (a >= pts).all(axis=2) & (a > pts).any(axis=2)
    alive = ~dominated
    n_alive = alive.sum(axis=1)
    out = np.zeros((d, k), bool)
    by_size = np.argsort(n_alive, kind="stable")     # draws with few survivors together: padding stays small
    budget = CHUNK_CELLS * 4
    r0 = 0
    while r0 < d:                                    # batches of draws bound d' x s x s x m
        ns = n_alive[by_size[r0:]].astype(np.int64)
        over = np.flatnonzero((np.arange(ns.size) + 1) * np.maximum(ns, 1) ** 2 * m > budget)
        r1 = r0 + (max(1, int(over[0])) if over.size else ns.size)
        rows = by_size[r0:r1]
        s = max(1, int(n_alive[rows].max()))
        al = alive[rows]
        idx = np.argsort(~al, axis=1, kind="stable")[:, :s]                  # survivors first, padded
        valid = np.arange(s)[None, :] < n_alive[rows][:, None]
        sp = np.take_along_axis(pts[rows], idx[:, :, None], axis=1)
        sp[~valid] = -np.inf                         # padding dominates nobody
        front_s = ~_dominance(sp).any(axis=1) & valid
        blk = np.zeros((rows.size, k), bool)
        np.put_along_axis(blk, idx, front_s, axis=1)
        out[rows] = blk
        r0 = r1
    return out


#: candidates per block of the three-metric front sweep (:func:`_front_3`)
FRONT_BLOCK = 64
#: draws swept together by the three-metric front (several chunks of draws)
FRONT_DRAWS = 256


def _front_3(pts: np.ndarray) -> np.ndarray:
    """(draws, k) on-front mask for (draws, k, 3) scores (higher better), exact.

    Sorted on metrics 1 then 2 (best first), every dominator of a candidate comes before it, so
    a candidate is dominated exactly when an earlier one, other than its exact duplicates (its
    neighbours in the sort, which take the status of the first of them), is at least as good on
    metrics 2 and 3. Rows where two candidates tie on metrics 1 and 2 but not 3 (where the sort
    does not settle their order) are done by the exact pairwise test (:func:`_front_n`); continuous
    draws have them with probability 0. The candidates are swept in blocks of
    :data:`FRONT_BLOCK`: each block is tested against
    the two-metric front ("staircase") of everything before it, which holds every earlier point
    that matters (one that is not on it is beaten on both metrics by one that is), and pairwise
    within itself; the staircase then becomes the two-metric front of itself and the block
    (:func:`_front_2`). The staircase stays small (tens of points), so a sweep costs about
    draws x k x (block + staircase) comparisons instead of draws x k^2.
    """
    d, k, _ = pts.shape
    order, same12 = _lex_order(pts[:, :, 0], pts[:, :, 1])
    b = np.take_along_axis(pts[:, :, 1], order, axis=1)
    c = np.take_along_axis(pts[:, :, 2], order, axis=1)
    same = same12 & (c[:, 1:] == c[:, :-1])          # exact duplicates, neighbours in the sort
    tied = np.flatnonzero((same12 & ~same).any(axis=1))  # equal on metrics 1, 2 but not 3: order unsure
    on = np.zeros((d, k), bool)
    sb = np.full((d, 0), -np.inf, dtype=b.dtype)
    sc = np.full((d, 0), -np.inf, dtype=c.dtype)
    earlier = np.tri(FRONT_BLOCK, FRONT_BLOCK, -1, dtype=bool).T      # earlier[q, i]: q before i
    for p0 in range(0, k, FRONT_BLOCK):              # a sweep over blocks of candidates
        bb, cc = b[:, p0:p0 + FRONT_BLOCK], c[:, p0:p0 + FRONT_BLOCK]
        n = bb.shape[1]
        beaten = ((sb[:, None, :] >= bb[:, :, None]) & (sc[:, None, :] >= cc[:, :, None])).any(axis=2)
        beaten |= ((bb[:, :, None] >= bb[:, None, :]) & (cc[:, :, None] >= cc[:, None, :])
                   & earlier[:n, :n]).any(axis=1)
        on[:, p0:p0 + n] = ~beaten
        ub, uc = np.concatenate([sb, bb], axis=1), np.concatenate([sc, cc], axis=1)
        keep = _front_2(ub, uc) & np.isfinite(ub)
        size = keep.sum(axis=1)
        top = max(1, int(size.max()))
        idx = np.argsort(~keep, axis=1, kind="stable")[:, :top]          # staircase members first
        pad = np.arange(top)[None, :] >= size[:, None]
        sb = np.where(pad, -np.inf, np.take_along_axis(ub, idx, axis=1))
        sc = np.where(pad, -np.inf, np.take_along_axis(uc, idx, axis=1))
    on = np.take_along_axis(on, _run_start(same), axis=1)   # a duplicate shares its first member's status
    out = np.zeros((d, k), bool)
    np.put_along_axis(out, order, on, axis=1)
    if tied.size:                                    # rare rows: the exact pairwise test
        out[tied] = _front_n(pts[tied])
    return out


def front_share(params, draws: int, seed=0) -> np.ndarray:
    """Share of joint draws in which each candidate is on the Pareto front.

    ``params`` holds one ``(mu, sigma, df)`` triple per metric (arrays over the same candidates,
    oriented so that higher is better), or ``(mu, sigma, df, sign)`` for a metric whose draws are
    folded (``sign * |mu + sigma T|``, an ee by magnitude); metrics and candidates are drawn
    independently. Draws are
    made in chunks (each with its own seed from ``seed``): two metrics use the sort + running
    maximum front (:func:`_front_2`), three the block sweep against a staircase (:func:`_front_3`),
    more the witness-pruned pairwise test (:func:`_front_n`). Same seed -> same output.
    """
    k, m = len(params[0][0]), len(params)
    hits = np.zeros(k, np.int64)
    chunks = draw_chunks(draws, k, seed, per_cell=m)

    def drawn(d, ss):
        rng = np.random.default_rng(ss)
        out = []
        for p in params:
            x = draw_matrix(p[0], p[1], p[2], d, rng)
            if len(p) == 4:                          # folded: sign * |draw|
                np.abs(x, out=x)
                if p[3] < 0:
                    np.negative(x, out=x)
            out.append(x)
        return out

    # the three-metric sweep costs Python steps per block of candidates: its chunks are drawn as
    # always (same numbers) and swept together, at least FRONT_DRAWS draws at a time (a whole chunk
    # when one chunk holds more)
    group = max(1, FRONT_DRAWS // max(1, chunks[0][0])) if m == 3 and chunks else 1
    for g0 in range(0, len(chunks), group):
        cols = [c[0] if len(c) == 1 else np.concatenate(c)
                for c in zip(*(drawn(d, ss) for d, ss in chunks[g0:g0 + group]))]
        if m == 2:
            front = _front_2(cols[0], cols[1])
        else:
            cube = np.stack(cols, axis=2)
            front = _front_3(cube) if m == 3 else _front_n(cube)
        hits += front.sum(axis=0)
    return hits / draws


__all__ = ["MAX_DOMINATORS", "front_share", "pareto"]
