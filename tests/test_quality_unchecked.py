"""Plates without a benchmark: the robust Z' and SSMD against outside references, the 'unchecked'
status, and a campaign without any benchmark ranked on TOF (a judged case of issue 14).

Outside references: numpy medians and scipy.stats.median_abs_deviation(scale="normal") for the
robust statistics; the SSMD / d+-probability link of Zhang et al. (J. Biomol. Screen. 2007, 12,
497: for two normal groups Phi(SSMD) = P(X1 > X2)) checked against the Mann-Whitney U statistic,
U / (n1 n2), which counts the pairs in that order (scipy.stats.mannwhitneyu); Spearman's rho from
scipy.stats.spearmanr against the generator's true TOF (screenlab.synthetic truth_table).
"""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.pipeline import analyse
from screenlab.stats.quality import SSMD_MIN, plate_quality, robust_zprime, ssmd, zprime
from screenlab.stats.ranking import rank_candidates
from screenlab.synthetic import SyntheticSpec, synthetic_campaign, truth_table

# a plate's worth of numbers with one stray well among the positives (invented)
POS = [10.2, 9.7, 10.9, 10.1, 9.5, 30.0]
NEG = [0.9, 1.1, 1.0, 1.3, 0.8]


def test_robust_zprime_against_numpy_median_and_scipy_mad():
    sp = stats.median_abs_deviation(POS, scale="normal")
    sn = stats.median_abs_deviation(NEG, scale="normal")
    expected = 1 - 3 * (sp + sn) / abs(np.median(POS) - np.median(NEG))
    # 1.4826 (ours) vs scipy's 1 / Phi^-1(3/4) = 1.482602...: equal to 2e-6 relative
    assert robust_zprime(POS, NEG) == pytest.approx(expected, rel=1e-5)
    # worked by hand (computed here): medians 10.15 and 1.0, MADs 0.55 and 0.1 ->
    # Z' = 1 - 3 x 1.4826 x 0.65 / 9.15 = 0.68404
    assert robust_zprime(POS, NEG) == pytest.approx(1 - 3 * 1.4826 * 0.65 / 9.15, rel=1e-12)
    # the stray well drags the classical Z' (Zhang, Chung & Oldenburg 1999) far below the robust one
    assert zprime(POS, NEG) < 0 < robust_zprime(POS, NEG)
    assert np.isnan(robust_zprime([1.0], NEG))


def test_ssmd_is_the_d_plus_probability_of_two_normal_groups():
    rng = np.random.default_rng(14)
    a = rng.normal(5.0, 1.0, 4000)
    b = rng.normal(2.0, 1.5, 4000)
    beta = ssmd(a, b)
    # population value (mu1 - mu2) / sqrt(s1^2 + s2^2) = 3 / sqrt(3.25) (Zhang, Genomics 2007, 89, 552)
    assert beta == pytest.approx(3 / np.sqrt(3.25), abs=0.05)
    # Phi(SSMD) against the share of (a, b) pairs in order: U / (n1 n2) from scipy.stats.mannwhitneyu
    u = stats.mannwhitneyu(a, b, alternative="two-sided").statistic
    assert stats.norm.cdf(beta) == pytest.approx(u / (a.size * b.size), abs=0.01)
    # the robust form: medians and scipy's normal-consistent MAD
    expected = (np.median(a) - np.median(b)) / np.hypot(stats.median_abs_deviation(a, scale="normal"),
                                                        stats.median_abs_deviation(b, scale="normal"))
    assert ssmd(a, b, robust=True) == pytest.approx(expected, rel=1e-5)


@pytest.fixture(scope="module")
def no_benchmark():
    spec = SyntheticSpec(n_plates=8, n_reference=0, seed=11)
    data = synthetic_campaign(spec)
    return spec, data, analyse(data)


def test_plates_without_benchmark_are_unchecked_not_failed(no_benchmark):
    spec, data, a = no_benchmark
    q = a.quality
    assert (q["status"] == "unchecked").all()
    assert q["flags"].str.contains("no_benchmark").all() and not q["flags"].str.contains("failed").any()
    assert q["zprime"].isna().all()
    # clean invented plates: the upper-quartile wells stand well clear of the blanks
    assert (q["separation_basis"] == "replicates").all()
    assert (q["robust_zprime"] > 0.5).all() and (q["ssmd"] > SSMD_MIN).all()
    # the detection limit is the kinetics' blank LOD (3 x SE of the blank mean), the plate's worst temperature
    lod = a.kinetics.blanks.groupby("plate")["blank_lod_mM_per_h"].max()
    np.testing.assert_allclose(q.set_index("plate")["blank_lod_mM_per_h"], lod.reindex(q["plate"]), rtol=1e-12)
    # about 5 % of the invented candidates are inactive: the rest are detectably above the blank
    assert q["sample_active_pct"].between(80, 100).all()


def test_plate_without_benchmark_and_without_blanks_fails(no_benchmark):
    spec, data, a = no_benchmark
    kin = a.kinetics
    w = kin.wells[~((kin.wells["plate"] == "P0003") & (kin.wells["role"] == "blank"))]
    q = plate_quality(dataclasses.replace(kin, wells=w), data, kin.settings).set_index("plate")
    assert q.loc["P0003", "status"] == "failed" and "no_controls" in q.loc["P0003", "flags"]
    assert (q.drop(index="P0003")["status"] == "unchecked").all()


def test_dead_plate_without_benchmark_says_nothing_is_active():
    data = synthetic_campaign(SyntheticSpec(n_plates=4, n_reference=0, inactive_share=1.0, seed=3))
    q = analyse(data).quality
    assert (q["status"] == "unchecked").all()
    assert q["flags"].str.contains("no_detectable_activity").all()
    assert q["ssmd"].isna().all() and q["robust_zprime"].isna().all()   # nothing to separate


def test_sample_separation_agrees_with_the_benchmark_on_the_demo_plates(demo_store):
    # own expectation: on plates with a benchmark, the sample-based robust Z' passes where the
    # benchmark's Z' passes (both above Zhang's 0.5)
    from screenlab.store import Store

    store = Store(demo_store, read_only=True)
    try:
        for name in ("th-screen-2026", "ester-hydrolysis-uv", "henry-chiral-2026"):
            q = analyse(store.load_campaign(name)).quality
            assert (q["zprime"] > 0.5).all() and (q["robust_zprime"] > 0.5).all(), name
            assert not (q["status"] == "unchecked").any()
    finally:
        store.close()


@pytest.mark.parametrize("seed", [21, 22])
def test_campaign_without_any_benchmark_is_ranked_on_tof(seed):
    # the judged case: no benchmark on any plate -> at least 90 % of the measurable (truly active)
    # candidates ranked, Spearman >= 0.9 against the true TOF, no plate failed for lack of a benchmark
    spec = SyntheticSpec(n_plates=12, n_reference=0, seed=seed)
    data = synthetic_campaign(spec)
    a = analyse(data)
    assert not (a.quality["status"] == "failed").any()
    r = rank_candidates(a.kinetics, a.quality, metric="tof", top_k=5, seed=seed, catalysts=data.catalysts)
    m = r.merge(truth_table(spec), on="catalyst")
    measurable = m[m["tof_ref_per_h"] > 0]
    ranked = measurable[measurable["rank"].notna()]
    assert len(ranked) >= 0.9 * len(measurable)
    rho = stats.spearmanr(ranked["rank"].astype(float), -ranked["tof_ref_per_h"]).statistic
    assert rho >= 0.9
    # the plates' status travels with every ranked candidate
    assert r.loc[r["rank"].notna(), "flags"].str.contains("on_unchecked_plate").all()
    got = r[r["rank"].notna()]
    assert got["p_best"].sum() == pytest.approx(1.0, abs=1e-9) and got["p_top"].sum() == pytest.approx(5.0, abs=1e-9)
    # the truly inactive ones are unranked for their lack of activity, not for their plates
    dead = m[m["tof_ref_per_h"] == 0]
    assert not dead["reason"].str.contains("failed plates").any()


def test_candidates_only_on_failed_plates_stay_unranked():
    from quality_campaigns import make_campaign

    data, kin, _ = make_campaign(seed=3, bad_plate="P50-1")
    q = plate_quality(kin, data, kin.settings)
    assert q.set_index("plate").loc["P50-1", "status"] == "failed"
    r50 = rank_candidates(kin, q, at_temperature_c=50.0, draws=500)
    assert (r50.loc[r50["role"] == "sample", "reason"] == "measured only on failed plates").all()
    r60 = rank_candidates(kin, q, at_temperature_c=60.0, draws=500)
    assert r60.loc[r60["role"] == "sample", "rank"].notna().all()


def test_ranking_flags_a_mix_of_plates():
    # invented statuses on real plates: a candidate on an unchecked plate carries the flag,
    # one only on failed plates is unranked with that reason
    spec = SyntheticSpec(n_plates=4, n_reference=0, seed=5)
    data = synthetic_campaign(spec)
    a = analyse(data)
    q = a.quality.copy()
    q.loc[q["plate"] == "P0003", ["status", "flags"]] = ["failed", "no_controls;failed"]
    r60 = rank_candidates(a.kinetics, q, metric="tof", at_temperature_c=60.0, draws=500, catalysts=data.catalysts)
    assert r60["rank"].isna().all()                  # P0003 is the 60 degC plate
    active = r60.merge(truth_table(spec), on="catalyst").query("tof_ref_per_h > 0")
    assert (active["reason"] == "measured only on failed plates").all()
    r50 = rank_candidates(a.kinetics, q, metric="tof", at_temperature_c=50.0, draws=500, catalysts=data.catalysts)
    assert r50["rank"].notna().sum() >= 20
    assert r50.loc[r50["rank"].notna(), "flags"].str.contains("on_unchecked_plate").all()
    pd.testing.assert_frame_equal(q.drop(columns=["status", "flags"]), a.quality.drop(columns=["status", "flags"]))


def test_pipeline_passes_its_control_chart_to_plate_quality(no_benchmark, demo_store):
    # pipeline.analyse makes the control chart once and hands it to plate_quality: same table
    from screenlab.store import Store

    store = Store(demo_store, read_only=True)
    try:
        a = analyse(store.load_campaign("th-screen-2026"))
    finally:
        store.close()
    pd.testing.assert_frame_equal(plate_quality(a.kinetics, a.data, a.settings), a.quality)
    _, data, b = no_benchmark
    pd.testing.assert_frame_equal(plate_quality(b.kinetics, data, b.settings), b.quality)
