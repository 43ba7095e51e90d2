"""Adaptive Monte Carlo rank statistics: as many draws as the reported numbers need, no more.

:func:`rank_summary` (the fixed-draw engine, :class:`RankDraws`) ranks every candidate in every one
of a fixed number of draws. Most of that work serves nothing: the rank interval of a candidate placed
1,500th is known well enough after a few thousand draws, and whether a candidate is in the top 5 is only in
doubt for the few that can get there. :func:`adaptive_rank_summary` therefore works in two phases:

1. **Rank intervals.** Every candidate is ranked in every draw (:func:`rank_summary`), for as many
   draws as make the reported rank bounds *stable*: the distribution-free 95 % confidence interval
   of each bound (the ranks at the order statistics ``n q -/+ 1.96 sqrt(n q (1 - q))``, a binomial
   argument on the order statistics; any text on order statistics, e.g. David & Nagaraja, *Order
   Statistics*, 3rd ed., section 7.1, from memory) lies within :func:`rank_tolerance` of the bound:
   one rank, :data:`RANK_TOL_REL` of the candidate's rank-interval width or :data:`RANK_TOL_POS`
   of its lower rank bound, whichever is most. The number of draws is planned from the first
   :data:`MIN_RANK_DRAWS` draws (the half-width shrinks as 1/sqrt(n)) and checked afterwards
   (``rank_bound_stable``; ``rank_bound_stable_share`` of the candidates).
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
   they are found among those scores alone. Every draw is thus exact in distribution, for every
   candidate (the number of draws depends on the counts seen, so a probability is a consistent
   estimate with a bias of order 1/n, far below its Monte Carlo SE).

The result has the keys of :func:`rank_summary` (with ``rank_low_ci`` / ``rank_high_ci``, the
bounds' confidence intervals, and ``kth_score``, phase 1's K-th best score per draw) plus ``draws``
(draws behind the probabilities), ``draws_ranked`` (draws in which every candidate was ranked),
``mc_se`` (the largest Monte Carlo SE of a reported probability), ``rank_bound_halfwidth`` (the
largest CI half-width of a rank bound, in ranks), ``rank_bound_stable``,
``rank_bound_stable_share``, ``n_contenders`` and ``threshold``.
"""
from __future__ import annotations

import threading

import numpy as np
from scipy import special as _sp

from screenlab.stats.sampling import (CHUNK_CELLS, NORMAL_DF, draw_chunks, draw_matrix, executor, order_desc,
                                      order_stat_index, ranks_from_order)
from screenlab.uncertainty import t_ppf

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


#: cells of the banded rank histograms (candidates x window, int32) used for the rank intervals
WINDOW_CELLS = 1 << 24
#: histogram cells updated per bincount: bounds its temporary, and keeps it within a core's L2 cache
#: (scattered increments into a larger one miss the cache: 25 % more CPU at 11,000 candidates)
BLOCK_CELLS = 1 << 17
#: ranks kept in memory at once when a rank quantile falls outside its window (draws x candidates)
FALLBACK_CELLS = 1 << 24
#: draws whose ranks place the rank-histogram windows (kept in memory up to FALLBACK_CELLS ranks)
PILOT_DRAWS = 1000


class RankDraws:
    """The fixed-draw Monte Carlo engine of :func:`rank_summary` (see there for the arguments).

    The draws are made in chunks of at most :data:`CHUNK_CELLS` numbers (each with its own seed);
    each chunk is ranked (one integer-key sort per draw, :func:`order_desc`) and folded into running
    counts, so memory does not grow with ``draws``. The steps, one method each:

    1. :meth:`_draw_and_count`: the chunks are drawn and ranked on the worker threads and this
       one; the first ones (the pilot, at least ``pilot_draws`` draws) hand their ranks back,
       :meth:`_place_windows` places a banded rank histogram per candidate from them (and asks
       ``plan`` how many draws to make), the pilot is counted into it from its sorted ranks
       (:meth:`_count_sorted`) and every later chunk folds its ranks into it (:meth:`_fold`,
       :meth:`_count`);
    2. :meth:`_read_bounds`: each rank quantile (and its confidence interval's order statistics)
       read off the histogram's cumulative counts (:meth:`_read`);
    3. :meth:`_fallback`: a candidate whose quantile fell outside its window is resolved exactly by
       drawing the chunks again and keeping only that candidate's ranks.

    Columns are handled in point-estimate order (best first): column p is candidate ``perm[p]``.
    """

    def __init__(self, mu, sigma, df, draws: int, seed=0, *, top_k: int = 5, confidence: float = 0.95,
                 reference: int | None = None, absolute: bool = False, plan=None, ci_z: float | None = None,
                 pilot_draws: int = PILOT_DRAWS, kth: bool = False):
        mu, sigma, df = (np.asarray(v, dtype=float).ravel() for v in (mu, sigma, df))
        self.k = k = mu.size
        self.draws, self.top_k, self.absolute = draws, top_k, absolute
        self.plan, self.ci_z, self.kth = plan, ci_z, kth
        self.alpha = (1 - confidence) / 2
        self.perm = np.argsort(-(np.abs(mu) if absolute else mu), kind="stable")   # column p: the p-th by estimate
        self.mu_s, self.sig_s, self.df_s = mu[self.perm], sigma[self.perm], df[self.perm]
        self.ref_pos = None if reference is None or k == 0 else int(np.flatnonzero(self.perm == reference)[0])
        self.chunks = draw_chunks(draws, k, seed) if k else []
        self.n_used = len(self.chunks)               # chunks counted (set from the plan after the pilot)
        self.pilot_rows = min(draws, max(int(pilot_draws), 1), max(1, FALLBACK_CELLS // k)) if k else 0
        self.top = np.zeros(k, np.int64)
        self.best = np.zeros(k, np.int64)
        self.beats = np.zeros(k, np.int64)
        self.win = self.hist = None                  # placed from the pilot draws
        self.lock = threading.Lock()
        self.pending: list[np.ndarray] = []          # ranked chunks waiting to be counted
        self.windows_ready = threading.Event()

    # -- results -------------------------------------------------------------------------------

    def _empty(self) -> dict:
        k = self.k
        out = {"rank_low": np.ones(k, np.int64), "rank_high": np.ones(k, np.int64), "p_top": np.zeros(k),
               "p_best": np.zeros(k), "p_beats": np.full(k, np.nan), "draws": self.draws}
        if self.ci_z is not None:
            out["rank_low_ci"] = (np.ones(k, np.int64), np.ones(k, np.int64))
            out["rank_high_ci"] = (np.ones(k, np.int64), np.ones(k, np.int64))
        return out

    def run(self) -> dict[str, np.ndarray]:
        """Draw, rank and count; the result of :func:`rank_summary`."""
        out = self._empty()
        if self.k == 0:
            return out
        self._draw_and_count(out)
        self.chunks = self.chunks[:self.n_used]
        draws = int(sum(c[0] for c in self.chunks))
        out["draws"] = draws
        if self.pending:                             # the last, partial batch
            self._count(self.pending)
            self.pending.clear()
        unresolved = self._read_bounds(out, draws)
        if unresolved.any():
            self._fallback(out, np.flatnonzero(unresolved), draws)
        perm = self.perm
        out["p_top"][perm] = self.top / draws
        out["p_best"][perm] = self.best / draws
        if self.ref_pos is not None:
            out["p_beats"][perm] = self.beats / draws
        return out

    # -- drawing and ranking -------------------------------------------------------------------

    def _drawn(self, d, ss) -> np.ndarray:
        score = draw_matrix(self.mu_s, self.sig_s, self.df_s, d, np.random.default_rng(ss))
        if self.absolute:
            np.abs(score, out=score)
        return score

    def _ranked_chunk(self, chunk):
        """A chunk drawn and ranked: its ranks, top-K / best / beats counts and K-th best scores."""
        d, ss = chunk
        k, top_k, ref_pos = self.k, self.top_k, self.ref_pos
        score = self._drawn(d, ss)
        beats_c = (np.count_nonzero(score > score[:, [ref_pos]], axis=0) if ref_pos is not None
                   else np.zeros(k, np.int64))
        order = order_desc(score, overwrite=not self.kth)  # equal scores: the earlier column first
        kth_c = score[np.arange(d), order[:, min(top_k, k) - 1]] if self.kth else None
        del score
        top_c = np.bincount(order[:, :top_k].ravel(), minlength=k)
        best_c = np.bincount(order[:, 0], minlength=k)
        ranks = ranks_from_order(order, overwrite=True)
        return ranks, top_c, best_c, beats_c, kth_c

    def _task(self, chunk, pilot: bool, i: int):
        """Draw, rank and count one chunk; a pilot chunk hands its ranks back for the windows, any
        other waits until the windows are placed and folds its ranks into the histograms (when the
        plan keeps it)."""
        ranks, t_c, b_c, r_c, k_c = self._ranked_chunk(chunk)
        if not pilot:
            self.windows_ready.wait()
            if self.win is not None and i < self.n_used:   # None: placing the windows failed (raised)
                self._fold(ranks)
            ranks = None
        return ranks, t_c, b_c, r_c, k_c

    def _draw_and_count(self, out: dict):
        """Every chunk drawn, ranked and counted, on the worker threads and this one.

        The first chunks (at least ``pilot_rows`` draws, the pilot) place the rank windows: the
        worker threads take all of them but the last, which this thread draws and ranks meanwhile
        (numpy's generators, sorts and ufuncs release the GIL), so no core waits for the last pilot
        chunk alone. Once the windows are placed the plan says how many chunks to count in all:
        only those are handed to the workers (none is drawn in vain), which fold them into the
        histogram while this thread counts the pilot. Each chunk has its own seed, so the result
        does not depend on the threads or on which one drew a chunk.
        """
        chunks = self.chunks
        n_first = 0
        while n_first < len(chunks) and sum(c[0] for c in chunks[:n_first]) < self.pilot_rows:
            n_first += 1
        with executor(len(chunks)) as pool:
            others = [pool.submit(self._task, c, True, i) for i, c in enumerate(chunks[:n_first - 1])]
            try:
                last = self._task(chunks[n_first - 1], True, n_first - 1)
                firsts = [f.result() for f in others] + [last]
                pilot_sorted = self._place_windows([f[0] for f in firsts])
            finally:
                self.windows_ready.set()             # never leave a worker waiting
            rest = [pool.submit(self._task, c, False, i)
                    for i, c in enumerate(chunks[n_first:self.n_used], start=n_first)]
            self._count_sorted(pilot_sorted)         # the pilot, from its ranks sorted for the windows
            del pilot_sorted
            kths = []
            for f in firsts + [f.result() for f in rest]:
                self.top += f[1]
                self.best += f[2]
                self.beats += f[3]
                kths.append(f[4])
            if self.kth:
                out["kth_score"] = np.concatenate(kths)
            del firsts, others, rest

    # -- the banded rank histogram -------------------------------------------------------------

    def _plan_draws(self, by_col: np.ndarray, n_pilot: int):
        """How many chunks to count in all, from the pilot's ranks (``plan``)."""
        want = max(n_pilot, min(self.draws, int(self.plan(by_col, n_pilot))))
        ends = np.cumsum([c[0] for c in self.chunks])
        self.n_used = int(np.searchsorted(ends, want, side="left")) + 1

    def _window_spans(self, by_col: np.ndarray, n_pilot: int):
        """Per side (low, high quantile): each candidate's first window rank and window width."""
        k, alpha = self.k, self.alpha
        spread = 4 * np.sqrt(alpha * (1 - alpha) / n_pilot)
        first, wid = {}, {}
        for side, q in (("low", alpha), ("high", 1 - alpha)):
            # np.quantile(ranks, q -/+ spread, axis=0, method="inverted_cdf"), read off the sorted ranks
            lo_q = by_col[:, order_stat_index(n_pilot, max(0.0, q - spread))].astype(np.int64)
            hi_q = by_col[:, order_stat_index(n_pilot, min(1.0, q + spread))].astype(np.int64)
            margin = 8 + (hi_q - lo_q) // 4
            first[side] = np.clip(lo_q - margin, 1, k)
            wid[side] = np.minimum(hi_q + margin, k) - first[side] + 1
        total = wid["low"].sum() + wid["high"].sum()
        if total > WINDOW_CELLS:                      # keep the histogram bounded; misses go to the fallback
            for side in wid:
                wid[side] = np.maximum(1, (wid[side] * (WINDOW_CELLS / total)).astype(np.int64))
        return first, wid

    def _place_windows(self, pilot: list[np.ndarray]):
        """One banded rank histogram per candidate holding both rank windows.

        Each side (low, high quantile) gets a window of ranks [start, start + w) around the pilot's
        quantile. A candidate's cells are [below window 1, window 1, between, window 2, above]; the
        cell of a rank r is ``clip(r, lo1, hi1) + clip(r, lo2, hi2) + key0``, a sum of two clipped
        ramps that is strictly increasing over those classes, so one bincount counts both sides.
        When the two windows overlap they are merged into one (window 2 empty: lo2 = hi2), which
        both sides then read. Returns each candidate's pilot ranks, sorted (k x n_pilot).
        """
        k = self.k
        n_pilot = sum(len(r) for r in pilot)
        # each candidate's pilot ranks, sorted; as int16 when the ranks fit (numpy sorts those by
        # radix, a few times faster than a comparison sort of int32; the same sorted values)
        small = k < np.iinfo(np.int16).max
        by_col = np.ascontiguousarray(np.concatenate([r.T for r in pilot], axis=1, casting="same_kind",
                                                     dtype=np.int16 if small else pilot[0].dtype))   # rows contiguous
        by_col.sort(axis=1, kind="stable" if small else None)
        if self.plan is not None:                     # how many draws in all, from the pilot
            self._plan_draws(by_col, n_pilot)
        first, wid = self._window_spans(by_col, n_pilot)
        s1, e1 = first["low"], first["low"] + wid["low"]
        s2, e2 = first["high"], first["high"] + wid["high"]
        apart = s2 >= e1                              # window 2 starts after window 1 ends
        u0, u1 = np.where(apart, s1, np.minimum(s1, s2)), np.where(apart, e1, np.maximum(e1, e2))
        w1 = u1 - u0
        lo1, hi1 = u0 - 1, u1                         # clip(r, lo1, hi1) - lo1: 0 below, 1..w1, w1 + 1 above
        lo2 = np.where(apart, s2 - 1, 0)
        hi2 = np.where(apart, e2, 0)                  # merged: clip(r, 0, 0) = 0, no cells of its own
        size = (w1 + 2) + (hi2 - lo2)
        base = np.concatenate([[0], np.cumsum(size)[:-1]])
        hist = np.zeros(int(size.sum()), np.int32)    # counts <= draws
        ends = np.searchsorted(np.cumsum(size), np.arange(1, 1 + hist.size // BLOCK_CELLS) * BLOCK_CELLS)
        cuts = np.unique(np.concatenate([[0], np.minimum(ends + 1, k), [k]]))
        dt = pilot[0].dtype
        self.hist = hist
        self.win = {"base": base, "size": size, "blocks": list(zip(cuts[:-1].tolist(), cuts[1:].tolist())),
                    "lo1": lo1.astype(dt), "hi1": hi1.astype(dt), "lo2": lo2.astype(dt), "hi2": hi2.astype(dt),
                    "key0": (base - lo1 - lo2).astype(dt),
                    # per side: first rank of its window, its width and its first cell in the segment
                    "start": {"low": u0, "high": np.where(apart, s2, u0)},
                    "wid": {"low": w1, "high": np.where(apart, e2 - s2, w1)},
                    "off": {"low": np.ones(k, np.int64), "high": np.where(apart, w1 + 2, 1)},
                    "flush": -(-hist.size // k)}    # draws per count: at least the histogram's cells
        return by_col                                 # the pilot's ranks, sorted: :meth:`_count_sorted` counts them

    def _count_sorted(self, by_col: np.ndarray):
        """Fold the pilot into the histogram from its ranks already sorted per candidate (rows of
        ``by_col``): the same counts as :meth:`_count`, by binary search instead of a bincount.

        A rank r falls in cell ``#{t in T_c: t <= r}`` of candidate c, T_c being the thresholds
        lo1+1..hi1 and lo2+1..hi2 (the two clipped ramps of :meth:`_place_windows`), so the count of
        cell j is F(t_(j+1)) - F(t_j) with F(t) the number of c's ranks below t. With every row
        shifted by c (k + 2) the rows form one sorted array, and one searchsorted of all thresholds
        (each candidate's closed by the start of the next) gives every count at once; done one
        block of columns at a time (as :meth:`_count`), so the temporaries stay a block's size."""
        win, k = self.win, self.k
        base, size = win["base"], win["size"]
        lo1_all, hi1_all = win["lo1"].astype(np.int64), win["hi1"].astype(np.int64)
        lo2_all, hi2_all = win["lo2"].astype(np.int64), win["hi2"].astype(np.int64)
        for c0, c1 in win["blocks"]:
            m = c1 - c0
            flat = (by_col[c0:c1].astype(np.int64) + (np.arange(m, dtype=np.int64) * (k + 2))[:, None]).ravel()
            lo1, hi1, lo2, hi2 = lo1_all[c0:c1], hi1_all[c0:c1], lo2_all[c0:c1], hi2_all[c0:c1]
            n1 = hi1 - lo1                            # thresholds of each ramp per candidate
            per = n1 + (hi2 - lo2) + 1                # and the closing one (the next candidate's start)
            start = np.concatenate([[0], np.cumsum(per)[:-1]])
            j = np.arange(int(per.sum())) - np.repeat(start, per)     # position within the candidate
            r1 = np.repeat(n1, per)
            t = np.where(j < r1, np.repeat(lo1 + 1, per) + j, np.repeat(lo2 + 1, per) + (j - r1))
            t[start + per - 1] = k + 2                # closing query: above every rank
            t += np.repeat(np.arange(m, dtype=np.int64) * (k + 2), per)
            pos = np.searchsorted(flat, t, side="left")
            counts = np.diff(pos, prepend=0)
            h0, h1 = int(base[c0]), int(base[c1 - 1] + size[c1 - 1])
            with self.lock:
                self.hist[h0:h1] += counts.astype(np.int32)

    def _count(self, batch: list[np.ndarray]):
        """Fold ranked chunks into the shared histogram, one block of columns at a time (the
        bincounts run unlocked; candidate c's cells are hist[base[c]:base[c] + size[c]], so a block
        of columns has its own slice and the bincount temporary stays a block's size)."""
        win = self.win
        base, size = win["base"], win["size"]
        for c0, c1 in win["blocks"]:
            h0, h1 = int(base[c0]), int(base[c1 - 1] + size[c1 - 1])
            cols = batch[0][:, c0:c1] if len(batch) == 1 else np.concatenate([r[:, c0:c1] for r in batch])
            key = np.clip(cols, win["lo1"][c0:c1], win["hi1"][c0:c1])
            key += np.clip(cols, win["lo2"][c0:c1], win["hi2"][c0:c1])
            key += win["key0"][c0:c1] - h0
            add = np.bincount(key.ravel(), minlength=h1 - h0)
            with self.lock:
                self.hist[h0:h1] += add

    def _fold(self, ranks: np.ndarray):
        """Queue a ranked chunk; count the queue once it holds at least ``win["flush"]`` draws.

        Adding a bincount into the histogram touches every cell of it, so the draws are counted in
        batches at least as large as the histogram: that work then grows with the draws x
        candidates, not with the chunks x histogram (which grows as candidates^3)."""
        with self.lock:
            self.pending.append(ranks)
            if sum(len(r) for r in self.pending) < self.win["flush"]:
                return
            batch = self.pending[:]
            self.pending.clear()
        self._count(batch)

    # -- read-out ------------------------------------------------------------------------------

    def _levels(self, draws: int):
        """Per side: its quantile level, the order statistic of the rank bound and (with ``ci_z``)
        those of its distribution-free confidence interval."""
        alpha = self.alpha
        levels = {"low": alpha, "high": 1 - alpha}
        need = {"low": order_stat_index(draws, alpha) + 1, "high": order_stat_index(draws, 1 - alpha) + 1}
        extra = {}
        if self.ci_z is not None:                    # order statistics of the quantiles' confidence intervals
            for side, q in levels.items():
                h = self.ci_z * np.sqrt(q * (1 - q) / draws)
                extra[side] = [order_stat_index(draws, float(np.clip(q - h, 0, 1))) + 1,
                               order_stat_index(draws, float(np.clip(q + h, 0, 1))) + 1]
        return levels, need, extra

    def _read(self, cs, before, side: str, count: int) -> tuple[np.ndarray, np.ndarray]:
        """The rank at order statistic ``count`` from the window of ``side``, and whether it lies there.

        Within a candidate's segment the cumulative counts rise, so the window ranks still below the
        order statistic are a prefix of the window, found by one binary search in the cumulative
        counts ``cs`` of the whole histogram (``before``: draws counted in all earlier segments)."""
        win = self.win
        first_cell = win["base"] + win["off"][side]
        w = win["wid"][side]
        below = cs[first_cell - 1] - before          # draws ranked before the window
        reach = np.searchsorted(cs, before + count, side="left")   # first cell reaching the count
        short = np.clip(reach - first_cell, 0, w)    # window ranks still below the order statistic
        ok = (below < count) & (short < w)
        return np.where(ok, win["start"][side] + short, 0), ok

    def _read_bounds(self, out: dict, draws: int) -> np.ndarray:
        """Rank bounds (and their CIs) into ``out``; True where a candidate's quantile missed its window."""
        k, perm, hist = self.k, self.perm, self.hist
        _, need, extra = self._levels(draws)
        unresolved = np.zeros(k, bool)
        # all cells hold k x draws counts in all; int32 when that fits (add.accumulate: np.cumsum with
        # a dtype takes a far slower path)
        cs = np.add.accumulate(hist, dtype=np.int32) if k * draws < 2 ** 31 else np.cumsum(hist.astype(np.int64))
        seg0 = self.win["base"]
        before = cs[seg0] - hist[seg0]               # draws counted in all earlier segments
        for side in ("low", "high"):
            value, ok = self._read(cs, before, side, need[side])
            out[f"rank_{side}"][perm] = value
            unresolved |= ~ok
            if side in extra:
                pair = []
                for count in extra[side]:
                    v, ok_e = self._read(cs, before, side, count)
                    unresolved |= ~ok_e
                    arr_e = np.empty(k, np.int64)
                    arr_e[perm] = v
                    pair.append(arr_e)
                out[f"rank_{side}_ci"] = tuple(pair)
        return unresolved

    def _fallback(self, out: dict, todo: np.ndarray, draws: int):
        """Exact rank bounds of the columns ``todo``: the chunks drawn again, only their ranks kept."""
        perm = self.perm
        levels, _, extra = self._levels(draws)
        group = max(1, FALLBACK_CELLS // max(1, draws))
        for g0 in range(0, todo.size, group):
            sel = todo[g0:g0 + group]
            kept = np.empty((draws, sel.size), dtype=np.int32)
            row = 0
            for d, ss in self.chunks:
                score = self._drawn(d, ss)
                kept[row:row + d] = ranks_from_order(order_desc(score))[:, sel]
                row += d
            srt = np.sort(kept, axis=0) if extra else None
            for side, q in levels.items():
                out[f"rank_{side}"][perm[sel]] = np.quantile(kept, q, axis=0, method="inverted_cdf")
                for j, count in enumerate(extra.get(side, [])):
                    out[f"rank_{side}_ci"][j][perm[sel]] = srt[count - 1]


def rank_summary(mu, sigma, df, draws: int, seed=0, *, top_k: int = 5, confidence: float = 0.95,
                 reference: int | None = None, absolute: bool = False, plan=None,
                 ci_z: float | None = None, pilot_draws: int = PILOT_DRAWS,
                 kth: bool = False) -> dict[str, np.ndarray]:
    """Monte Carlo rank statistics of candidates with ``mu + sigma * T_df`` scores (higher is better).

    The draws are made in chunks of at most :data:`CHUNK_CELLS` numbers; each chunk is ranked
    (one integer-key sort per draw, :func:`~screenlab.stats.sampling.order_desc`) and folded into running counts, so memory
    does not grow with ``draws``:

    * ``p_top`` = P(rank <= top_k), ``p_best`` = P(rank 1), ``p_beats`` = P(score > the score of
      column ``reference``) (NaN without a reference; 0 for the reference itself);
    * ``rank_low`` / ``rank_high``: the ``(1 -/+ confidence) / 2`` quantiles of each candidate's rank
      over the draws, the same order statistics as ``np.quantile(ranks, q, axis=0,
      method="inverted_cdf")`` on the full draws x k rank matrix. They come from a banded rank
      histogram per candidate (a window of ranks per side placed around the quantile seen in the first
      ``pilot_draws`` draws, at most ``FALLBACK_CELLS // k``); a candidate whose quantile falls outside its window is resolved
      exactly by drawing the chunks again (each chunk has its own seed) and keeping only that
      candidate's ranks.

    Columns are handled in point-estimate order (best first). Same ``seed`` -> same output.

    ``absolute``: the scores are ``|mu + sigma * T_df|`` (ee by magnitude; point-estimate order by
    ``|mu|``). ``plan``: called once with the pilot's ranks (a k x n_pilot array, each row sorted)
    and n_pilot, returns how many draws to make in all (at most ``draws``; whole chunks, so the
    number made, ``out["draws"]``, can be a little more than asked). ``ci_z``: also read each rank
    quantile's distribution-free confidence interval, the ranks at the order statistics
    ``n q -/+ ci_z sqrt(n q (1 - q))`` (``out["rank_low_ci"]``, ``out["rank_high_ci"]``: pairs of
    arrays). ``pilot_draws``: draws that place the windows (and feed the plan). ``kth``: also
    return the top_k-th best score of every draw (``out["kth_score"]``, float32).
    """
    return RankDraws(mu, sigma, df, draws, seed, top_k=top_k, confidence=confidence, reference=reference,
                     absolute=absolute, plan=plan, ci_z=ci_z, pilot_draws=pilot_draws, kth=kth).run()


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
    """The p quantile of Student t(df) (normal where draw_matrix draws normal:
    :func:`screenlab.uncertainty.t_ppf` with those columns' df infinite)."""
    with np.errstate(over="ignore", invalid="ignore"):
        return t_ppf(p, np.where(_normal_cols(df), np.inf, df))


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
        o = order_desc(scores, overwrite=True)
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
    with executor(len(sizes)) as pool:
        for f in [pool.submit(one, d, ss) for d, ss in zip(sizes, seeds)]:
            t_c, b_c = f.result()
            top += t_c
            best += b_c
    return top, best


def _plan(confidence: float):
    """The pilot -> number of draws rule of phase 1 (module docstring)."""
    alpha = (1 - confidence) / 2

    def plan(by_col: np.ndarray, n: int) -> int:
        r_lo = by_col[:, order_stat_index(n, alpha)].astype(float)
        r_hi = by_col[:, order_stat_index(n, 1 - alpha)].astype(float)
        tol = rank_tolerance(r_lo, r_hi)
        need = np.zeros(by_col.shape[0])
        for q, r in ((alpha, r_lo), (1 - alpha, r_hi)):
            h = CI_Z * np.sqrt(q * (1 - q) / n)
            a = by_col[:, order_stat_index(n, max(0.0, q - h))].astype(float)
            b = by_col[:, order_stat_index(n, min(1.0, q + h))].astype(float)
            need = np.maximum(need, n * (np.maximum(r - a, b - r) / tol) ** 2)
        want = float(np.quantile(need, RANK_STABLE_SHARE)) if need.size else 0.0
        return int(np.clip(want, MIN_RANK_DRAWS, MAX_RANK_DRAWS))

    return plan


def _bound_stability(a: dict, k: int) -> dict:
    """The rank bounds' largest CI half-width (ranks), the share of candidates whose bounds are
    within :func:`rank_tolerance`, and whether that share reaches :data:`RANK_STABLE_SHARE`."""
    half = np.zeros(k)
    for side in ("low", "high"):
        lo_ci, hi_ci = a[f"rank_{side}_ci"]
        half = np.maximum(half, np.maximum(a[f"rank_{side}"] - lo_ci, hi_ci - a[f"rank_{side}"]))
    share = float(np.mean(half <= rank_tolerance(a["rank_low"], a["rank_high"])))
    return {"rank_bound_halfwidth": float(half.max()), "rank_bound_stable_share": share,
            "rank_bound_stable": share >= RANK_STABLE_SHARE}


def _kth_threshold(a: dict) -> float:
    """The threshold: a low quantile of the K-th best score over the phase-1 draws (a fixed number for
    the draws that follow, which stay exact whatever it is; it only decides how much work they are)."""
    return float(np.quantile(a["kth_score"], KTH_QUANTILE))


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
    out.update(_bound_stability(a, k))

    top = np.rint(a["p_top"] * n_a).astype(np.int64)
    best = np.rint(a["p_best"] * n_a).astype(np.int64)
    has_ref = reference is not None
    beats = np.rint(np.nan_to_num(a["p_beats"]) * n_a).astype(np.int64)
    n_beats = np.full(k, n_a, np.int64)
    n = n_a
    kk = min(top_k, k)
    thr = _kth_threshold(a)
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
        # each kind of probability draws on its own budget: one spent does not stop the other
        top_open = max(float(se_top.max()), float(se_best.max())) > mc_se and n < max_draws
        unsure = (se_beats > mc_se) & (n_beats < max_draws)
        if worst <= mc_se or not (top_open or unsure.any()):
            break
        seq = np.random.SeedSequence(root.entropy, spawn_key=(1 << 30, it))
        # the top K and the best: the contenders drawn, the others' draws above the threshold sampled
        want = max(float(needed(top, n).max()), float(needed(best, n).max()))
        n_before, beats_before = n, int(n_beats.sum())
        if top_open and want > n:
            add = int(min(max_draws - n, max(1000, np.ceil(1.1 * want) - n)))
            t_c, b_c = _phase_b(mu, sigma, df, absolute, pos, D, R, p_exc[R], thr, add, seq, kk)
            top += t_c
            best += b_c
            n += add
        # P(beats the benchmark), pairwise: only the still uncertain ones, against the benchmark's own draws
        if unsure.any():
            want_b = float((needed(beats, n_beats)[unsure]).max())
            U = np.flatnonzero(unsure)
            add_b = int(min(max_draws - int(n_beats[U].min()), max(1000, np.ceil(1.1 * want_b) - n_beats[U].min())))
            beats[U] += _beats_counts(mu, sigma, df, absolute, U, reference, add_b,
                                      np.random.SeedSequence(root.entropy, spawn_key=(1 << 30, it, 1)))
            n_beats[U] += add_b
            n_beats_draws = max(n_beats_draws, int(n_beats[U].max()))
        if n == n_before and int(n_beats.sum()) == beats_before:
            break                                    # nothing more could be drawn (rounding at a budget's end)
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

    with executor(len(sizes)) as pool:
        for f in [pool.submit(one, d, ss) for d, ss in zip(sizes, seq.spawn(len(sizes)))]:
            out += f.result()
    return out


__all__ = ["MC_SE", "PILOT_DRAWS", "RankDraws", "adaptive_rank_summary", "rank_summary", "rank_tolerance", "share_se",
           "tail_probability"]
