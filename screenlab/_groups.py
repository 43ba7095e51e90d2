"""Group-by building blocks shared by the kinetics and stats modules (internal).

The per-well work of ScreenLab groups rows by a few key columns (plate, temperature, catalyst,
condition) and reduces each group to a few numbers. ``DataFrame.groupby`` does this, but on the
hot paths it is done here with integer codes instead, so that no tuple of keys is built per row
and every reduction is one array pass:

* **codes** -- :func:`factorize`, :func:`codes`, :func:`with_missing`: one integer per row for
  the distinct values of a column (missing values one more value, as ``groupby(dropna=False)``);
* **group index** -- :func:`group_index`: the group number of each row over several key columns,
  as ``groupby(keys, dropna=False, sort=False).ngroup()`` numbers them; :func:`pair_codes`: the
  distinct pairs of two code columns;
* **order** -- :func:`is_sorted`, :func:`group_order` (stable order by group and each group's
  first position), :func:`first_rows`, :func:`sort_order` (``sort_values`` by several keys);
* **reductions** -- :func:`group_count`, :func:`group_sum` (``np.bincount``), :func:`group_first`
  (``groupby.first()``), :class:`Medians` (``groupby.median()``), :func:`count_distinct`
  (``groupby.nunique()``), :func:`joined_distinct` (the sorted distinct names of each group
  joined with ``;``);
* **flag columns** -- :class:`FlagIndex`: a ``;``-joined flag column factorised once, and
  :func:`merge_texts`, two factorised text columns joined per distinct pair.

Every function is checked against plain pandas in ``tests/test_groups.py``. Group codes are
int64 numbers ``0 .. n_groups - 1`` unless a function says otherwise.
"""
from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

# ------------------------------------------------------------------------------------------ codes


def factorize(values) -> tuple[np.ndarray, object]:
    """``pd.factorize(values)``: int64 codes (missing values -1) in order of first appearance,
    and the distinct values."""
    c, uniques = pd.factorize(values)
    return np.asarray(c, dtype=np.int64), uniques


def with_missing(codes: np.ndarray, uniques) -> tuple[np.ndarray, int]:
    """:func:`factorize` codes with missing values (-1) as one more value, numbered last, and the
    number of values: the levels ``groupby(dropna=False)`` has."""
    k = len(uniques)
    if codes.size and codes.min() < 0:
        return np.where(codes < 0, k, codes), k + 1
    return codes, k


def codes(values) -> tuple[np.ndarray, int]:
    """Integer code per row and the number of distinct values; missing values are one value (as
    ``groupby(dropna=False)`` treats them)."""
    return with_missing(*factorize(values))


def group_index(columns, rows: np.ndarray | None = None) -> np.ndarray:
    """Group number of each row (of ``rows``, when given) over several key columns, numbered in
    order of first appearance: the numbers of ``groupby(keys, dropna=False, sort=False).ngroup()``.

    Each column is factorised once (Arrow-fast for string columns; a column may also be given as
    its :func:`codes` result) and the codes are combined arithmetically, so no tuple of keys is
    ever built per row.
    """
    code = None
    size = 1
    for col in columns:
        c, k = col if isinstance(col, tuple) else codes(col)
        if rows is not None:
            c = c[rows]
        k = max(k, 1)
        if code is None:
            code, size = c, k
            continue
        if size * k >= 2 ** 62:                      # keep the mixed-radix number in int64
            code = np.asarray(pd.factorize(code)[0], dtype=np.int64)
            size = int(code.max()) + 1 if code.size else 1
        code = code * k + c
        size *= k
    if code is None:
        return np.zeros(len(rows) if rows is not None else 0, dtype=np.int64)
    return np.asarray(pd.factorize(code)[0], dtype=np.int64)


def pair_codes(a: np.ndarray, b: np.ndarray, n_b: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The distinct pairs of two code columns (``b`` in ``0 .. n_b - 1``): a code per row into the
    pairs, numbered in order of first appearance, and each pair's ``a`` and ``b``."""
    c, u = pd.factorize(np.asarray(a, dtype=np.int64) * n_b + np.asarray(b, dtype=np.int64))
    u = np.asarray(u, dtype=np.int64)
    return np.asarray(c, dtype=np.int64), u // n_b, u % n_b


# ------------------------------------------------------------------------------------------ order


def is_sorted(codes: np.ndarray) -> bool:
    """Whether ``codes`` never decrease (the rows already come grouped in code order, so a stable
    sort by them would leave them as they are)."""
    codes = np.asarray(codes)
    return bool(codes.size <= 1 or not np.any(codes[1:] < codes[:-1]))


def group_order(codes: np.ndarray, n_groups: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rows by group: a stable argsort of ``codes`` (no sort when they are already in order, see
    :func:`is_sorted`), the codes in that order and the position in it where each group
    0 .. n_groups - 1 starts (a group without rows starts where the next does)."""
    if is_sorted(codes):                             # rows already grouped: no sort needed
        order = np.arange(len(codes))
        sorted_codes = codes
    else:
        order = np.argsort(codes, kind="stable")
        sorted_codes = codes[order]
    starts = np.searchsorted(sorted_codes, np.arange(n_groups), side="left")
    return order, sorted_codes, starts


def first_rows(codes: np.ndarray) -> np.ndarray:
    """Position of the first row of each code, for codes numbered in order of first appearance
    (0, 1, 2, ... as they first occur, as :func:`group_index` gives them): where the running
    maximum steps up. The same as ``np.unique(codes, return_index=True)[1]`` for such codes."""
    if not codes.size:
        return np.zeros(0, dtype=np.int64)
    top = np.maximum.accumulate(codes)
    step = np.ones(codes.size, dtype=bool)
    step[1:] = top[1:] > top[:-1]
    return np.flatnonzero(step)


def sort_order(columns) -> np.ndarray:
    """Stable ascending order by several columns, missing values last (``DataFrame.sort_values``
    with several keys), from per-column sorted factor codes."""
    keys = []
    for col in columns:
        if isinstance(col, np.ndarray) and col.dtype.kind == "f":
            keys.append(col)           # floats sort as they are (equal values keep their order, NaN last)
            continue
        c, u = pd.factorize(col, sort=True)
        c = np.asarray(c, dtype=np.int64)
        keys.append(np.where(c < 0, len(u), c))
    return np.lexsort(keys[::-1])


# ------------------------------------------------------------------------------------- reductions


def group_count(codes: np.ndarray, n_groups: int, mask: np.ndarray | None = None) -> np.ndarray:
    """Rows per group (those where ``mask`` is true, when given): ``groupby.size()`` over all
    groups 0 .. n_groups - 1, int64."""
    c = codes if mask is None else codes[mask]
    return np.bincount(c, minlength=n_groups).astype(np.int64)


def group_sum(codes: np.ndarray, n_groups: int, values) -> np.ndarray:
    """Sum of ``values`` per group 0 .. n_groups - 1 (0 for a group without rows), by
    ``np.bincount``: ``groupby.sum()``, summed in row order."""
    return np.bincount(codes, weights=values, minlength=n_groups)


def group_first(values: np.ndarray, order: np.ndarray, sorted_codes: np.ndarray, n_groups: int) -> np.ndarray:
    """Per group: the first non-NaN value in row order (``groupby.first()``), NaN if none.

    ``order`` and ``sorted_codes`` are the first two results of :func:`group_order`.
    """
    v = values[order]
    out = np.full(n_groups, np.nan)
    idx = np.flatnonzero(~np.isnan(v))
    if idx.size:
        seg = sorted_codes[idx]
        new = np.ones(idx.size, dtype=bool)
        new[1:] = seg[1:] != seg[:-1]
        out[seg[new]] = v[idx[new]]
    return out


def count_distinct(codes: np.ndarray, values: np.ndarray, n_groups: int) -> np.ndarray:
    """Number of distinct ``values`` in each group (``groupby.nunique()``; values must not be NaN)."""
    g, v = np.asarray(codes), np.asarray(values)
    if g.size == 0:
        return np.zeros(n_groups, dtype=np.int64)
    order = np.lexsort((v, g))
    g, v = g[order], v[order]
    new = np.ones(g.size, dtype=bool)
    new[1:] = (g[1:] != g[:-1]) | (v[1:] != v[:-1])
    return np.bincount(g[new], minlength=n_groups)


def joined_distinct(group_codes: np.ndarray, n_groups: int, names) -> tuple[np.ndarray, np.ndarray]:
    """Per group: the number of distinct ``names`` and those names sorted and joined with ``;``
    ("" for a group without rows).

    Vectorised: distinct (group, name) pairs sorted by group then name, then one
    ``np.add.reduceat`` of the (separator-prefixed) names per group. ``names`` may be an array or a
    Series (Arrow strings are factorised without building Python strings per row); a missing name
    (None, NaN, NA) counts as the name ``nan``.
    """
    if not len(group_codes):
        return np.zeros(n_groups, np.int64), np.full(n_groups, "", dtype=object)
    pcode, pnames = pd.factorize(names, sort=True)          # codes in sorted name order
    pcode = np.asarray(pcode, dtype=np.int64)
    if (pcode < 0).any():                                   # a missing name counts as "nan"
        c, u = pd.factorize(pd.Series(names, copy=False).astype(object), use_na_sentinel=False)
        text = np.array([str(v) for v in u], dtype=object)   # a loop over distinct names
        pcode, pnames = pd.factorize(text[np.asarray(c, dtype=np.int64)], sort=True)
        pcode = np.asarray(pcode, dtype=np.int64)
    # distinct (group, name) pairs, sorted; a stable sort is fast on rows that come grouped
    pair = np.sort(group_codes.astype(np.int64) * (len(pnames) + 1) + pcode, kind="stable")
    pair = pair[np.concatenate(([True], pair[1:] != pair[:-1]))]
    pg, pp = pair // (len(pnames) + 1), pair % (len(pnames) + 1)
    n_distinct = np.bincount(pg, minlength=n_groups).astype(np.int64)
    text = np.asarray(pnames, dtype=object)[pp]
    start = np.ones(len(pg), bool)
    start[1:] = pg[1:] != pg[:-1]
    text = np.where(start, text, ";" + text)
    joined = np.full(n_groups, "", dtype=object)
    joined[pg[start]] = np.add.reduceat(text, np.flatnonzero(start))
    return n_distinct, joined


class Medians:
    """Group medians (``groupby.median``: the middle value, or the mean of the two middle values)
    of several value arrays over one grouping. Small groups (the usual replicate sets) are laid
    out as rows of a NaN-padded matrix and sorted row-wise (a matrix of equal-sized groups is a
    single gather, and three values need no sort); larger ones by one sort of their rows."""

    SMALL = 8

    def __init__(self, g: np.ndarray, n_groups: int):
        self.g = g
        self.G = n_groups
        cnt = np.bincount(g, minlength=n_groups)
        order = np.argsort(g, kind="stable")
        small_group = cnt <= self.SMALL
        self.small = small_group[g]
        self.small_groups = np.flatnonzero(small_group)
        self.n_small = int(self.small_groups.size)
        widths = cnt[small_group]
        self.width = int(widths.max()) if self.n_small else 0
        # rows of the small groups, group by group (matrix row i = small_groups[i])
        self.perm = order[self.small[order]]
        self.uniform = bool(self.n_small) and bool((widths == self.width).all()) and self.width > 0
        if not self.uniform:
            place = np.empty(g.size, dtype=np.int64)
            place[order] = np.arange(g.size) - (np.cumsum(cnt) - cnt)[g[order]]
            row_of = np.cumsum(small_group) - 1
            self.cell = (row_of[g[self.small]], place[self.small])

    def _small(self, x: np.ndarray) -> np.ndarray:
        w = self.width
        if self.uniform:
            m = x[self.perm].reshape(self.n_small, w)
            missing = np.isnan(m)
            if w == 3 and not np.isposinf(m).any():
                # three values sorted by min / max (missing ones last, as +inf)
                m = np.where(missing, np.inf, m)
                a, b, c = m[:, 0], m[:, 1], m[:, 2]
                s0 = np.minimum(np.minimum(a, b), c)
                s1 = np.maximum(np.minimum(a, b), np.minimum(np.maximum(a, b), c))
                if not missing.any():
                    return s1
                k = 3 - missing.sum(axis=1)
                return np.where(k == 3, s1, np.where(k == 2, (s0 + s1) / 2, np.where(k == 1, s0, np.nan)))
            if not missing.any():
                m = np.sort(m, axis=1)
                lo, hi = m[:, (w - 1) // 2], m[:, w // 2]
                return lo if w % 2 == 1 else (lo + hi) / 2
        else:
            m = np.full((self.n_small, w), np.nan)
            m[self.cell] = x[self.small]
        m.sort(axis=1)                                      # NaN (padding, missing) last
        c = w - np.isnan(m).sum(axis=1)
        r = np.arange(self.n_small)
        lo = m[r, np.maximum(c - 1, 0) // 2]
        hi = m[r, np.minimum(c // 2, w - 1)]
        with np.errstate(over="ignore", invalid="ignore"):
            med = np.where(c % 2 == 1, lo, (lo + hi) / 2)
        return np.where(c > 0, med, np.nan)

    def __call__(self, x: np.ndarray) -> np.ndarray:
        """Per group: the median of its non-NaN values ``x`` (one per row of ``g``); NaN if none."""
        out = np.full(self.G, np.nan)
        if self.n_small and self.width:
            with np.errstate(over="ignore"):
                out[self.small_groups] = self._small(x)
        big = ~self.small & ~np.isnan(x)
        if big.any():
            gb, xb = self.g[big], x[big]
            order = np.lexsort((xb, gb))
            xs, gs = xb[order], gb[order]
            cnt = np.bincount(gs, minlength=self.G)
            start = np.cumsum(cnt) - cnt
            has = np.flatnonzero(cnt)
            lo = xs[start[has] + (cnt[has] - 1) // 2]
            hi = xs[start[has] + cnt[has] // 2]
            with np.errstate(over="ignore"):
                out[has] = np.where(cnt[has] % 2 == 1, lo, (lo + hi) / 2)
        return out


# ------------------------------------------------------------------------------------ flag columns


class FlagIndex:
    """A ``;``-joined flag column factorised once: each distinct string is parsed once, rows keep a code.

    A flag column holds few distinct strings (combinations of a few codes), so the work below loops
    over distinct strings, never over rows. ``has(code)``: which rows carry ``code`` as a whole
    ``;``-separated token. ``join(masks)``: each row's flags with the codes whose mask is true
    appended in order, codes already present not repeated.
    """

    def __init__(self, flags, n: int | None = None):
        if flags is None:
            c, uniques = np.zeros(int(n or 0), dtype=np.int64), ([""] if n else [])
        else:
            # factorised as it is (Arrow strings stay in Arrow); a missing value reads as ""
            c, uniques = pd.factorize(pd.Series(flags, copy=False))
        self.codes = np.asarray(c, dtype=np.int64)
        self.uniques = [str(u) for u in uniques]
        if (self.codes < 0).any():
            self.codes = np.where(self.codes < 0, len(self.uniques), self.codes)
            self.uniques.append("")
        self._tokens = [set(u.split(";")) for u in self.uniques]

    def has(self, code: str) -> np.ndarray:
        present = np.array([code in tk for tk in self._tokens], dtype=bool)
        return present[self.codes] if len(self.codes) else np.zeros(0, bool)

    @classmethod
    def from_codes(cls, codes: np.ndarray, words) -> "FlagIndex":
        """An index over a flag column already given as integer codes into ``words`` (str)."""
        self = cls.__new__(cls)
        self.codes = np.asarray(codes, dtype=np.int64)
        self.uniques = [str(w) for w in words]
        self._tokens = [set(u.split(";")) for u in self.uniques]
        return self

    def text(self) -> np.ndarray:
        """The flag column itself, as an object array of str."""
        return np.asarray(self.uniques, dtype=object)[self.codes] if len(self.codes) else np.zeros(0, dtype=object)

    def join(self, masks: Mapping[str, np.ndarray]) -> np.ndarray:
        """Object array of str (see the class docstring)."""
        words, c = self.join_codes(masks)
        return words[c]

    def join_codes(self, masks: Mapping[str, np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
        """:meth:`join` as distinct texts (object array) and one code per row into them."""
        items = [(c, np.asarray(m, dtype=bool)) for c, m in masks.items()]
        n = len(self.codes)
        if not n:
            return np.zeros(0, dtype=object), np.zeros(0, dtype=np.int64)
        bits = np.zeros(n, dtype=np.int64)
        for i, (code, mask) in enumerate(items):          # a loop over a few codes
            bits |= (mask & ~self.has(code)).astype(np.int64) << i
        combo = self.codes * (1 << len(items)) + bits
        cc, cu = pd.factorize(combo)
        text = np.empty(len(cu), dtype=object)
        for j, c in enumerate(cu):                         # a loop over distinct flag combinations
            base, b = self.uniques[int(c) >> len(items)], int(c) & ((1 << len(items)) - 1)
            added = [code for i, (code, _) in enumerate(items) if b >> i & 1]
            text[j] = ";".join([base, *added]) if base else ";".join(added)
        return text, np.asarray(cc, dtype=np.int64)


def merge_texts(a_words, a_codes: np.ndarray, b_words, b_codes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Two factorised text columns (``a_words[a_codes]``, ``b_words[b_codes]``) joined row by row
    with ``;`` (an empty side adds nothing), as distinct texts and one code per row into them:
    the join is done once per distinct pair, never per row."""
    n_b = len(b_words)
    c, pa, pb = pair_codes(a_codes, b_codes, max(n_b, 1))
    words = []
    for i, j in zip(pa.tolist(), pb.tolist()):           # a loop over distinct pairs
        a, b = str(a_words[i]), str(b_words[j])
        words.append(a if b == "" else (b if a == "" else a + ";" + b))
    return np.array(words, dtype=object), c
