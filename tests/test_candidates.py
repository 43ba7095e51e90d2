"""Candidate tables (screenlab.stats.candidates): the metric table, flags and plate information
of each candidate, intervals (scipy.stats quantiles), reasons in words, on small cases stated by hand.
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.errors import UsageError
from screenlab.kinetics import KineticsResult
from screenlab.stats.candidates import (METRICS, _plate_info, candidate_table, get_metric, merge_codes,
                                        ranking_temperature)


def _plain_union(*cols) -> list[str]:
    """The rule (common practice, no source): per row, every ';'-separated code of the text parts, in
    order of appearance, each once; anything that is not text counts as empty."""
    return [";".join(dict.fromkeys(c for p in parts if isinstance(p, str) for c in p.split(";") if c))
            for parts in zip(*[list(c) for c in cols])]


# ------------------------------------------------------------------------------------------- metric table
def test_metric_table_directions():
    assert METRICS["tof"].higher_is_better and METRICS["tof"].lognormal
    assert METRICS["enhancement"].higher_is_better and METRICS["ton"].higher_is_better
    assert not METRICS["ea"].higher_is_better and not METRICS["ea"].lognormal
    assert METRICS["tof"].ci_column("low") == "tof_ci_low_per_h"
    assert METRICS["ea"].ci_column("high") == "ea_ci_high_kj_mol"
    assert get_metric("ee") is METRICS["ee"]
    with pytest.raises(UsageError, match="choose one of tof"):
        get_metric("speed")


def test_ranking_temperature_defaults_to_the_settings(fake_kin):
    kin = fake_kin([1.0], [0.1])
    assert ranking_temperature(kin, None) == kin.settings.reference_temperature_c
    assert ranking_temperature(kin, 55) == 55.0


# ------------------------------------------------------------------------------------------- flags
def test_merge_codes_is_the_union_of_the_codes():
    rng = np.random.default_rng(3)
    pool = ["", "a", "b", "a;b", "b;a", ";a;", "c;a;c", None, np.nan, "a;;b"]
    cols = [list(rng.choice(np.array(pool, dtype=object), 400)) for _ in range(3)]
    cols[1] = pd.Series(cols[1], dtype="str")                         # Arrow-backed text, with NaN
    cols[2] = np.where(rng.random(400) < 0.5, "reference", "")         # numpy text
    assert merge_codes(*cols) == _plain_union(*cols)
    assert merge_codes([], []) == []


def test_merge_codes_edge_inputs():
    pool = ["", ";", ";;", "a", "a;a", ";a", "a;", "b;a;b", None, np.nan, pd.NA, "x"]
    rng = np.random.default_rng(8)
    cols = [list(rng.choice(np.array(pool, dtype=object), 300)) for _ in range(4)]
    variants = [cols[0], pd.Series(cols[1], dtype="object"), pd.Series(cols[2], dtype="string"),
                pd.Series([c if isinstance(c, str) else None for c in cols[3]], dtype="category")]
    assert merge_codes(*variants) == _plain_union(*variants)
    assert merge_codes(["a"]) == ["a"]
    assert merge_codes([";"]) == [""]
    assert merge_codes(["a;a"]) == ["a"]
    assert merge_codes(np.array(["", "q"]), ["", ""]) == ["", "q"]


def _plates_kin():
    """A on P1, P2; B on P2; C on P3; the benchmark R on P1; a blank well on P2 (not a candidate)."""
    wells = pd.DataFrame({"catalyst": ["A", "A", "B", "C", "R", None], "plate": ["P1", "P2", "P2", "P3", "P1", "P2"],
                          "role": ["sample", "sample", "sample", "sample", "reference", "blank"]})
    return KineticsResult(pd.DataFrame(), wells, pd.DataFrame(), pd.DataFrame(), pd.DataFrame(), pd.DataFrame(),
                          None)


QUALITY = pd.DataFrame({"plate": ["P1", "P2", "P3"], "status": ["ok", "failed", "unchecked"],
                        "flags": ["edge_effect", "failed;low_z", "no_benchmark;edge_effect;blank_high"]})


def test_plate_info_states_each_candidates_plates():
    # stated by hand: all / any failed plates, any unchecked one, the plates' flags without the
    # status codes (failed, no_benchmark), in the order of the catalyst's plates, each once
    got = _plate_info(_plates_kin(), QUALITY).set_index("catalyst")
    assert got.index.tolist() == ["A", "B", "C", "R"]
    assert got["all_failed"].tolist() == [False, True, False, False]
    assert got["any_failed"].tolist() == [True, True, False, False]
    assert got["any_unchecked"].tolist() == [False, False, True, False]
    assert got["plate_flags"].tolist() == ["edge_effect;low_z", "low_z", "edge_effect;blank_high", "edge_effect"]
    # the plates behind an estimate (the rates row's plates) replace the catalyst's own
    used = _plate_info(_plates_kin(), QUALITY, pd.Series({"A": "P2"})).set_index("catalyst")
    assert used.loc["A", "all_failed"] and used.loc["A", "plate_flags"] == "low_z"
    assert used.loc["C", "plate_flags"] == "edge_effect;blank_high"
    # without a quality table nothing is flagged
    none = _plate_info(_plates_kin(), None)
    assert sorted(none["catalyst"]) == ["A", "B", "C", "R"] and not none[["all_failed", "any_failed"]].any().any()
    assert (none["plate_flags"] == "").all()


def test_flags_travel_from_kinetics_and_plates(fake_kin):
    kin = fake_kin([10, 20], [1, 1], flags=["has_outlier", ""], roles=["sample", "reference"])
    q = pd.DataFrame({"plate": ["P1", "P2"], "status": ["flagged", "failed"], "flags": ["edge_effect", "failed"]})
    t = candidate_table(kin, q).set_index("catalyst")
    assert t.loc["K0", "flags"] == "has_outlier;edge_effect;on_failed_plate"
    assert t.loc["K1", "flags"] == "edge_effect;on_failed_plate;reference"


# ------------------------------------------------------------------------------------------- estimates and intervals
def test_candidate_table_intervals(fake_kin):
    kin = fake_kin([100.0, 50.0], [10.0, 5.0], df=[4.0, np.nan], ea=[60.0, 55.0], ea_se=[2.0, 1.0],
                   ea_df=[3.0, 8.0])
    t = candidate_table(kin).set_index("catalyst")
    # TOF log-normal: exp(ln x -/+ t(0.975, df) se/x) (delta method; scipy.stats.t / norm quantiles;
    # a missing df: the normal quantile)
    q = np.array([stats.t.ppf(0.975, 4), stats.norm.ppf(0.975)])
    np.testing.assert_allclose(t["ci_low"], [100 * np.exp(-q[0] * 0.1), 50 * np.exp(-q[1] * 0.1)], rtol=1e-12)
    np.testing.assert_allclose(t["mu"], np.log([100.0, 50.0]), rtol=1e-12)
    np.testing.assert_allclose(t["sigma"], [0.1, 0.1], rtol=1e-12)
    # Ea: t draws, est -/+ t(0.975, fit_df) se
    e = candidate_table(kin, metric="ea").set_index("catalyst")
    np.testing.assert_allclose(e["ci_high"], [60 + stats.t.ppf(0.975, 3) * 2, 55 + stats.t.ppf(0.975, 8)], rtol=1e-12)
    assert (e["basis"] == "fit").all() and (e["reason"] == "").all()


def test_enhancement_interval_kept_exactly(fake_kin):
    # the log-scale SE backed out of the (log-symmetric) enhancement interval reproduces it
    kin = fake_kin([10.0, 20.0], [1.0, 1.0], df=5.0)
    t = candidate_table(kin, metric="enhancement").set_index("catalyst")
    assert t.loc["K1", "ci_low"] == pytest.approx(200 / 1.1) and t.loc["K1", "ci_high"] == pytest.approx(220.0)


def test_enhancement_and_ton_draws_follow_the_rates_table_not_the_ranking_confidence(small_synthetic):
    # the draws' scale is the rates table's SE of ln(enhancement) with its Welch df, whatever
    # confidence the ranking reports its intervals at; TON's df is the replicates' n - 1
    from screenlab.pipeline import analyse

    kin = analyse(small_synthetic).kinetics
    r = kin.rates[kin.rates["is_standard"] & (np.abs(kin.rates["temperature_c"] - 60.0) < 0.05)]
    r = r.sort_values("n_wells", ascending=False).drop_duplicates("catalyst").set_index("catalyst")
    tabs = {c: candidate_table(kin, metric="enhancement", confidence=c).set_index("catalyst") for c in (0.8, 0.95)}
    e = tabs[0.95].loc[r.index]
    ok = np.isfinite(r["enhancement_ln_se"]).to_numpy() & (e["reason"] == "").to_numpy()
    assert ok.sum() >= 10
    np.testing.assert_array_equal(tabs[0.8].loc[r.index, "sigma"], e["sigma"])
    np.testing.assert_allclose(e["sigma"][ok], r["enhancement_ln_se"][ok], rtol=1e-12)
    np.testing.assert_allclose(e["df"][ok], r["enhancement_df"][ok], rtol=1e-12)
    q80 = stats.t.ppf(0.9, r["enhancement_df"][ok])               # scipy.stats quantile at the asked confidence
    np.testing.assert_allclose(tabs[0.8].loc[r.index, "ci_high"][ok],
                               r["enhancement"][ok] * np.exp(q80 * r["enhancement_ln_se"][ok]), rtol=1e-9)
    ton = candidate_table(kin, metric="ton").set_index("catalyst").loc[r.index]
    np.testing.assert_array_equal(ton["df"].to_numpy(float), r["ton_df"].to_numpy(float))


def test_censored_bounds_keep_one_side(fake_kin):
    kin = fake_kin([1500.0, 0.4], [np.nan, np.nan])
    kin = dataclasses.replace(kin, rates=kin.rates.assign(censored=["lower", "upper"]))
    t = candidate_table(kin).set_index("catalyst")
    assert t.loc["K0", "ci_low"] == 1500.0 and np.isnan(t.loc["K0", "ci_high"]) and t.loc["K0", "order"] == 1
    assert t.loc["K1", "ci_high"] == 0.4 and np.isnan(t.loc["K1", "ci_low"]) and t.loc["K1", "order"] == 4


# ------------------------------------------------------------------------------------------- reasons
def test_unmeasured_temperature_without_fit(fake_kin):
    t = candidate_table(fake_kin([10, 20], [1, 1]), at_temperature_c=80.0)
    # what is missing, in words: the temperature, and why there is no line to predict from
    assert (t["reason"] == "not measured at 80 degC; measured at one temperature: no Arrhenius line to "
                           "predict from").all()


def test_reasons_say_what_is_missing(fake_kin):
    # K0 active but measured at one temperature, K1 inactive at every temperature, K2 at two
    kin = fake_kin([30.0, -1.0, 20.0], [3.0, 1.0, 2.0])
    arr = pd.DataFrame({"catalyst": ["K0", "K1", "K2"], "role": "sample", "n_temperatures": [1, 0, 2],
                        "t_min_c": 60.0, "t_max_c": [60.0, 60.0, 70.0], "ea_kj_mol": [np.nan, np.nan, 55.0],
                        "ea_se": np.nan, "fit_df": [np.nan, np.nan, 0.0], "flags": ["one_temperature",
                                                                                   "no_activity", "two_temperatures"],
                        "fit_intercept": [np.nan, np.nan, 25.0], "fit_slope_k": [np.nan, np.nan, -6600.0],
                        "cov_ii": np.nan, "cov_is": np.nan, "cov_ss": np.nan})
    kin = dataclasses.replace(kin, arrhenius=arr)
    r = candidate_table(kin, at_temperature_c=45.0).set_index("catalyst")["reason"]
    assert r["K0"] == "not measured at 45 degC; measured at one temperature only: no Arrhenius line to predict from"
    assert r["K1"] == "not measured at 45 degC; no activity over the blank at any temperature"
    assert "two temperatures" in r["K2"] and "no uncertainty" in r["K2"]
    assert not any("no activity" in x for x in r[["K0", "K2"]])       # active: never "no activity"
    e = candidate_table(kin, metric="ea").set_index("catalyst")["reason"]
    assert e["K0"] == "measured at one temperature only: no Ea"
    assert e["K1"] == "no activity over the blank at any temperature"


def test_reasons_name_temperatures_left_out_for_a_cause_other_than_inactivity(fake_kin):
    # K0 faster than the first reading at all four temperatures; K1 fitted at two of four (the other
    # two too fast): neither is "inactive", and the reason says how many were fitted and why not the rest
    kin = fake_kin([30.0, 20.0], [3.0, 2.0], t=[40.0, 40.0])
    kin = dataclasses.replace(kin, rates=pd.concat([kin.rates.assign(temperature_c=t) for t in (40.0, 50.0, 60.0, 70.0)],
                                                   ignore_index=True))
    fast = "faster than the first reading allows (a lower bound)"
    arr = pd.DataFrame({"catalyst": ["K0", "K1"], "role": "sample", "n_temperatures": [0, 2],
                        "t_min_c": [np.nan, 40.0], "t_max_c": [np.nan, 50.0], "ea_kj_mol": [np.nan, 55.0],
                        "ea_se": np.nan, "fit_df": [np.nan, 0.0], "flags": ["left_out_bound", "two_temperatures;left_out_bound"],
                        "left_out": ["; ".join(f"{t} C: {fast}" for t in (40, 50, 60, 70)), f"60 C: {fast}; 70 C: {fast}"]})
    e = candidate_table(dataclasses.replace(kin, arrhenius=arr), metric="ea").set_index("catalyst")["reason"]
    assert e["K0"].startswith("no temperature usable for a fit [left out: 40 C: faster") and e["K0"].endswith(": no Ea")
    assert e["K1"].startswith("fitted at two of 4 temperatures [left out: 60 C: faster")
    assert not any("no activity" in x or "measured at two temperatures only" in x for x in e)


def test_unrankable_reasons_in_their_order(fake_kin):
    kin = fake_kin([100.0, -2.0, 30.0, 40.0], [5.0, 1.0, np.nan, 2.0], n=[4, 4, 1, 4])
    wells = pd.concat([kin.wells[kin.wells.catalyst != "K3"],
                       pd.DataFrame({"catalyst": ["K3"], "role": ["sample"], "plate": ["P9"]})])
    quality = pd.DataFrame({"plate": ["P1", "P2", "P9"], "status": ["ok", "ok", "failed"], "flags": ["", "", "failed"]})
    t = candidate_table(dataclasses.replace(kin, wells=wells), quality).set_index("catalyst")
    assert t["reason"].tolist() == ["", "no activity over the blank",
                                    "too few wells (fewer than 2 at this condition)", "measured only on failed plates"]
    assert t["order"].tolist() == [0, 4, 4, 4]
