"""The group-by building blocks (screenlab._groups) against plain pandas group-bys.

The outside reference throughout is pandas itself: ``groupby(...).ngroup()``, ``.size()``,
``.sum()``, ``.first()``, ``.median()``, ``.nunique()``, ``sort_values`` and ``factorize``. Each
block is checked on seeded random data with ties, missing values, signed zeros, empty groups and
groups of very different sizes, and by hypothesis property tests on arbitrary inputs.
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from screenlab import _groups as grp


def random_keys(rng, n):
    """Key columns with repeats, missing values, signed zeros and strings."""
    cat = pd.array(rng.choice(["C1", "C2", "C10", "c1", "Ä"], n).astype(object), dtype="str")
    cat[rng.random(n) < 0.1] = None
    num = rng.choice([0.0, -0.0, 1.5, 2.0, np.nan], n)
    obj = rng.choice(np.array(["x", "y", None], dtype=object), n)
    ints = rng.integers(0, 3, n)
    return pd.DataFrame({"cat": cat, "num": num, "obj": obj, "int": ints})


def ngroup(df: pd.DataFrame) -> np.ndarray:
    """The reference group numbers: pandas, missing values a group of their own, first-seen order."""
    return df.groupby(list(df.columns), dropna=False, sort=False).ngroup().to_numpy()


# hypothesis strategies: key columns of a few distinct values (so that groups repeat), with missing ones
small_floats = st.sampled_from([0.0, -0.0, 1.0, 2.5, np.nan, 1e300])
small_words = st.sampled_from(["a", "b", "ab", "Ä", None])
values = st.one_of(st.floats(allow_nan=False, allow_infinity=False, min_value=-1e6, max_value=1e6), st.just(np.nan),
                   st.sampled_from([0.0, -0.0, 1.0]))


@st.composite
def grouped_values(draw, max_groups=12, max_rows=80):
    """(group codes 0..G-1, float values with NaN, G): some groups may have no rows."""
    n_groups = draw(st.integers(1, max_groups))
    n = draw(st.integers(0, max_rows))
    g = np.array(draw(st.lists(st.integers(0, n_groups - 1), min_size=n, max_size=n)), dtype=np.int64)
    v = np.array(draw(st.lists(values, min_size=n, max_size=n)), dtype=float)
    return g, v, n_groups


# ------------------------------------------------------------------------------------ codes

@pytest.mark.parametrize("seed", [0, 1, 2])
def test_group_index_equals_groupby_ngroup(seed):
    rng = np.random.default_rng(seed)
    df = random_keys(rng, 600)
    np.testing.assert_array_equal(grp.group_index([df[c] for c in df.columns]), ngroup(df))
    rows = np.flatnonzero(rng.random(len(df)) < 0.6)
    ref = ngroup(df.iloc[rows])
    np.testing.assert_array_equal(grp.group_index([df[c] for c in df.columns], rows), ref)
    # precomputed column codes give the same numbers
    np.testing.assert_array_equal(grp.group_index([grp.codes(df[c]) for c in df.columns], rows), ref)
    assert grp.group_index([]).size == 0 and grp.group_index([], rows).size == len(rows)


def test_group_index_keeps_many_wide_columns_in_int64():
    # 2^62 and more combinations of codes: the running number is renumbered before it overflows
    rng = np.random.default_rng(5)
    df = pd.DataFrame({f"k{i}": rng.integers(0, 70000, 300) for i in range(5)})
    np.testing.assert_array_equal(grp.group_index([df[c] for c in df.columns]), ngroup(df))


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(small_floats, small_words, st.integers(0, 2)), min_size=0, max_size=60))
def test_group_index_property_equals_ngroup(rows):
    df = pd.DataFrame(rows, columns=["f", "w", "i"]).astype({"f": float, "w": object, "i": np.int64})
    got = grp.group_index([df[c] for c in df.columns])
    np.testing.assert_array_equal(got, ngroup(df) if len(df) else np.zeros(0, np.int64))
    # first_rows of such codes is np.unique(return_index=True), the first row of each group
    np.testing.assert_array_equal(grp.first_rows(got), np.unique(got, return_index=True)[1])


def test_codes_treat_missing_values_as_one_more_value():
    s = pd.Series(["b", None, "a", "b", None], dtype="str")
    c, k = grp.codes(s)
    ref, uniques = pd.factorize(s, use_na_sentinel=False)      # pandas: NaN as a value of its own
    assert k == len(uniques) == 3
    # the same partition of the rows as pandas' (missing numbered last here, in first-seen order there)
    np.testing.assert_array_equal(pd.factorize(c)[0], ref)
    assert c.tolist() == [0, 2, 1, 0, 2]
    c2, k2 = grp.codes(pd.Series(["x", "y"]))
    assert c2.tolist() == [0, 1] and k2 == 2


def test_pair_codes_are_the_distinct_pairs_in_first_seen_order():
    a = np.array([0, 1, 0, 2, 1, 0])
    b = np.array([1, 1, 1, 0, 2, 0])
    c, pa_, pb = grp.pair_codes(a, b, 3)
    ref = pd.DataFrame({"a": a, "b": b}).groupby(["a", "b"], sort=False).ngroup().to_numpy()   # pandas
    np.testing.assert_array_equal(c, ref)
    assert list(zip(pa_.tolist(), pb.tolist())) == [(0, 1), (1, 1), (2, 0), (1, 2), (0, 0)]


# ------------------------------------------------------------------------------------ order

@pytest.mark.parametrize("seed", [0, 1])
def test_sort_order_equals_sort_values(seed):
    rng = np.random.default_rng(seed)
    df = random_keys(rng, 500)
    ref = df.sort_values(["cat", "num", "int"], kind="stable", na_position="last").index.to_numpy()
    got = grp.sort_order([df["cat"], df["num"].to_numpy(), df["int"]])
    np.testing.assert_array_equal(got, ref)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(small_words, small_floats), min_size=0, max_size=50))
def test_sort_order_property_equals_sort_values(rows):
    df = pd.DataFrame(rows, columns=["w", "f"]).astype({"w": object, "f": float})
    ref = df.sort_values(["w", "f"], kind="stable", na_position="last").index.to_numpy()
    np.testing.assert_array_equal(grp.sort_order([df["w"], df["f"].to_numpy()]), ref)


def test_is_sorted_and_group_order():
    assert grp.is_sorted(np.array([0, 0, 1, 3])) and grp.is_sorted(np.zeros(0)) and grp.is_sorted(np.array([4]))
    assert not grp.is_sorted(np.array([0, 2, 1]))
    g = np.array([2, 0, 2, 1, 0])
    order, sorted_codes, starts = grp.group_order(g, 4)
    np.testing.assert_array_equal(order, np.argsort(g, kind="stable"))
    np.testing.assert_array_equal(sorted_codes, [0, 0, 1, 2, 2])
    # where each group starts in sorted order (group 3 has no rows: it starts at the end)
    np.testing.assert_array_equal(starts, [0, 2, 3, 5])
    assert grp.is_sorted(sorted_codes)


# ------------------------------------------------------------------------------------ reductions

@settings(max_examples=80, deadline=None)
@given(grouped_values())
def test_counts_sums_and_first_values_property_equal_pandas(case):
    g, v, G = case
    s = pd.Series(v).groupby(g)
    np.testing.assert_array_equal(grp.group_count(g, G), s.size().reindex(range(G), fill_value=0).to_numpy())
    mask = np.isfinite(v)
    np.testing.assert_array_equal(grp.group_count(g, G, mask),
                                  pd.Series(v[mask]).groupby(g[mask]).size().reindex(range(G), fill_value=0))
    w = np.nan_to_num(v)
    # bincount sums in row order, as a plain Python sum per group does (pandas' sum is compensated)
    ref_sum = np.array([sum(w[g == i].tolist(), 0.0) for i in range(G)])
    np.testing.assert_array_equal(grp.group_sum(g, G, w), ref_sum)
    np.testing.assert_allclose(grp.group_sum(g, G, w), s.apply(lambda x: np.nan_to_num(x).sum())
                               .reindex(range(G), fill_value=0.0).to_numpy(), rtol=1e-9, atol=1e-6)
    order, sorted_codes, _ = grp.group_order(g, G)
    np.testing.assert_array_equal(grp.group_first(v, order, sorted_codes, G),
                                  s.first().reindex(range(G)).to_numpy(dtype=float))


@pytest.mark.parametrize("seed", [0, 1])
def test_group_first_equals_groupby_first(seed):
    rng = np.random.default_rng(seed)
    g = rng.integers(0, 80, 700)
    g[:80] = np.arange(80)                                 # every group present
    v = rng.normal(size=700)
    v[rng.random(700) < 0.5] = np.nan
    ref = pd.Series(v).groupby(g).first().reindex(range(80)).to_numpy()
    order, sorted_codes, _ = grp.group_order(g, 80)
    np.testing.assert_array_equal(grp.group_first(v, order, sorted_codes, 80), ref)


@pytest.mark.parametrize("seed,layout", [(0, "mixed"), (1, "mixed"), (2, "mixed"), (3, "mixed"), (4, "threes"),
                                         (5, "fours"), (6, "threes_and_big")])
def test_group_medians_equal_pandas_median(seed, layout):
    rng = np.random.default_rng(seed)
    sizes = {"mixed": np.concatenate([rng.integers(1, 12, 300), [50, 9, 200]]),  # small, and beyond the matrix
             "threes": np.full(300, 3), "fours": np.full(200, 4),
             "threes_and_big": np.concatenate([np.full(300, 3), [40, 400]])}[layout]
    g = rng.permutation(np.repeat(np.arange(sizes.size), sizes))
    x = rng.normal(size=g.size) * 10.0 ** rng.uniform(-6, 6, g.size)
    x[rng.random(g.size) < 0.15] = 1.0                  # ties
    x[rng.random(g.size) < 0.05] = -0.0
    median = grp.Medians(g, sizes.size)
    ref = pd.Series(x).groupby(g).median().reindex(range(sizes.size)).to_numpy()
    np.testing.assert_array_equal(median(x), ref)                 # no missing values
    x[rng.random(g.size) < 0.1] = np.nan
    ref = pd.Series(x).groupby(g).median().reindex(range(sizes.size)).to_numpy()
    np.testing.assert_array_equal(median(x), ref)


def test_group_medians_of_threes_with_many_missing_and_infinite_values():
    rng = np.random.default_rng(1)
    g = rng.permutation(np.repeat(np.arange(400), 3))
    x = rng.normal(size=g.size)
    x[rng.random(g.size) < 0.4] = np.nan                  # groups with 0, 1, 2 or 3 values
    median = grp.Medians(g, 400)
    ref = pd.Series(x).groupby(g).median().reindex(range(400)).to_numpy()
    np.testing.assert_array_equal(median(x), ref)
    x[:5], x[5:8] = np.inf, -np.inf
    ref = pd.Series(x).groupby(g).median().reindex(range(400)).to_numpy()
    np.testing.assert_array_equal(median(x), ref)


@settings(max_examples=80, deadline=None)
@given(grouped_values(max_groups=15, max_rows=120))
def test_group_medians_property_equal_pandas_median(case):
    g, v, G = case
    ref = pd.Series(v).groupby(g).median().reindex(range(G)).to_numpy(dtype=float)
    np.testing.assert_array_equal(grp.Medians(g, G)(v), ref)


@settings(max_examples=60, deadline=None)
@given(grouped_values())
def test_count_distinct_property_equals_nunique(case):
    g, v, G = case
    v = np.nan_to_num(np.round(v, -5))                  # few distinct values, no NaN
    ref = pd.Series(v).groupby(g).nunique().reindex(range(G), fill_value=0).to_numpy()
    np.testing.assert_array_equal(grp.count_distinct(g, v, G), ref)


def test_joined_distinct_equals_per_group_join():
    rng = np.random.default_rng(4)
    n = 800
    g = rng.integers(0, 90, n)
    plate = rng.choice(["P10", "P2", "P1", "Q-7", "p3", "Ä1"], n).astype(object)
    n_groups = 95                                       # some groups without wells
    n_plates, joined = grp.joined_distinct(g, n_groups, plate)
    # pandas reference: sorted distinct names per group, joined
    ref = pd.Series(plate).groupby(g).agg(lambda s: ";".join(sorted(set(s))))
    nuniq = pd.Series(plate).groupby(g).nunique()
    for i in range(n_groups):
        assert joined[i] == ref.get(i, ""), i
        assert n_plates[i] == nuniq.get(i, 0), i


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 5), small_words), min_size=0, max_size=40))
def test_joined_distinct_property_with_missing_names(rows):
    g = np.array([r[0] for r in rows], dtype=np.int64)
    names = pd.Series([r[1] for r in rows], dtype=object)
    n, joined = grp.joined_distinct(g, 6, names)
    text = names.where(names.notna(), np.nan).map(str)    # a missing name counts as "nan"
    ref = text.groupby(g).agg(lambda s: ";".join(sorted(set(s)))) if len(rows) else pd.Series(dtype=object)
    for i in range(6):
        assert joined[i] == ref.get(i, "")
        assert n[i] == (len(set(text[g == i])) if len(rows) else 0)


# ------------------------------------------------------------------------------------ flag columns

CODES = ["no_blank", "no_sites", "outlier", "failed_well", "no_blank_x", "enhancement_lower_bound"]


def has_token(values, code):
    """The rule: a row carries ``code`` when it is one whole ``;``-separated token of its text."""
    return np.array([code in ("" if pd.isna(v) else str(v)).split(";") for v in values])


def joined(values, masks):
    """The rule: each row's text, then the codes whose mask is true appended with ``;``, in order,
    a code the row already carries not repeated."""
    out = []
    for i, v in enumerate(values):
        cur = "" if pd.isna(v) else str(v)
        for code, mask in masks.items():
            if mask[i] and code not in cur.split(";"):
                cur = code if cur == "" else cur + ";" + code
        out.append(cur)
    return out


@pytest.mark.parametrize("seed", [0, 1])
def test_flag_index_has_and_join_state_the_token_rule(seed):
    rng = np.random.default_rng(seed)
    n = 500
    flags = pd.Series([";".join(rng.choice(CODES, int(rng.integers(0, 4)), replace=False)) for _ in range(n)],
                      dtype=object)
    flags[rng.random(n) < 0.1] = None
    fi = grp.FlagIndex(flags)
    for code in CODES + ["no", "blank"]:
        np.testing.assert_array_equal(fi.has(code), has_token(flags, code), err_msg=code)
    masks = {c: rng.random(n) < 0.3 for c in ["no_blank", "outlier", "single_well", "no_sites"]}
    assert fi.join(masks).tolist() == joined(flags, masks)
    assert grp.FlagIndex(None, n=n).join(masks).tolist() == joined([""] * n, masks)
    assert grp.FlagIndex(None, n=0).join({"a": np.zeros(0, bool)}).tolist() == []


def test_flag_index_with_missing_and_empty_strings():
    flags = pd.Series(["a", "", None, "a;b", np.nan], dtype="str")
    fi = grp.FlagIndex(flags)
    assert fi.text().tolist() == ["a", "", "", "a;b", ""]
    np.testing.assert_array_equal(fi.has("a"), [True, False, False, True, False])
    got = fi.join({"b": np.array([1, 1, 1, 1, 0], bool)})
    assert got.tolist() == ["a;b", "b", "b", "a;b", ""]
    words, codes = grp.FlagIndex.from_codes(np.array([1, 0, 1]), ["x", "y;z"]).join_codes(
        {"z": np.array([1, 1, 0], bool), "w": np.array([0, 1, 0], bool)})
    assert words[codes].tolist() == ["y;z", "x;z;w", "y;z"]


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["", "a", "a;b"]), st.sampled_from(["", "c", "b;c"])), max_size=30))
def test_merge_texts_property_joins_each_row(rows):
    a_words, b_words = ["", "a", "a;b"], ["", "c", "b;c"]
    a = np.array([a_words.index(r[0]) for r in rows], dtype=np.int64)
    b = np.array([b_words.index(r[1]) for r in rows], dtype=np.int64)
    words, codes = grp.merge_texts(a_words, a, b_words, b)
    # the rule: the two texts joined with ";", an empty one adding nothing
    assert [str(words[c]) for c in codes] == [";".join(t for t in r if t) for r in rows]
    assert len(words) == len(set(rows))                  # one text per distinct pair
    assert all(re.fullmatch(r"[^;]+(;[^;]+)*|", str(w)) for w in words)
