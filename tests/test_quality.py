"""Plate quality (screenlab.stats.quality): Z'-factor, median polish and B-scores, the robust Z' and
SSMD, the 'unchecked' status, edge effects, the control chart, and the batched per-plate columns.

Outside references: published worked values of Z' and Z (Zhang, Chung & Oldenburg, J. Biomol.
Screen. 1999, 4, 67) and R's ``medpolish`` documented example; numpy medians and
scipy.stats.median_abs_deviation(scale="normal") for the robust statistics; the SSMD /
d+-probability link of Zhang et al. (J. Biomol. Screen. 2007, 12, 497: for two normal groups
Phi(SSMD) = P(X1 > X2)) checked against the Mann-Whitney U statistic, U / (n1 n2)
(scipy.stats.mannwhitneyu); Spearman's rho from scipy.stats.spearmanr against the generator's true
TOF (screenlab.synthetic truth_table); ``scipy.stats.mannwhitneyu`` one group at a time for the
grouped U test, ``numpy.nanmedian``, and a plain loop over plates (2-D median polish per plate,
scipy.stats.mannwhitneyu) for the batched edge columns. Simulated campaigns come from the
``quality_campaign`` fixture (tests/conftest.py).
"""
from __future__ import annotations

import dataclasses
import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.errors import DataQualityWarning
from screenlab.kinetics import KineticsResult
from screenlab.pipeline import analyse
from screenlab.plates import is_edge
from screenlab.stats.quality import (EDGE_ALPHA, EDGE_MIN_WELLS, MAD_NORMAL, SSMD_MIN, _nanmedian, bscores,
                                     control_chart, edge_test, mannwhitneyu_grouped, median_polish, plate_quality, robust_zprime, ssmd,
                                     well_bscores, z_factor, zprime)
from screenlab.stats.ranking import rank_candidates
from screenlab.synthetic import SyntheticSpec, synthetic_campaign, truth_table


# --------------------------------------------------------------------------- worked values
POS_WORKED = [100, 102, 98, 101, 99]
NEG_WORKED = [10, 12, 8, 11, 9]


def test_zprime_worked_example_ddof1():
    # docs/check-values.md section 4 (computed from the Zhang, Chung & Oldenburg 1999 /
    # IUPAC Gold Book 'Z' factor' definition): sample SD -> 0.894590744661054
    assert zprime(POS_WORKED, NEG_WORKED) == pytest.approx(0.894590744661054, rel=1e-12)


def test_zprime_worked_example_ddof0():
    # same source: population SD -> 0.905719095841794
    assert zprime(POS_WORKED, NEG_WORKED, ddof=0) == pytest.approx(0.905719095841794, rel=1e-12)


def test_z_factor_worked_example():
    # same source: Z of samples [60, 65, 55, 62, 58] against the negative control -> 0.676658477019031
    assert z_factor([60, 65, 55, 62, 58], NEG_WORKED) == pytest.approx(0.676658477019031, rel=1e-12)


def test_zprime_edge_cases():
    # check-values.md section 4 edge cases: sd = 0 both sides -> 1; equal means must not crash
    assert zprime([5, 5, 5], [1, 1, 1]) == 1.0
    assert zprime([5, 6, 7], [5, 6, 7]) == -np.inf
    assert zprime([5, 5], [5, 5]) == -np.inf
    assert np.isnan(zprime([5], [1, 2, 3]))
    assert zprime([5, 6, np.nan, 7], [1, 1, 1]) == pytest.approx(1 - 3 * 1.0 / 5.0)


PARACHUTE = [[14, 15, 14], [7, 4, 7], [8, 2, 10], [15, 9, 10], [0, 2, 0]]


def test_medpolish_r_documented_example():
    # R stats::medpolish example (Tukey, EDA; sport-parachuting deaths); expected values from
    # check-values.md section 5a (line-by-line port of R's medpolish; 2 iterations, sum|res| = 19)
    t, r, c, res, it, conv = median_polish(PARACHUTE)
    assert t == 8
    np.testing.assert_array_equal(r, [6, -1, 0, 2, -8])
    np.testing.assert_array_equal(c, [0, -1, 0])
    np.testing.assert_array_equal(res, [[0, 2, 0], [0, -2, 0], [0, -5, 2], [5, 0, 0], [0, 3, 0]])
    assert conv and it == 2 and np.abs(res).sum() == 19
    np.testing.assert_array_equal(t + r[:, None] + c[None, :] + res, PARACHUTE)


def test_medpolish_zero_mad_gives_nan_and_warning():
    # section 5a: the residual MAD there is 0, so B-scores are undefined -> NaN with a warning
    *_, res, _, _ = median_polish(PARACHUTE)
    with pytest.warns(DataQualityWarning):
        b = bscores(res)
    assert np.isnan(b).all()


PLANTED = [[101, 101, 104, 101, 99, 103],
           [105, 108, 108, 104, 107, 106],
           [96, 99, 103, 125, 98, 101],
           [104, 102, 107, 101, 102, 105]]


def test_medpolish_planted_hit_and_bscore_scaling():
    # check-values.md section 5b (R-medpolish port; exact binary fractions)
    t, r, c, res, it, conv = median_polish(PLANTED)
    assert it == 3 and conv
    assert np.abs(res).sum() == 44.0
    assert t == 102.015625
    np.testing.assert_array_equal(r, [-1.015625, 2.703125, -2.984375, 1.015625])
    np.testing.assert_array_equal(c, [0.140625, -0.015625, 3.625, -0.359375, -1.03125, 1.96875])
    assert res[2, 3] == 26.328125
    raw = bscores(res, mad_scale=1.0)
    scaled = bscores(res)  # default 1.4826 x MAD
    assert raw[2, 3] == pytest.approx(74.8889, abs=1e-4)
    assert scaled[2, 3] == pytest.approx(50.5119, abs=1e-4)
    # next-largest |B| with the raw MAD: B2 = 9.3778, B5 = 9.4222, C1 = -9.0222
    assert raw[1, 1] == pytest.approx(9.3778, abs=1e-4)
    assert raw[1, 4] == pytest.approx(9.4222, abs=1e-4)
    assert raw[2, 0] == pytest.approx(-9.0222, abs=1e-4)
    order = np.argsort(-np.abs(raw), axis=None)
    assert np.unravel_index(order[0], raw.shape) == (2, 3)


def test_medpolish_stack_equals_single_plates_with_padding_and_missing():
    # a stack of plates (different sizes, NaN padded, a missing cell) converges plate by plate
    # exactly as the single-plate polish; R's na.rm = TRUE semantics for the missing cell
    a = np.array(PLANTED, dtype=float)
    a[0, 0] = np.nan
    b = np.array(PARACHUTE, dtype=float)
    stack = np.full((2, 5, 6), np.nan)
    stack[0, :4, :6] = a
    stack[1, :5, :3] = b
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no RuntimeWarning leaks out of the all-NaN padding
        t, r, c, res, it, conv = median_polish(stack)
    for k, m in enumerate((a, b)):
        t1, r1, c1, res1, it1, conv1 = median_polish(m)
        assert t[k] == t1 and it[k] == it1
        np.testing.assert_array_equal(res[k, : m.shape[0], : m.shape[1]], res1)
        np.testing.assert_array_equal(r[k, : m.shape[0]], r1)
    assert np.isnan(res[1, :, 3:]).all()


# --------------------------------------------------------------------------- simulated campaigns
def test_clean_campaign_plates_pass(quality_campaign):
    data, kin, _ = quality_campaign(seed=1)
    q = plate_quality(kin, data, kin.settings)
    assert list(q["plate"]) == list(data.plates["plate"])
    assert (q["status"] != "failed").all()
    assert (q["zprime"] > 0.5).all()
    assert (q["n_reference"] == 4).all() and (q["n_blank"] == 4).all()
    # 8 % log-normal noise -> replicate CVs near 8 %
    assert q["replicate_cv_median_pct"].between(3, 15).all()
    # blanks lie on their own Arrhenius line
    assert q["blank_ratio"].between(0.8, 1.25).all()
    assert not q["flags"].str.contains("edge_effect").any()


def test_zprime_matches_direct_formula_per_plate(quality_campaign):
    data, kin, _ = quality_campaign(seed=2)
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    w = kin.wells
    for plate, g in w.groupby("plate"):
        p = g.loc[g.role == "reference", "rate_mM_per_h"]
        n = g.loc[g.role == "blank", "rate_mM_per_h"]
        # Zhang, Chung & Oldenburg 1999 definition with sample SDs (pandas std is ddof=1)
        z = 1 - 3 * (p.std() + n.std()) / abs(p.mean() - n.mean())
        assert q.loc[plate, "zprime"] == pytest.approx(z, rel=1e-12)


def test_bad_plate_failed(quality_campaign):
    data, kin, _ = quality_campaign(seed=3, bad_plate="P50-1")
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    assert q.loc["P50-1", "status"] == "failed"
    assert "failed" in q.loc["P50-1", "flags"] and "zprime_low" in q.loc["P50-1", "flags"]
    assert q.loc["P40-1", "status"] != "failed"


def test_no_controls_plate_failed(quality_campaign):
    data, kin, _ = quality_campaign(seed=4)
    w = kin.wells[~((kin.wells.plate == "P60-1") & (kin.wells.role == "blank"))]
    kin2 = KineticsResult(kin.amounts, w, kin.blanks, kin.rates, kin.arrhenius, kin.orders, kin.settings)
    q = plate_quality(kin2, data, kin.settings).set_index("plate")
    assert q.loc["P60-1", "status"] == "failed"
    assert "no_controls" in q.loc["P60-1", "flags"]
    assert np.isnan(q.loc["P60-1", "zprime"])


def test_edge_effect_detected_and_absent(quality_campaign):
    # 25 % hotter outer ring on sample wells, 12 candidates x 4 reps (48 sample wells)
    data, kin, _ = quality_campaign(seed=5, n_cat=12, temps=(60.0,), edge_bias=0.25, noise=0.05,
                                 true_tof60=np.full(12, 50.0), true_ea=np.full(12, 60.0))
    q = plate_quality(kin, data, kin.settings)
    assert q["edge_p"].iloc[0] < 0.01
    assert "edge_effect" in q["flags"].iloc[0]
    assert q["edge_basis"].iloc[0] == "replicates"
    # the replicate-group median includes the ring wells themselves, so the shift reads below 25 %
    assert 8 < q["edge_shift_pct"].iloc[0] < 30
    data, kin, _ = quality_campaign(seed=5, n_cat=12, temps=(60.0,), edge_bias=0.0, noise=0.05,
                                 true_tof60=np.full(12, 50.0), true_ea=np.full(12, 60.0))
    q = plate_quality(kin, data, kin.settings)
    assert q["edge_p"].iloc[0] > 0.01
    assert "edge_effect" not in q["flags"].iloc[0]


def test_well_bscores_shape_and_sample_only(quality_campaign):
    data, kin, _ = quality_campaign(seed=6)
    b = well_bscores(kin, data)
    assert len(b) == len(kin.wells)
    samp = b.role == "sample"
    assert b.loc[samp, "bscore"].notna().all()
    assert b.loc[~samp, "bscore"].isna().all()
    # per plate the residuals have median ~0 after the polish (R medpolish property)
    med = b[samp].groupby("plate")["residual"].median()
    assert (med.abs() < 1e-9 + 0.05 * b.loc[samp, "residual"].abs().max()).all()


def test_control_chart_flags_shifted_benchmark(quality_campaign):
    data, kin, _ = quality_campaign(seed=7, temps=(40.0, 50.0, 60.0, 70.0), plates_per_t=2)
    cc = control_chart(kin, data)
    assert (cc["basis"] == "arrhenius").all()
    assert len(cc) == 8 and not cc["flags"].str.contains("reference_out_of_limits").any()
    # halve the benchmark's rate on one plate
    w = kin.wells.copy()
    m = (w.plate == "P60-2") & (w.role == "reference")
    w.loc[m, "tof_per_h"] = w.loc[m, "tof_per_h"] * 0.5
    kin2 = KineticsResult(kin.amounts, w, kin.blanks, kin.rates, kin.arrhenius, kin.orders, kin.settings)
    cc = control_chart(kin2, data).set_index("plate")
    assert cc.loc["P60-2", "flags"] == "reference_out_of_limits"
    assert (cc.drop(index="P60-2")["flags"] == "").all()
    q = plate_quality(kin2, data, kin.settings).set_index("plate")
    assert "reference_out_of_limits" in q.loc["P60-2", "flags"]
    # the chart-wide limits are mean +/- 3 SD of the log ratios (Shewhart)
    x = cc["log_ratio"]
    assert cc["upper"].iloc[0] == pytest.approx(x.mean() + 3 * x.std(ddof=1))


def test_control_chart_per_temperature_without_fit(quality_campaign):
    data, kin, _ = quality_campaign(seed=8, temps=(60.0,), plates_per_t=5)
    cc = control_chart(kin, data)
    assert (cc["basis"] == "per_temperature").all()
    assert cc["log_ratio"].sum() == pytest.approx(0.0, abs=1e-12)


def test_inputs_not_mutated(quality_campaign):
    data, kin, _ = quality_campaign(seed=9)
    before = kin.wells.copy(deep=True)
    plate_quality(kin, data, kin.settings)
    control_chart(kin, data)
    pd.testing.assert_frame_equal(kin.wells, before)


# --------------------------------------------------------------------------- plates without a benchmark
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


def test_candidates_only_on_failed_plates_stay_unranked(quality_campaign):
    data, kin, _ = quality_campaign(seed=3, bad_plate="P50-1")
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


def test_pipeline_passes_its_control_chart_to_plate_quality(demo_store, no_benchmark):
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


# --------------------------------------------------------------------------- Mann-Whitney U
def _random_groups(rng, n_groups, *, ties: bool):
    vals, in_x, grp = [], [], []
    for g in range(n_groups):
        n1, n2 = int(rng.integers(1, 25)), int(rng.integers(1, 25))
        v = rng.normal(size=n1 + n2) + (0.8 if g % 3 == 0 else 0.0) * np.r_[np.ones(n1), np.zeros(n2)]
        if ties:
            v = np.round(v, 1)
        vals.append(v)
        in_x.append(np.r_[np.ones(n1, bool), np.zeros(n2, bool)])
        grp.append(np.full(n1 + n2, g))
    vals, in_x, grp = (np.concatenate(a) for a in (vals, in_x, grp))
    perm = rng.permutation(len(vals))  # rows in no particular order
    return vals[perm], in_x[perm], grp[perm]


@pytest.mark.parametrize("ties", [False, True])
def test_grouped_mannwhitneyu_matches_scipy_per_group(ties):
    rng = np.random.default_rng(42 + ties)
    vals, in_x, grp = _random_groups(rng, 120, ties=ties)
    u1, p = mannwhitneyu_grouped(vals, in_x, grp, 120)
    n_exact = 0
    for g in range(120):
        x, y = vals[(grp == g) & in_x], vals[(grp == g) & ~in_x]
        ref = stats.mannwhitneyu(x, y, alternative="two-sided")  # reference: scipy.stats, one group at a time
        assert u1[g] == pytest.approx(ref.statistic, rel=1e-12, abs=1e-12)
        assert p[g] == pytest.approx(ref.pvalue, rel=1e-10, abs=1e-15)
        has_ties = len(np.unique(np.r_[x, y])) < len(x) + len(y)
        n_exact += (min(len(x), len(y)) <= 8) and not has_ties
    if not ties:
        assert n_exact > 20  # the exact branch was exercised, not only the normal approximation


def test_grouped_mannwhitneyu_edge_cases():
    # group 0: one side empty; group 1: all values equal; group 2: not present at all;
    # group 3: small, no ties (exact); group 4: large with ties (asymptotic)
    vals = np.r_[[1.0, 2.0, 3.0], [5.0] * 6, [0.3, 1.2, 2.2, 0.1, 4.5], np.repeat(np.arange(10.0), 3)]
    in_x = np.r_[[True] * 3, [True, False] * 3, [True, True, False, False, False], np.tile([True, False, True], 10)]
    grp = np.r_[[0] * 3, [1] * 6, [3] * 5, [4] * 30]
    u1, p = mannwhitneyu_grouped(vals, in_x, grp, 5)
    assert np.isnan(u1[0]) and np.isnan(p[0]) and np.isnan(u1[2]) and np.isnan(p[2])
    for g in (1, 3, 4):
        x, y = vals[(grp == g) & in_x], vals[(grp == g) & ~in_x]
        ref = stats.mannwhitneyu(x, y, alternative="two-sided")  # reference: scipy.stats
        assert u1[g] == ref.statistic and p[g] == pytest.approx(ref.pvalue, rel=1e-12)
    with pytest.raises(ValueError, match="NaN"):
        mannwhitneyu_grouped([1.0, np.nan], [True, False], [0, 0], 1)
    u1, p = mannwhitneyu_grouped([], [], [], 3)
    assert np.isnan(p).all() and len(p) == 3


# --------------------------------------------------------------------------- NaN-aware median
def test_nanmedian_equals_numpy_nanmedian():
    rng = np.random.default_rng(3)
    a = rng.normal(size=(50, 7, 9))
    a[rng.random(a.shape) < 0.4] = np.nan
    a[3, 2, :] = np.nan          # an all-NaN row
    a[4, :, 5] = np.nan          # an all-NaN column
    a[5] = np.nan                # an all-NaN plate
    a[6, 0, :3] = [np.inf, -np.inf, 1.0]
    a[7, 1, :4] = [2.0, 2.0, 2.0, 2.0]
    with np.errstate(invalid="ignore"), pytest.warns(RuntimeWarning):
        for axis in (0, 1, 2):
            np.testing.assert_array_equal(_nanmedian(a, axis=axis), np.nanmedian(a, axis=axis))
        flat = a.reshape(50, -1)
        np.testing.assert_array_equal(_nanmedian(flat, axis=1), np.nanmedian(flat, axis=1))


# --------------------------------------------------------------------------- plate_quality per plate
def _reference_edge_columns(data, kin):
    """A plain loop over plates: 2-D median polish per plate, MAD, replicate deviations and
    scipy.stats.mannwhitneyu on each plate's edge and interior values."""
    w = kin.wells
    rate = pd.to_numeric(w["rate_mM_per_h"], errors="coerce")
    keys = [k for k in ["catalyst", "loading", "substrate_conc_mM", "temperature_c", *data.factor_names] if k in w]
    rows = []
    for _, p in data.plates.iterrows():
        wp = w[w["plate"] == p["plate"]]
        rp = rate[wp.index]
        edge = is_edge(wp["row"], wp["col"], np.full(len(wp), p["format"]))
        samp = (wp["role"] == "sample").to_numpy() & np.isfinite(rp.to_numpy())
        grid = np.full((p["n_rows"], p["n_cols"]), np.nan)
        grid[wp["row"].to_numpy()[samp], wp["col"].to_numpy()[samp]] = rp.to_numpy()[samp]
        rec = {"plate": p["plate"], "edge_basis": "", "edge_n": 0, "interior_n": 0, "edge_shift_pct": np.nan,
               "edge_p": np.nan, "bscore_max_abs": np.nan, "mad_zero": False}
        if samp.any():
            _, _, _, res, _, _ = median_polish(grid)
            r = res[wp["row"].to_numpy()[samp], wp["col"].to_numpy()[samp]]
            mad = np.median(np.abs(r - np.median(r)))
            rec["mad_zero"] = not mad > 0
            if mad > 0:
                rec["bscore_max_abs"] = np.max(np.abs(r)) / (MAD_NORMAL * mad)
            # replicate deviations: sample wells with a positive rate, groups of 2 or more
            pos = (wp["role"] == "sample").to_numpy() & (rp > 0).to_numpy()
            g = wp[pos].assign(_r=rp[pos], _e=edge[pos])
            gb = g.groupby(keys, dropna=False)["_r"]
            g = g.assign(dev=np.log(g["_r"] / gb.transform("median")), n=gb.transform("size"))
            g = g[g["n"] >= 2]
            e, i = g.loc[g["_e"], "dev"].to_numpy(), g.loc[~g["_e"], "dev"].to_numpy()
            basis = "replicates"
            if min(len(e), len(i)) < EDGE_MIN_WELLS:
                basis = "bscore"
                e, i = r[edge[samp]], r[~edge[samp]]
            rec["edge_n"], rec["interior_n"] = len(e), len(i)
            if min(len(e), len(i)) >= EDGE_MIN_WELLS:
                rec["edge_basis"] = basis
                if basis == "replicates":
                    rec["edge_shift_pct"] = 100 * (np.exp(e.mean() - i.mean()) - 1)
                if np.ptp(np.r_[e, i]) > 0:
                    rec["edge_p"] = stats.mannwhitneyu(e, i, alternative="two-sided").pvalue  # reference: scipy.stats
        rows.append(rec)
    return pd.DataFrame(rows).set_index("plate")


def _zero_mad_and_gaps(make_campaign):
    data, kin, _ = make_campaign(seed=14)
    w = kin.wells.copy()
    w.loc[(w.plate == "P40-1") & (w.role == "sample"), "rate_mM_per_h"] = 1.0  # every sample equal: MAD 0
    w.loc[w.index[:5], "rate_mM_per_h"] = np.nan
    return data, KineticsResult(kin.amounts, w, kin.blanks, kin.rates, kin.arrhenius, kin.orders, kin.settings)


def _drop(make_campaign, seed, keep):
    data, kin, _ = make_campaign(seed=seed, plates_per_t=2)
    w = kin.wells[keep(kin.wells)]
    return data, KineticsResult(kin.amounts, w, kin.blanks, kin.rates, kin.arrhenius, kin.orders, kin.settings)


CAMPAIGNS = {
    "edge_ring": lambda mk: mk(seed=5, n_cat=12, temps=(60.0, 70.0), plates_per_t=3, edge_bias=0.25)[:2],
    "clean": lambda mk: mk(seed=1, plates_per_t=2)[:2],
    "no_replicates": lambda mk: mk(seed=15, reps=1, n_cat=40, edge_bias=0.3)[:2],       # bscore basis
    "small_plates": lambda mk: mk(seed=13, fmt=24, reps=2, n_cat=4, plates_per_t=3)[:2],  # mostly untested
    "plates_384": lambda mk: mk(seed=11, fmt=384, reps=6, n_cat=20, edge_bias=0.1)[:2],
    "zero_mad": _zero_mad_and_gaps,
    # a plate with controls but no sample wells, and a plate with no wells at all in the kinetics
    "plate_without_samples": lambda mk: _drop(mk, 18, lambda w: ~((w.plate == "P50-2") & (w.role == "sample"))),
    "plate_without_wells": lambda mk: _drop(mk, 17, lambda w: w.plate != "P70-1"),
}


@pytest.mark.parametrize("name", sorted(CAMPAIGNS))
def test_plate_quality_edge_columns_match_per_plate_loop(name, quality_campaign):
    data, kin = CAMPAIGNS[name](quality_campaign)
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    ref = _reference_edge_columns(data, kin)
    assert list(q.index) == list(ref.index)
    assert q["edge_basis"].tolist() == ref["edge_basis"].tolist()
    assert q["edge_n"].tolist() == ref["edge_n"].tolist()
    assert q["interior_n"].tolist() == ref["interior_n"].tolist()
    for col in ("edge_shift_pct", "edge_p", "bscore_max_abs"):
        np.testing.assert_allclose(q[col].to_numpy(float), ref[col].to_numpy(float), rtol=1e-10, atol=1e-300,
                                   equal_nan=True, err_msg=col)
    assert q["flags"].str.contains("bscore_undefined").tolist() == ref["mad_zero"].tolist()
    assert q["edge_p"].notna().any() or name == "small_plates"


@pytest.mark.parametrize("name", sorted(CAMPAIGNS))
def test_edge_test_alone_matches_the_per_plate_loop_and_ignores_controls(name, quality_campaign):
    # the edge test on its own (what the pipeline runs before the blank step) against the same plain
    # loop with scipy.stats.mannwhitneyu; and, as the rule says, only sample wells enter it: blanks
    # and benchmark wells ten times faster change nothing
    data, kin = CAMPAIGNS[name](quality_campaign)
    e = edge_test(kin.wells, data).set_index("plate")
    ref = _reference_edge_columns(data, kin)
    assert list(e.index) == list(ref.index)
    assert e["edge_basis"].tolist() == ref["edge_basis"].tolist()
    assert e["edge_n"].tolist() == ref["edge_n"].tolist()
    for col in ("edge_shift_pct", "edge_p"):
        np.testing.assert_allclose(e[col].to_numpy(float), ref[col].to_numpy(float), rtol=1e-10, atol=1e-300,
                                   equal_nan=True, err_msg=col)
    assert e["edge_effect"].tolist() == (ref["edge_p"] < EDGE_ALPHA).tolist()
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    assert e["edge_effect"].tolist() == q["flags"].str.split(";").apply(lambda f: "edge_effect" in f).tolist()
    w = kin.wells.copy()
    ctrl = w["role"].isin(["blank", "reference"])
    w.loc[ctrl, "rate_mM_per_h"] = 10 * pd.to_numeric(w.loc[ctrl, "rate_mM_per_h"])
    pd.testing.assert_frame_equal(edge_test(w, data).set_index("plate"), e)


def test_plate_quality_counts_moments_and_cvs_match_per_plate_loop(quality_campaign):
    data, kin = _zero_mad_and_gaps(quality_campaign)
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    w = kin.wells.assign(_r=pd.to_numeric(kin.wells["rate_mM_per_h"], errors="coerce"))
    for plate, g in w.groupby("plate"):
        for role in ("sample", "reference", "blank"):
            assert q.loc[plate, f"n_{role}"] == int((g["role"].eq(role) & g["_r"].notna()).sum())
        for role in ("reference", "blank"):
            v = g.loc[g["role"] == role, "_r"].dropna().to_numpy()
            assert q.loc[plate, f"{role}_mean_mM_per_h"] == pytest.approx(v.mean(), rel=1e-12)
            assert q.loc[plate, f"{role}_sd_mM_per_h"] == pytest.approx(v.std(ddof=1), rel=1e-12)
        s = g[(g["role"] == "sample") & g["_r"].notna()]
        cvs = []
        for _, rg in s.groupby(["catalyst", "loading", "substrate_conc_mM", "temperature_c"], dropna=False):
            v = rg["_r"].to_numpy()
            if len(v) >= 2 and v.mean() > 0:
                cvs.append(100 * v.std(ddof=1) / v.mean())
        assert q.loc[plate, "n_replicate_groups"] == len(cvs)
        assert q.loc[plate, "replicate_cv_median_pct"] == pytest.approx(np.median(cvs), rel=1e-12)
    flags = q["flags"].str.split(";")
    assert all(f == [""] or all(f) for f in flags)  # no empty codes from the join


def test_plate_quality_takes_kinetics_first_like_control_chart(quality_campaign):
    # the rule (DEVELOPERS.md): plate_quality(kin, data, ...) as control_chart(kin, data); the
    # order of before is refused plainly instead of failing on a missing attribute
    data, kin, _ = quality_campaign(seed=10)
    with pytest.raises(TypeError, match="kinetics result comes first"):
        plate_quality(data, kin, kin.settings)


def test_a_gradient_plate_is_judged_on_its_main_level_blanks(demo_store):
    """The blank trend compares a plate's blanks with the uncatalysed Arrhenius line at the level
    that line is fitted on (the blanks' most used substrate level); a substrate-gradient plate's
    levels scaled from it (flag blank_scaled) are not on that line. On the demo, TH-60S (gradient
    at 60 C, blanks only at 200 mM) was flagged blank_off_trend from its 50 mM level (ratio 0.26)."""
    from screenlab.store import Store

    a = analyse(Store(demo_store, read_only=True).load_campaign("th-screen-2026"))
    q = a.quality.set_index("plate")
    bl = a.kinetics.blanks
    main = bl[(bl["substrate_conc_mM"] == 200.0) & ~bl["flags"].fillna("").str.contains("blank_scaled")]
    arr = a.kinetics.arrhenius.set_index("catalyst").loc["(uncatalysed)"]
    for plate, row in main.set_index("plate").iterrows():     # one main-level row per plate here
        x = 1 / (row["temperature_c"] + 273.15)
        expected = np.exp(arr["fit_intercept"] + arr["fit_slope_k"] * x)
        assert q.loc[plate, "blank_ratio"] == pytest.approx(row["blank_rate_mM_per_h"] / expected, rel=1e-9)
    assert 0.8 < q.loc["TH-60S", "blank_ratio"] < 1.25
    assert "blank_off_trend" not in q.loc["TH-60S", "flags"]


def test_a_plates_worst_row_is_its_largest_key_the_last_of_equals():
    # the rule plate_quality picks a plate's worst blank temperature and worst benchmark by,
    # written out plainly: per position, the row with the largest key, the last one among equals;
    # rows at position -1 belong to no plate
    from screenlab.stats.quality import _last_of_largest

    rng = np.random.default_rng(3)
    for _ in range(200):
        n, n_pos = int(rng.integers(0, 30)), int(rng.integers(1, 6))
        pos = rng.integers(-1, n_pos, n)
        key = rng.choice([-1.0, 0.5, 2.0, 3.0], n)            # many ties, as NaN z (-1) gives
        want = [max((i for i in range(n) if pos[i] == p), key=lambda i: (key[i], i), default=-1)
                for p in range(n_pos)]
        assert _last_of_largest(pos, key, n_pos).tolist() == want


def test_plates_whose_blank_trend_is_not_checked_say_why(demo_store):
    # every plate of the transfer-hydrogenation demo is checked against its blank line (four
    # temperatures); the nitroaldol demo has two, and a line through two points has no error
    from screenlab.stats.quality import blank_trend_gaps
    from screenlab.store import Store

    store = Store(demo_store, read_only=True)
    th = analyse(store.load_campaign("th-screen-2026"))
    assert th.quality["blank_z"].notna().all() and blank_trend_gaps(th.kinetics, th.quality).empty
    hn = analyse(store.load_campaign("henry-chiral-2026"))
    gaps = blank_trend_gaps(hn.kinetics, hn.quality)
    assert sorted(gaps["plate"]) == sorted(hn.quality["plate"])
    assert gaps["reason"].str.contains("two temperatures").all()
    # a plate whose blanks all sit at another substrate level than the line's is named with both levels
    k = th.kinetics
    plate = "TH-70"
    blanks = k.blanks.assign(substrate_conc_mM=np.where(k.blanks["plate"] == plate, 50.0,
                                                        k.blanks["substrate_conc_mM"]))
    q = th.quality.assign(blank_z=np.where(th.quality["plate"] == plate, np.nan, th.quality["blank_z"]))
    gaps = blank_trend_gaps(dataclasses.replace(k, blanks=blanks), q)
    assert gaps["plate"].tolist() == [plate]
    assert "at 50 mM substrate, the blank line at 200 mM" in gaps["reason"].iloc[0]


def test_quality_command_says_which_plates_the_blank_trend_skips(demo_store, capsys):
    import csv
    import io

    from screenlab.cli import main

    assert main(["quality", "--store", str(demo_store), "--campaign", "henry-chiral-2026"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[-1].startswith("blank trend not checked on HN-25, HN-40: the blank Arrhenius line is drawn through two")
    assert main(["quality", "--store", str(demo_store), "--campaign", "henry-chiral-2026", "--format", "csv"]) == 0
    got = capsys.readouterr()
    assert [r["plate"] for r in csv.DictReader(io.StringIO(got.out))] == ["HN-25", "HN-40"]   # csv stays a table
    assert "blank trend not checked" in got.err
    assert main(["quality", "--store", str(demo_store), "--campaign", "th-screen-2026"]) == 0
    assert "blank trend not checked" not in capsys.readouterr().out
