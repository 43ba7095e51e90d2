"""Synthetic campaigns built in code (invented data, for tests only) and the plate-quality tests on them.

``make_campaign`` simulates well rates from a known truth (Arrhenius TOF per catalyst, a blank
line, log-normal well noise) and returns a CampaignData and a kinetics-like result with the frame
columns of DEVELOPERS.md, aggregated here by plain means so that the stats layer can be tested
before and independently of the kinetics package.
"""
from __future__ import annotations


import numpy as np
import pandas as pd
import pytest

from screenlab.kinetics import KineticsResult
from screenlab.stats.quality import control_chart, plate_quality, well_bscores

from quality_campaigns import make_campaign


# ---------------------------------------------------------------------------------------------
def test_clean_campaign_plates_pass():
    data, kin, _ = make_campaign(seed=1)
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


def test_zprime_matches_direct_formula_per_plate():
    data, kin, _ = make_campaign(seed=2)
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    w = kin.wells
    for plate, g in w.groupby("plate"):
        p = g.loc[g.role == "reference", "rate_mM_per_h"]
        n = g.loc[g.role == "blank", "rate_mM_per_h"]
        # Zhang, Chung & Oldenburg 1999 definition with sample SDs (pandas std is ddof=1)
        z = 1 - 3 * (p.std() + n.std()) / abs(p.mean() - n.mean())
        assert q.loc[plate, "zprime"] == pytest.approx(z, rel=1e-12)


def test_bad_plate_failed():
    data, kin, _ = make_campaign(seed=3, bad_plate="P50-1")
    q = plate_quality(kin, data, kin.settings).set_index("plate")
    assert q.loc["P50-1", "status"] == "failed"
    assert "failed" in q.loc["P50-1", "flags"] and "zprime_low" in q.loc["P50-1", "flags"]
    assert q.loc["P40-1", "status"] != "failed"


def test_no_controls_plate_failed():
    data, kin, _ = make_campaign(seed=4)
    w = kin.wells[~((kin.wells.plate == "P60-1") & (kin.wells.role == "blank"))]
    kin2 = KineticsResult(kin.amounts, w, kin.blanks, kin.rates, kin.arrhenius, kin.orders, kin.settings)
    q = plate_quality(kin2, data, kin.settings).set_index("plate")
    assert q.loc["P60-1", "status"] == "failed"
    assert "no_controls" in q.loc["P60-1", "flags"]
    assert np.isnan(q.loc["P60-1", "zprime"])


def test_edge_effect_detected_and_absent():
    # 25 % hotter outer ring on sample wells, 12 candidates x 4 reps (48 sample wells)
    data, kin, _ = make_campaign(seed=5, n_cat=12, temps=(60.0,), edge_bias=0.25, noise=0.05,
                                 true_tof60=np.full(12, 50.0), true_ea=np.full(12, 60.0))
    q = plate_quality(kin, data, kin.settings)
    assert q["edge_p"].iloc[0] < 0.01
    assert "edge_effect" in q["flags"].iloc[0]
    assert q["edge_basis"].iloc[0] == "replicates"
    # the replicate-group median includes the ring wells themselves, so the shift reads below 25 %
    assert 8 < q["edge_shift_pct"].iloc[0] < 30
    data, kin, _ = make_campaign(seed=5, n_cat=12, temps=(60.0,), edge_bias=0.0, noise=0.05,
                                 true_tof60=np.full(12, 50.0), true_ea=np.full(12, 60.0))
    q = plate_quality(kin, data, kin.settings)
    assert q["edge_p"].iloc[0] > 0.01
    assert "edge_effect" not in q["flags"].iloc[0]


def test_well_bscores_shape_and_sample_only():
    data, kin, _ = make_campaign(seed=6)
    b = well_bscores(kin, data)
    assert len(b) == len(kin.wells)
    samp = b.role == "sample"
    assert b.loc[samp, "bscore"].notna().all()
    assert b.loc[~samp, "bscore"].isna().all()
    # per plate the residuals have median ~0 after the polish (R medpolish property)
    med = b[samp].groupby("plate")["residual"].median()
    assert (med.abs() < 1e-9 + 0.05 * b.loc[samp, "residual"].abs().max()).all()


def test_control_chart_flags_shifted_benchmark():
    data, kin, _ = make_campaign(seed=7, temps=(40.0, 50.0, 60.0, 70.0), plates_per_t=2)
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


def test_control_chart_per_temperature_without_fit():
    data, kin, _ = make_campaign(seed=8, temps=(60.0,), plates_per_t=5)
    cc = control_chart(kin, data)
    assert (cc["basis"] == "per_temperature").all()
    assert cc["log_ratio"].sum() == pytest.approx(0.0, abs=1e-12)


def test_inputs_not_mutated():
    data, kin, _ = make_campaign(seed=9)
    before = kin.wells.copy(deep=True)
    plate_quality(kin, data, kin.settings)
    control_chart(kin, data)
    pd.testing.assert_frame_equal(kin.wells, before)


def test_plate_quality_takes_kinetics_first_like_control_chart():
    # the rule (DEVELOPERS.md): plate_quality(kin, data, ...) as control_chart(kin, data); the
    # order of before is refused plainly instead of failing on a missing attribute
    data, kin, _ = make_campaign(seed=10)
    with pytest.raises(TypeError, match="kinetics result comes first"):
        plate_quality(data, kin, kin.settings)
