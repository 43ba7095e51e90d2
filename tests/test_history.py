"""A catalyst's history across campaigns: TOF at each reference temperature, benchmark ratio, bounds."""
from __future__ import annotations

import dataclasses
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from rounds import K_PER_H, ROUND1, ROUND2, add_second_round

from screenlab.cli.history_cmd import history_frame
from screenlab.pipeline import analyse
from screenlab.stats.bounds import censored_of, estimate_text
from screenlab.stats.history import (HistorySource, benchmark_ratio, catalyst_history,
                                     display_table, reference_tofs)
from screenlab.stats.ranking import rank_candidates
from screenlab.store import Store

DEMO = Path(__file__).resolve().parents[1] / "demo_campaign" / "th-screen-2026"


@pytest.fixture(scope="module")
def th():
    from screenlab.ingest import read_campaign

    return analyse(read_campaign(DEMO).data)


@pytest.fixture(scope="module")
def two_rounds(demo_store, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("hist")
    path = tmp / "store.duckdb"
    shutil.copy2(demo_store, path)
    add_second_round(path, tmp)
    return path


def test_benchmark_ratio_is_the_welch_interval_on_the_log_scale():
    # Reference: scipy.stats.ttest_ind(equal_var=False).confidence_interval on the log values (Welch's
    # t interval with Welch-Satterthwaite df); our ratio takes each side as (geometric mean, SE of the
    # mean log, n - 1) and must give exp() of that interval.
    rng = np.random.default_rng(4)
    for n1, n2, s1, s2 in ((3, 6, 0.1, 0.3), (5, 4, 0.25, 0.05), (12, 2, 0.2, 0.2)):
        la, lb = rng.normal(4.0, s1, n1), rng.normal(3.2, s2, n2)
        want = stats.ttest_ind(la, lb, equal_var=False).confidence_interval(0.95)
        r, lo, hi, df = benchmark_ratio([np.exp(la.mean())], [la.std(ddof=1) / np.sqrt(n1)], [n1 - 1],
                                        [np.exp(lb.mean())], [lb.std(ddof=1) / np.sqrt(n2)], [n2 - 1], 0.95)
        assert r[0] == pytest.approx(np.exp(la.mean() - lb.mean()), rel=1e-12)
        assert (lo[0], hi[0]) == pytest.approx((np.exp(want.low), np.exp(want.high)), rel=1e-9)
        assert df[0] == pytest.approx(stats.ttest_ind(la, lb, equal_var=False).df, rel=1e-9)


def test_benchmark_ratio_with_infinite_df_is_normal():
    # both sides with df = inf: the normal quantile (scipy.stats.norm), SE the root sum of squares
    r, lo, hi, df = benchmark_ratio([200.0], [0.1], [np.inf], [100.0], [0.2], [np.inf], 0.90)
    z = stats.norm.ppf(0.95)
    assert np.isinf(df[0]) and r[0] == pytest.approx(2.0)
    assert lo[0] == pytest.approx(2.0 * np.exp(-z * np.hypot(0.1, 0.2)))
    assert hi[0] == pytest.approx(2.0 * np.exp(z * np.hypot(0.1, 0.2)))
    # a missing SE leaves the ratio but no interval; a non-positive estimate leaves nothing
    r, lo, hi, _ = benchmark_ratio([2.0, -1.0], [np.nan, 0.1], [3, 3], [1.0, 1.0], [0.1, 0.1], [3, 3])
    assert r[0] == pytest.approx(2.0) and np.isnan(lo[0]) and np.isnan(hi[0]) and np.isnan(r[1])


def test_reference_tofs_take_the_measured_group_else_the_arrhenius_prediction(th):
    from screenlab.kinetics.arrhenius import predict_tof

    kin = th.kinetics
    got = reference_tofs(kin, 60.0).set_index("catalyst")
    # plain pandas: standard-condition rows at 60 degC, the group with the most wells per catalyst
    r = kin.rates[kin.rates["is_standard"].astype(bool) & (kin.rates["temperature_c"] == 60.0)]
    r = r.sort_values("n_wells", ascending=False).drop_duplicates("catalyst").set_index("catalyst")
    assert set(got.index) == set(r.index) and (got["basis"] == "measured").all()
    assert got["tof_per_h"].to_dict() == pytest.approx(r["tof_per_h"].to_dict())
    assert got.loc["RU-01", "ln_tof_se"] == pytest.approx(r.loc["RU-01", "tof_se_per_h"] / r.loc["RU-01", "tof_per_h"])
    # at 65 degC nothing was measured: every fitted catalyst comes from its Arrhenius line
    at65 = reference_tofs(kin, 65.0).set_index("catalyst")
    assert (at65["basis"] == "arrhenius").all()
    arr = kin.arrhenius[kin.arrhenius["catalyst"] == "RU-04"]
    assert at65.loc["RU-04", "tof_per_h"] == pytest.approx(float(predict_tof(arr, 65.0)["tof_per_h"].iloc[0]))


def test_history_lists_every_round_with_the_benchmark_ratio(two_rounds):
    hist = history_frame(Store(two_rounds, read_only=True), "RU-01", top_k=3, draws=2000, seed=0)
    assert hist["campaign"].tolist() == [ROUND1, ROUND2] and hist["parent"].tolist() == ["", ROUND1]
    assert (hist["tof_ci_low"] < hist["tof_per_h"]).all() and (hist["tof_per_h"] < hist["tof_ci_high"]).all()
    assert (hist["vs_benchmark_ci_low"] < hist["vs_benchmark"]).all()
    assert (hist["vs_benchmark"] < hist["vs_benchmark_ci_high"]).all()
    # the ratio is TOF / TOF(benchmark) at the same reference temperature, from the same table
    for row in hist.itertuples():
        assert row.vs_benchmark == pytest.approx(row.tof_per_h / row.benchmark_tof_per_h)
    # round 2 was generated with rate constants 0.60 (RU-01) and 0.25 h-1 (REF-RU) on equal sites, so its
    # TOF ratio is 2.4 by construction; the estimate is within its scatter (4 % per well) of that
    r2 = hist.iloc[1]
    assert r2["vs_benchmark"] == pytest.approx(K_PER_H["RU-01"] / K_PER_H["REF-RU"], rel=0.10)
    assert r2["rank"] == 1 and r2["n_ranked"] == 4 and r2["p_top"] > 0.99
    assert "decision 1 (pick 1)" in hist.iloc[0]["decisions"]


def test_history_rank_and_p_top_are_the_rankings_own(two_rounds):
    store = Store(two_rounds, read_only=True)
    hist = history_frame(store, "RU-02", top_k=2, draws=3000, seed=5).set_index("campaign")
    for name in (ROUND1, ROUND2):
        a = analyse(store.load_campaign(name))
        r = rank_candidates(a.kinetics, a.quality, metric="tof", top_k=2, draws=3000, seed=5,
                            confidence=a.settings.confidence, catalysts=a.data.catalysts).set_index("catalyst")
        assert hist.loc[name, "rank"] == r.loc["RU-02", "rank"] and hist.loc[name, "p_top"] == r.loc["RU-02", "p_top"]


def test_history_follows_an_alias(two_rounds):
    hist = history_frame(Store(two_rounds, read_only=True), "RU-04", top_k=3, draws=1000, seed=0)
    assert hist[["campaign", "catalyst"]].values.tolist() == [[ROUND1, "RU-04"], [ROUND2, "RU-04-B2"]]
    r2 = hist.iloc[1]
    assert r2["vs_benchmark"] == pytest.approx(K_PER_H["RU-04-B2"] / K_PER_H["REF-RU"], rel=0.10)


@pytest.mark.filterwarnings("ignore:no readings.csv")
def test_the_benchmark_compares_to_itself_and_a_planned_round_says_so(th, tmp_path):
    from screenlab.export.nextround import design_next_round
    from screenlab.ingest import read_campaign

    folder = design_next_round(tmp_path / "nr", th.data, ["RU-01"], temperatures_c=[60], seed=1)
    planned = analyse(read_campaign(folder).data)
    hist = catalyst_history([HistorySource(ROUND1, "REF-RU", th), HistorySource("next", "REF-RU", planned,
                                                                                 parent=ROUND1)], draws=500)
    assert hist.loc[0, "vs_benchmark"] == 1.0 and np.isnan(hist.loc[0, "vs_benchmark_ci_low"])
    assert hist.loc[1, "status"] == "planned (no readings yet)" and np.isnan(hist.loc[1, "tof_per_h"])
    assert display_table(hist).loc[0, "vs_benchmark"] == "1 (the benchmark)"


def _with_censored(analysis, catalyst: str, side: str):
    """The analysis with the coming ``censored`` column in its rates table, one group censored as
    the kinetics contract will write it: lower -> (bound, bound, NaN), upper -> (bound, NaN, bound)."""
    kin = analysis.kinetics
    rates = kin.rates.copy()
    rates["censored"] = ""
    hit = (rates["catalyst"].astype(str) == catalyst) & (rates["temperature_c"] == 60.0) & rates["is_standard"]
    rates.loc[hit, "censored"] = side
    bound = rates.loc[hit, "tof_ci_low" if side == "lower" else "tof_ci_high"]
    rates.loc[hit, "tof_per_h"] = bound
    rates.loc[hit, "tof_ci_high" if side == "lower" else "tof_ci_low"] = np.nan
    return dataclasses.replace(analysis, kinetics=dataclasses.replace(kin, rates=rates)), float(bound.iloc[0])


@pytest.mark.parametrize("side, sign", [("lower", ">="), ("upper", "<=")])
def test_a_censored_tof_is_a_bound_and_so_is_its_ratio(th, side, sign):
    cens, bound = _with_censored(th, "RU-04", side)
    hist = catalyst_history([HistorySource(ROUND1, "RU-04", cens)], draws=500)
    row = hist.iloc[0]
    assert row["tof_censored"] == side and row["tof_per_h"] == pytest.approx(bound)
    tofs = reference_tofs(cens.kinetics, 60.0).set_index("catalyst")
    ref_lo, ref_hi = tofs.loc["REF-RU", "tof_ci_low"], tofs.loc["REF-RU", "tof_ci_high"]
    # a lower bound over the benchmark's upper limit (>=); an upper bound over its lower limit (<=)
    assert row["vs_benchmark"] == pytest.approx(bound / (ref_hi if side == "lower" else ref_lo))
    assert row["vs_benchmark_censored"] == side and np.isnan(row["vs_benchmark_ci_low"])
    shown = display_table(hist).iloc[0]
    assert shown["tof_at_ref"].startswith(sign) and shown["vs_benchmark"].startswith(sign)
    assert "(" not in shown["tof_at_ref"].split(" h-1")[0]      # a bound is never a point with an interval


def test_bounds_are_written_as_bounds():
    assert estimate_text(12.345, 10, 15) == "12.3 (10–15)"
    assert estimate_text(12.345, 12.345, np.nan, "lower") == ">= 12.3"
    assert estimate_text(0.5, np.nan, 0.5, "upper") == "<= 0.5"
    assert estimate_text(np.nan, 1, 2) == "–"
    frame = pd.DataFrame({"x": [1.0, 2.0]})
    assert censored_of(frame).tolist() == ["", ""]                 # no column: all measured
    frame["censored"] = ["lower", None]
    assert censored_of(frame).tolist() == ["lower", ""]
