"""The position-based helpers behind the rates stage against the pandas formulations they replace.

Each helper computes one thing a pandas group-by, merge or sort used to compute (group numbers,
group medians, first values, a left merge on the blanks, a multi-key sort, a time-course order, a
Student-t quantile per row, a string column); each is checked here against that pandas / numpy /
scipy formulation, written out plainly, on random data with ties, missing values, signed zeros
and groups of very different sizes. The previous pandas versions of the replicate outlier score
and of the selectivity group summary are kept here as references and must agree exactly.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from scipy import stats

from screenlab.kinetics import amounts, fit, rates, selectivity, sites, turnover
from screenlab.settings import AnalysisSettings
from screenlab.synthetic import SyntheticSpec, synthetic_campaign


def random_keys(rng, n):
    """Key columns with repeats, missing values, signed zeros and strings."""
    cat = pd.array(rng.choice(["C1", "C2", "C10", "c1", "Ä"], n).astype(object), dtype="str")
    cat[rng.random(n) < 0.1] = None
    num = rng.choice([0.0, -0.0, 1.5, 2.0, np.nan], n)
    obj = rng.choice(np.array(["x", "y", None], dtype=object), n)
    ints = rng.integers(0, 3, n)
    return pd.DataFrame({"cat": cat, "num": num, "obj": obj, "int": ints})


# ------------------------------------------------------------------------------- group numbers

@pytest.mark.parametrize("seed", [0, 1, 2])
def test_key_codes_equal_groupby_ngroup(seed):
    rng = np.random.default_rng(seed)
    df = random_keys(rng, 600)
    ref = df.groupby(list(df.columns), dropna=False, sort=False).ngroup().to_numpy()
    got = turnover._key_codes([df[c] for c in df.columns])
    np.testing.assert_array_equal(got, ref)
    rows = np.flatnonzero(rng.random(len(df)) < 0.6)
    sub = df.iloc[rows]
    ref = sub.groupby(list(df.columns), dropna=False, sort=False).ngroup().to_numpy()
    np.testing.assert_array_equal(turnover._key_codes([df[c] for c in df.columns], rows), ref)
    # precomputed column codes give the same numbers
    np.testing.assert_array_equal(turnover._key_codes([turnover._codes(df[c]) for c in df.columns], rows), ref)


def test_role_matches_string_conversion():
    s = pd.Series(["sample", None, "blank", "empty", "sample"], dtype="str")
    ref = s.astype(object).where(s.notna(), "").astype(str).to_numpy(dtype=object)
    assert turnover._role(pd.DataFrame({"role": s})).tolist() == ref.tolist()
    o = pd.Series(["sample", np.nan, 3], dtype=object)
    ref = o.astype(object).where(o.notna(), "").astype(str).to_numpy(dtype=object)
    assert turnover._role(pd.DataFrame({"role": o})).tolist() == ref.tolist()


# ------------------------------------------------------------------------------- group statistics

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
    median = turnover._Medians(g, sizes.size)
    ref = pd.Series(x).groupby(g).median().reindex(range(sizes.size)).to_numpy()
    np.testing.assert_array_equal(median(x), ref)                 # no missing values
    x[rng.random(g.size) < 0.1] = np.nan
    ref = pd.Series(x).groupby(g).median().reindex(range(sizes.size)).to_numpy()
    np.testing.assert_array_equal(median(x), ref)


@pytest.mark.parametrize("seed", [0, 1])
def test_group_first_equals_groupby_first(seed):
    rng = np.random.default_rng(seed)
    g = rng.integers(0, 80, 700)
    g[:80] = np.arange(80)                                 # every group present
    v = rng.normal(size=700)
    v[rng.random(700) < 0.5] = np.nan
    ref = pd.Series(v).groupby(g).first().reindex(range(80)).to_numpy()
    order = np.argsort(g, kind="stable")
    got = turnover._group_first(v, order, g[order], 80)
    np.testing.assert_array_equal(got, ref)


def _robust_z_pandas(values, group_codes, se=None):
    """The previous implementation (pandas group-by transforms), kept as the reference."""
    values = np.asarray(values, dtype=float)
    s = pd.Series(values)
    g = pd.Series(group_codes)
    ok = np.isfinite(values) & (group_codes >= 0)
    s = s.where(ok)
    med = s.groupby(g).transform("median")
    dev = (s - med).abs()
    mad = dev.groupby(g).transform("median")
    mean_ad = dev.groupby(g).transform("mean")
    cnt = s.groupby(g).transform("count").to_numpy()
    with np.errstate(invalid="ignore", divide="ignore"):
        z = np.where(mad > 0, 0.6745 * dev / mad, np.where(mean_ad > 0, dev / (1.253314 * mean_ad), 0.0))
        active = (med > 0).to_numpy() & ok & (cnt >= 3)
        ln = pd.Series(np.where(active & (values > 0), np.log(np.abs(values) + (values <= 0)), np.nan))
        dev_ln = (ln - ln.groupby(g).transform("median")).abs().to_numpy()
        pool = dev_ln[np.isfinite(dev_ln) & (dev_ln > 0)]
        if pool.size:
            z_ln = np.where(values > 0, 0.6745 * dev_ln / np.median(pool), np.inf)
            z = np.where(active, z_ln, z)
        if se is not None:
            se = np.asarray(se, dtype=float)
            cap = np.where(np.isfinite(se) & (se > 0), dev.to_numpy() / se, np.inf)
            z = np.minimum(z, cap)
    return np.where(ok & (cnt >= 3), z, np.nan)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_robust_z_equals_the_pandas_formulation(seed):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 7, 150)
    sizes[:3] = [30, 12, 3]
    g = rng.permutation(np.repeat(np.arange(sizes.size), sizes))
    v = np.exp(rng.normal(3.0, 0.3, g.size)) * np.where(rng.random(g.size) < 0.2, -0.1, 1.0)
    v[rng.random(g.size) < 0.05] = 0.0
    v[np.isin(g, [5, 6])] = 7.0                           # MAD = 0 groups
    v[rng.random(g.size) < 0.05] = np.nan
    g = np.where(rng.random(g.size) < 0.05, -1, g)      # rows outside any group
    se = np.where(rng.random(g.size) < 0.5, rng.uniform(0.01, 2.0, g.size), np.nan)
    np.testing.assert_array_equal(turnover._robust_z(v, g), _robust_z_pandas(v, g))
    np.testing.assert_array_equal(turnover._robust_z(v, g, se), _robust_z_pandas(v, g, se))


# ------------------------------------------------------------------------------- joins and sorts

@pytest.mark.parametrize("seed", [0, 1])
def test_blank_rows_equal_the_left_merge(seed):
    rng = np.random.default_rng(seed)
    plates = pd.Series(rng.choice(["P1", "P2", "P3", "Q"], 400), dtype="str")
    t = rng.choice([40.0, 50.0, 60.0000000001, np.nan], 400)
    tkey = turnover._tkey(t)
    blanks = pd.DataFrame({"plate": pd.Series(["P1", "P1", "P2", "P2", "P3", "Z"], dtype="str"),
                           "temperature_c": [40.0, 50.0, 40.0, 40.0, np.nan, 40.0]})
    got = turnover._blank_rows(turnover._factorize(plates), tkey, np.full(len(t), 200.0), blanks)
    bl = blanks.assign(tkey=turnover._tkey(blanks["temperature_c"]), row=np.arange(len(blanks)))
    bl = bl.drop_duplicates(["plate", "tkey"])
    ref = pd.DataFrame({"plate": plates.astype(object), "tkey": tkey}).merge(
        bl[["plate", "tkey", "row"]].astype({"plate": object}), on=["plate", "tkey"], how="left")
    np.testing.assert_array_equal(got, ref["row"].fillna(-1).to_numpy(dtype=np.int64))


@pytest.mark.parametrize("seed", [0, 1])
def test_sort_order_equals_sort_values(seed):
    rng = np.random.default_rng(seed)
    df = random_keys(rng, 500)
    ref = df.sort_values(["cat", "num", "int"], kind="stable", na_position="last").index.to_numpy()
    got = turnover._sort_order([df["cat"], df["num"].to_numpy(), df["int"]])
    np.testing.assert_array_equal(got, ref)


@pytest.mark.parametrize("case", ["runs", "sorted", "split", "unsorted_time"])
def test_order_by_well_leaves_each_wells_readings_as_lexsort_would(case):
    rng = np.random.default_rng(4)
    n_w = 50
    lens = rng.integers(1, 8, n_w)
    code = np.repeat(rng.permutation(n_w), lens)                  # one run per well, wells shuffled
    t = np.concatenate([np.sort(rng.choice([0.0, 0.5, 1.0, 1.0, 2.0, 3.0], k)) for k in lens])
    if case == "sorted":
        o = np.lexsort((t, code))
        code, t = code[o], t[o]
    elif case == "split":
        code = code.copy()
        code[-1] = code[0]                                         # a well in two runs
    elif case == "unsorted_time":
        t = t.copy()
        t[:2] = [5.0, 0.0] if lens[0] >= 2 else t[:2]
    order = rates._order_by_well(code, t)
    ref = np.lexsort((t, code))
    if order is None:
        # no reordering: every well's readings already form one run in lexsort's order
        starts = np.flatnonzero(np.concatenate(([True], code[1:] != code[:-1])))
        assert len(np.unique(code[starts])) == len(starts)
        for c in np.unique(code):
            np.testing.assert_array_equal(np.flatnonzero(code == c), np.sort(ref[code[ref] == c]))
            np.testing.assert_array_equal(t[code == c], t[ref][code[ref] == c])
    else:
        np.testing.assert_array_equal(order, ref)
    if case in ("split", "unsorted_time"):
        assert order is not None


def test_one_t_quantile_and_one_welch_rule_against_scipy_stats():
    from screenlab.uncertainty import t_quantile, welch_df

    rng = np.random.default_rng(0)
    df = np.concatenate([rng.uniform(0.5, 60, 300), rng.integers(1, 8, 300).astype(float),
                         [np.inf, -np.inf, 0.0, -1.0, np.nan, 2.0, 2.0]])
    # scipy.stats as the reference: t.ppf for finite df > 0, norm.ppf for infinite df, else NaN
    ref = np.where(np.isfinite(df) & (df > 0), stats.t.ppf(0.975, np.where(df > 0, df, 1.0)), np.nan)
    ref = np.where(np.isposinf(df), stats.norm.ppf(0.975), ref)
    np.testing.assert_allclose(t_quantile(0.95, df), ref, rtol=1e-12, equal_nan=True)
    assert turnover.t_quantile is t_quantile and selectivity._t_quantile(0.9, 4.0) == t_quantile(0.9, 4.0)
    # Welch-Satterthwaite, written out (Welch, Biometrika 1947): (va + vb)^2 / (va^2/da + vb^2/db)
    assert welch_df(2.0, 3, 1.0, 5) == pytest.approx(9.0 / (4.0 / 3 + 1.0 / 5))
    assert welch_df(2.0, 3, 0.0, 5) == pytest.approx(3.0) and welch_df(0.0, 3, 0.0, 5) == np.inf


# ------------------------------------------------------------------------------- strings and flags

def test_text_array_is_the_column_an_object_array_makes():
    words = np.array(["", "a", "a;b"], dtype=object)
    codes = np.array([2, 0, 1, 1, 0])
    ref = pd.Series(words[codes])
    got = pd.Series(sites.text_array(words, codes))
    pd.testing.assert_series_equal(got, ref)
    none = np.zeros(0, dtype=int)
    assert pd.Series(sites.text_array(words, none)).dtype == pd.Series(words[none]).dtype


def test_flag_index_with_missing_and_empty_strings():
    flags = pd.Series(["a", "", None, "a;b", np.nan], dtype="str")
    fi = sites.FlagIndex(flags)
    assert fi.text().tolist() == ["a", "", "", "a;b", ""]
    np.testing.assert_array_equal(fi.has("a"), [True, False, False, True, False])
    got = fi.join({"b": np.array([1, 1, 1, 1, 0], bool)})
    assert got.tolist() == ["a;b", "b", "b", "a;b", ""]
    words, codes = sites.FlagIndex.from_codes(np.array([1, 0, 1]), ["x", "y;z"]).join_codes(
        {"z": np.array([1, 1, 0], bool), "w": np.array([0, 1, 0], bool)})
    assert words[codes].tolist() == ["y;z", "x;z;w", "y;z"]


@pytest.mark.parametrize("chunks", [1, 3])
def test_well_index_arrow_path_with_missing_values_and_chunks(chunks):
    rng = np.random.default_rng(chunks)
    plates = np.array(["P1", "P2", None], dtype=object)
    wells = np.array(["A1", "B2", None], dtype=object)
    keys = pd.DataFrame({"plate": rng.choice(plates, 12), "well": rng.choice(wells, 12)})
    rows = pd.DataFrame({"plate": rng.choice(plates, 200), "well": rng.choice(wells, 200)})
    rows = rows.sort_values(["plate", "well"], na_position="last").reset_index(drop=True)

    def arrow(values):
        arr = pa.array([None if pd.isna(v) else v for v in values], type=pa.large_string())
        parts = np.array_split(np.arange(len(arr)), chunks)
        return pd.Series(pd.arrays.ArrowStringArray(pa.chunked_array([arr.take(pa.array(p)) for p in parts])),
                         dtype="str")

    got = amounts.well_index(arrow(rows["plate"]), arrow(rows["well"]), arrow(keys["plate"]), arrow(keys["well"]))
    ref = amounts.well_index(rows["plate"].astype(object), rows["well"].astype(object),
                             keys["plate"].astype(object), keys["well"].astype(object))
    np.testing.assert_array_equal(got, ref)


# ------------------------------------------------------------------------------- fits

# ------------------------------------------------------------------------------- group summaries

def _summarise_groups_pandas(rows, codes, n_groups, confidence=0.95):
    """The previous selectivity group summary (a pandas agg per quantity), kept as the reference."""
    codes = np.asarray(codes)
    G = int(n_groups)
    out = pd.DataFrame(index=pd.RangeIndex(G))
    flag_masks = {}
    wflags = rows["flags"].astype(object).where(rows["flags"].notna(), "").astype(str) if "flags" in rows \
        else pd.Series([""] * len(rows))
    any_value = np.zeros(len(rows), dtype=bool)
    for key in ("selectivity", "ee"):
        def num(c, default):
            return pd.to_numeric(rows[c], errors="coerce").to_numpy(dtype=float) if c in rows \
                else np.full(len(rows), default)
        v, se1, df1, bse = num(f"{key}_pct", np.nan), num(f"{key}_se", np.nan), num(f"{key}_df", np.nan), \
            num(f"{key}_blank_se", 0.0)
        plate = rows["plate"].astype(str).to_numpy(dtype=object) if "plate" in rows else np.zeros(len(rows))
        ok = np.isfinite(v) & (codes >= 0)
        frame = pd.DataFrame({"g": codes[ok], "v": v[ok], "se": se1[ok], "df": df1[ok],
                              "b2": np.nan_to_num(bse[ok], nan=0.0) ** 2, "plate": plate[ok]})
        frame["fit2"] = frame["se"] ** 2 - frame["b2"]
        frame["dfs"] = frame["df"]
        a = frame.groupby("g").agg(n=("v", "size"), mean=("v", "mean"), sd=("v", "std"),
                                   se1=("se", "first"), df1=("df", "first"), b2=("b2", "mean"),
                                   k=("plate", "nunique"), fit2=("fit2", "mean"),
                                   dfsum=("dfs", "sum")).reindex(range(G))
        n = a["n"].fillna(0).to_numpy(dtype=float)
        with np.errstate(invalid="ignore", divide="ignore"):
            v_rep = a["sd"].to_numpy(float) ** 2 / n
            v_bl = a["b2"].fillna(0.0).to_numpy(float) / a["k"].fillna(1.0).to_numpy(float)
            se = np.where(n >= 2, np.sqrt(v_rep + v_bl), np.where(n == 1, a["se1"].to_numpy(float), np.nan))
            v_exp = np.maximum(a["fit2"].to_numpy(float), 0.0) / n
            df = np.where(n >= 2, np.minimum(selectivity._welch(v_exp, n - 1.0, v_bl, np.inf),
                                             a["dfsum"].to_numpy(float)),
                          np.where(n == 1, a["df1"].to_numpy(float), np.nan))
            df = np.where((n >= 2) & ~np.isfinite(df), n - 1.0, np.maximum(df, n - 1.0))
            ok_q = np.isfinite(df) & (df > 0)
            q = np.where(ok_q, stats.t.ppf(0.5 + confidence / 2.0, np.where(ok_q, df, 1.0)), np.nan)
            mean = a["mean"].to_numpy(dtype=float)
        out[f"{key}_pct"] = mean
        out[f"{key}_se"] = se
        out[f"{key}_df"] = df
        out[f"{key}_ci_low"] = mean - q * se
        out[f"{key}_ci_high"] = mean + q * se
        any_value |= ok
    c_any = codes[any_value].astype(np.int64)
    n_any = np.bincount(c_any, minlength=G)[:G].astype(float)
    for code in ("selectivity_drift", "selectivity_low_product", "background_dominant", "ee_drift",
                 "ee_low_product"):
        has = wflags.str.contains(rf"(?:^|;){code}(?:;|$)", regex=True).to_numpy(dtype=bool)
        cnt = np.bincount(c_any, weights=has[any_value].astype(float), minlength=G)[:G]
        flag_masks[code] = (n_any > 0) & (cnt >= 0.5 * n_any) & (cnt > 0)
    out["flags"] = sites.join_flags(None, flag_masks, index=out.index).to_numpy(dtype=object)
    return out[[*selectivity.GROUP_COLUMNS, "flags"]]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_summarise_groups_equals_the_pandas_formulation(seed):
    rng = np.random.default_rng(seed)
    n, G = 400, 70
    rows = pd.DataFrame({
        "plate": rng.choice(["P1", "P2", "P3"], n),
        "selectivity_pct": np.where(rng.random(n) < 0.8, rng.normal(90, 5, n), np.nan),
        "selectivity_se": np.where(rng.random(n) < 0.9, rng.uniform(0.1, 3, n), np.nan),
        "selectivity_df": rng.integers(1, 8, n).astype(float),
        "selectivity_blank_se": np.where(rng.random(n) < 0.5, rng.uniform(0, 1, n), np.nan),
        "ee_pct": np.where(rng.random(n) < 0.6, rng.normal(40, 10, n), np.nan),
        "ee_se": rng.uniform(0.1, 3, n),
        "ee_df": rng.uniform(1, 9, n),
        "flags": pd.Series(rng.choice(["", "ee_drift", "selectivity_low_product;ee_drift", None], n), dtype=object),
    })
    codes = np.where(rng.random(n) < 0.1, -1, rng.integers(0, G - 5, n))      # some groups empty
    pd.testing.assert_frame_equal(selectivity.summarise_groups(rows, codes, G, 0.9),
                                  _summarise_groups_pandas(rows, codes, G, 0.9))
    empty = pd.DataFrame({"flags": []})
    pd.testing.assert_frame_equal(selectivity.summarise_groups(empty, np.zeros(0, dtype=np.int64), G),
                                  _summarise_groups_pandas(empty, np.zeros(0, dtype=np.int64), G))


def test_group_rates_statistics_equal_a_pandas_aggregation():
    d = synthetic_campaign(SyntheticSpec(n_plates=6, seed=8, replicates=4))
    s = AnalysisSettings.from_mapping(d.manifest.analysis)
    per_well = rates.well_rates(d, s)
    w = turnover.well_turnover(d, per_well, turnover.blank_rates(per_well, s), s)
    got = turnover.group_rates(w, s, factor_names=d.factor_names)
    t = w[w["role"].isin(["sample", "reference"]) & w["rate_mM_per_h"].notna()].copy()
    t["temperature_c"] = turnover._tkey(t["temperature_c"])
    keys = ["catalyst", "role", "temperature_c", "loading", "loading_unit", "substrate_conc_mM", *d.factor_names]
    failed = sites.has_flag(t["flags"], "failed_well")
    for c in ("rate_mM_per_h", "tof_per_h", "ton"):
        t.loc[failed, c] = np.nan
    ref = t.groupby(keys, dropna=False, sort=False).agg(
        n_wells=("rate_mM_per_h", "count"), rate=("rate_mM_per_h", "mean"), rate_sd=("rate_mM_per_h", "std"),
        tof=("tof_per_h", "mean"), ton=("ton", "mean")).reset_index()
    ref = ref.sort_values(["catalyst", "temperature_c", "loading", "substrate_conc_mM"], kind="stable",
                          na_position="last").reset_index(drop=True)
    pd.testing.assert_frame_equal(got[keys].reset_index(drop=True), ref[keys])
    np.testing.assert_array_equal(got["n_wells"].to_numpy(), ref["n_wells"].to_numpy())
    measured = (got["censored"].astype(str) == "").to_numpy()        # bounds report their bound, not the mean
    assert measured.mean() > 0.8
    for a, b in (("rate_mM_per_h", "rate"), ("rate_sd_mM_per_h", "rate_sd"), ("tof_per_h", "tof"), ("ton", "ton")):
        np.testing.assert_array_equal(got[a].to_numpy()[measured], ref[b].to_numpy()[measured], err_msg=a)


def test_first_rows_equal_unique_return_index():
    rng = np.random.default_rng(3)
    codes, _ = pd.factorize(rng.integers(0, 40, 500))           # numbered in order of first appearance
    codes = np.asarray(codes, dtype=np.int64)
    np.testing.assert_array_equal(turnover._first_rows(codes), np.unique(codes, return_index=True)[1])
    assert turnover._first_rows(np.zeros(0, dtype=np.int64)).size == 0


def test_group_medians_of_threes_with_many_missing_and_infinite_values():
    rng = np.random.default_rng(1)
    g = rng.permutation(np.repeat(np.arange(400), 3))
    x = rng.normal(size=g.size)
    x[rng.random(g.size) < 0.4] = np.nan                  # groups with 0, 1, 2 or 3 values
    median = turnover._Medians(g, 400)
    ref = pd.Series(x).groupby(g).median().reindex(range(400)).to_numpy()
    np.testing.assert_array_equal(median(x), ref)
    x[:5], x[5:8] = np.inf, -np.inf
    ref = pd.Series(x).groupby(g).median().reindex(range(400)).to_numpy()
    np.testing.assert_array_equal(median(x), ref)
