"""Ranking with uncertainty and Pareto sets: closed forms (scipy.stats), a seeded truth, edge cases."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.errors import UsageError
from screenlab.stats.quality import plate_quality
from screenlab.kinetics import KineticsResult
from screenlab.stats.ranking import METRICS, draw_matrix, pareto, rank_candidates, rank_draws

from fake_kinetics import fake_kin
from quality_campaigns import make_campaign


def test_two_lognormal_candidates_match_normal_cdf():
    # P(A ahead of B) = Phi(d / sqrt(sA^2 + sB^2)) on the log scale (scipy.stats.norm), with
    # s = se / tof (delta method) and effectively infinite df
    tof, se = [100.0, 80.0], [15.0, 10.0]
    r = rank_candidates(fake_kin(tof, se), draws=200_000, seed=1).set_index("catalyst")
    sa, sb = se[0] / tof[0], se[1] / tof[1]
    expected = stats.norm.cdf(np.log(tof[0] / tof[1]) / np.hypot(sa, sb))
    assert r.loc["K0", "p_best"] == pytest.approx(expected, abs=0.005)
    assert r.loc["K0", "p_best"] + r.loc["K1", "p_best"] == pytest.approx(1.0, abs=1e-12)
    assert r.loc["K0", "rank"] == 1
    # the interval is exp(ln x +/- z s) (log-normal); scipy.stats.norm quantile
    z = stats.norm.ppf(0.975)
    assert r.loc["K0", "ci_low"] == pytest.approx(100 * np.exp(-z * sa), rel=1e-6)
    assert r.loc["K0", "ci_high"] == pytest.approx(100 * np.exp(z * sa), rel=1e-6)


def test_two_normal_candidates_ea_lower_is_better():
    # Ea: t draws (here df huge -> normal). P(A ahead) = P(EaA < EaB) = Phi((muB - muA)/sqrt(sA^2+sB^2))
    kin = fake_kin([10, 10], [1, 1], ea=[60.0, 63.0], ea_se=[2.0, 1.5])
    r = rank_candidates(kin, metric="ea", draws=200_000, seed=2).set_index("catalyst")
    expected = stats.norm.cdf(3.0 / np.hypot(2.0, 1.5))
    assert r.loc["K0", "p_best"] == pytest.approx(expected, abs=0.005)
    assert r.loc["K0", "rank"] == 1 and r.loc["K0", "unit"] == "kJ/mol"
    assert r.loc["K0", "ci_low"] == pytest.approx(60 - stats.norm.ppf(0.975) * 2, rel=1e-6)


def test_t_draws_against_student_t_cdf():
    # A has t(3) uncertainty, B is nearly exact: P(A ahead) = t.cdf(d / sA, 3) (scipy.stats.t)
    kin = fake_kin([10, 10], [1, 1], ea=[60.0, 62.0], ea_se=[1.5, 1e-9], ea_df=[3.0, 3.0])
    r = rank_candidates(kin, metric="ea", draws=200_000, seed=3).set_index("catalyst")
    assert r.loc["K0", "p_best"] == pytest.approx(stats.t.cdf(2.0 / 1.5, 3), abs=0.005)
    assert r.loc["K0", "ci_high"] == pytest.approx(60 + stats.t.ppf(0.975, 3) * 1.5, rel=1e-9)


def test_identical_candidates_equal_chance():
    # K exchangeable candidates: P(best) = 1/K for each (symmetry), p_top = top/K
    k = 6
    r = rank_candidates(fake_kin([50.0] * k, [5.0] * k), draws=60_000, seed=4, top_k=2)
    assert r["p_best"].sum() == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(r["p_best"], 1 / k, atol=0.01)
    np.testing.assert_allclose(r["p_top"], 2 / k, atol=0.012)
    assert (r["rank_low"] == 1).all() and (r["rank_high"] == k).all()


def test_far_apart_candidates_certain():
    r = rank_candidates(fake_kin([1000.0, 100.0, 10.0], [10.0, 1.0, 0.1]), draws=5000, seed=5)
    assert list(r["catalyst"]) == ["K0", "K1", "K2"]
    assert r["p_best"].tolist() == [1.0, 0.0, 0.0]
    assert r["rank_low"].tolist() == [1, 2, 3] and r["rank_high"].tolist() == [1, 2, 3]


def test_reproducible_with_seed():
    kin = fake_kin([50, 55, 60], [8, 8, 8])
    a = rank_candidates(kin, draws=3000, seed=11)
    b = rank_candidates(kin, draws=3000, seed=11)
    c = rank_candidates(kin, draws=3000, seed=12)
    pd.testing.assert_frame_equal(a, b)
    assert not a["p_best"].equals(c["p_best"])
    np.testing.assert_allclose(a["p_best"], c["p_best"], atol=0.04)


def test_rank_draws_and_draw_matrix():
    score = np.array([[3.0, 1.0, 2.0], [0.0, 5.0, 4.0]])
    np.testing.assert_array_equal(rank_draws(score), [[1, 3, 2], [3, 1, 2]])
    d = draw_matrix([0.0, 1.0], [1.0, 2.0], [np.inf, 5.0], 100_000, np.random.default_rng(0))
    # Student t(5) variance df/(df-2) = 5/3 (scipy.stats.t.var)
    assert d[:, 0].std() == pytest.approx(1.0, rel=0.02)
    assert d[:, 1].var() == pytest.approx(4 * stats.t.var(5), rel=0.03)


def test_unrankable_listed_after_with_reasons():
    kin = fake_kin([100.0, 50.0, -2.0, 30.0, 40.0], [5.0, 4.0, 1.0, np.nan, 2.0], n=[4, 4, 4, 1, 4],
                   roles=["sample", "reference", "sample", "sample", "sample"])
    # K4 was measured only on failed plates
    quality = pd.DataFrame({"plate": ["P1", "P2"], "status": ["ok", "ok"], "flags": ["", ""]})
    wells = pd.concat([kin.wells[kin.wells.catalyst != "K4"],
                       pd.DataFrame({"catalyst": ["K4"], "role": ["sample"], "plate": ["P9"]})])
    quality = pd.concat([quality, pd.DataFrame({"plate": ["P9"], "status": ["failed"], "flags": ["failed;zprime_low"]})])
    kin = KineticsResult(kin.amounts, wells, kin.blanks, kin.rates, kin.arrhenius, kin.orders, kin.settings)
    r = rank_candidates(kin, quality, draws=2000)
    assert r["catalyst"].tolist()[:2] == ["K0", "K1"]
    assert r["rank"].tolist()[:2] == [1, 2] and r["rank"][2:].isna().all()
    reasons = r.set_index("catalyst")["reason"]
    assert reasons["K2"] == "no activity over the blank"
    assert reasons["K3"].startswith("too few wells")
    assert reasons["K4"] == "measured only on failed plates"
    ref = r.set_index("catalyst").loc["K1"]
    assert ref["role"] == "reference" and "reference" in ref["flags"]
    assert np.isnan(ref["p_beats_reference"])
    assert r.set_index("catalyst").loc["K0", "p_beats_reference"] > 0.99
    assert r.loc[r["rank"].notna(), "p_best"].sum() == pytest.approx(1.0)


def test_unmeasured_temperature_without_fit_is_unrankable():
    r = rank_candidates(fake_kin([10, 20], [1, 1]), at_temperature_c=80.0, draws=100)
    assert r["rank"].isna().all()
    # what is missing, in words: the temperature, and why there is no line to predict from
    assert (r["reason"] == "not measured at 80 degC; measured at one temperature: no Arrhenius line to "
                           "predict from").all()


def test_flags_travel_from_kinetics_and_plates():
    kin = fake_kin([10, 20], [1, 1], flags=["has_outlier", ""])
    q = pd.DataFrame({"plate": ["P1", "P2"], "status": ["flagged", "failed"], "flags": ["edge_effect", "failed"]})
    r = rank_candidates(kin, q, draws=100).set_index("catalyst")
    assert set(r.loc["K0", "flags"].split(";")) == {"has_outlier", "edge_effect", "on_failed_plate"}
    assert set(r.loc["K1", "flags"].split(";")) == {"edge_effect", "on_failed_plate"}


def test_bad_arguments():
    kin = fake_kin([10], [1])
    with pytest.raises(UsageError):
        rank_candidates(kin, metric="speed")
    with pytest.raises(UsageError):
        pareto(kin, metrics=("tof",))


def test_metric_table_directions():
    assert METRICS["tof"].higher_is_better and METRICS["tof"].lognormal
    assert METRICS["enhancement"].higher_is_better and METRICS["ton"].higher_is_better
    assert not METRICS["ea"].higher_is_better and not METRICS["ea"].lognormal
    assert METRICS["tof"].ci_column("low") == "tof_ci_low_per_h"
    assert METRICS["ea"].ci_column("high") == "ea_ci_high_kj_mol"


def test_enhancement_interval_kept_exactly():
    # the log-scale SE backed out of the (log-symmetric) enhancement interval reproduces it
    kin = fake_kin([10.0, 20.0], [1.0, 1.0], df=5.0)
    r = rank_candidates(kin, metric="enhancement", draws=100).set_index("catalyst")
    assert r.loc["K1", "ci_low"] == pytest.approx(200 / 1.1) and r.loc["K1", "ci_high"] == pytest.approx(220.0)


@pytest.mark.slow
def test_seeded_campaign_recovers_true_order():
    # known truth: 12 candidates with log-uniform TOF(60 degC); Spearman (scipy.stats.spearmanr)
    # of the reported order against the true TOF near 1, and the true best in the top 3
    data, kin, truth = make_campaign(seed=21, n_cat=12, noise=0.10)
    q = plate_quality(kin, data, kin.settings)
    r = rank_candidates(kin, q, draws=10_000, seed=0, catalysts=data.catalysts)
    s = r[r["role"] == "sample"].merge(truth, on="catalyst")
    rho = stats.spearmanr(s["rank"].astype(float), -s["tof60"]).statistic
    assert rho > 0.9
    best = truth.loc[truth["tof60"].idxmax(), "catalyst"]
    assert best in r["catalyst"].head(3).tolist()
    assert r["family"].notna().all()
    # at an unmeasured temperature the TOF comes from the Arrhenius line, flagged as such
    r55 = rank_candidates(kin, q, at_temperature_c=55.0, draws=2000)
    assert (r55["basis"] == "arrhenius").all() and r55["flags"].str.contains("predicted_from_arrhenius").all()
    s55 = r55[r55["role"] == "sample"].merge(truth, on="catalyst")
    true55 = s55["tof60"] * np.exp(-s55["ea"] * 1000 / 8.31446261815324 * (1 / 328.15 - 1 / 333.15))
    assert stats.spearmanr(s55["rank"].astype(float), -true55).statistic > 0.9
    r90 = rank_candidates(kin, q, at_temperature_c=90.0, draws=500)
    assert r90["flags"].str.contains("extrapolated").all()


def test_pareto_front_and_dominance():
    # K0 best TOF, K1 best Ea, K2 dominated by all three others, K3 dominated by K0 only
    kin = fake_kin([100.0, 50.0, 40.0, 60.0], [1.0, 1.0, 1.0, 1.0], ea=[70.0, 50.0, 75.0, 72.0],
                   ea_se=[0.5, 0.5, 0.5, 0.5])
    p = pareto(kin, metrics=("tof", "ea"), draws=2000, seed=1).set_index("catalyst")
    assert p.loc["K0", "on_front"] and p.loc["K1", "on_front"]
    assert not p.loc["K2", "on_front"] and p.loc["K2", "dominated_by"] == "K0;K1;K3"
    assert p.loc["K3", "dominated_by"] == "K0" and p.loc["K3", "dominated_by_count"] == 1
    assert p.loc["K0", "p_front"] == 1.0 and p.loc["K2", "p_front"] == 0.0
    assert list(p.columns[1:4]) == ["family", "tof_per_h", "ea_kj_mol"]
    # three metrics; a candidate without an Ea is listed with its reason, not compared
    kin2 = fake_kin([100.0, 50.0], [1.0, 1.0], ea=[70.0, 50.0], ea_se=[0.5, np.nan])
    p3 = pareto(kin2, metrics=("tof", "enhancement", "ea")).set_index("catalyst")
    assert p3.loc["K1", "reason"].startswith("ea:") and not p3.loc["K1", "on_front"]
    assert p3.loc["K0", "on_front"] and np.isnan(p3.loc["K0", "p_front"])


def test_pareto_p_front_close_call():
    # two candidates, each better on one metric by a hair: both on the front; a third equal to K0
    # in TOF and slightly worse in Ea is on the front only when its draw beats K0 on Ea or TOF
    kin = fake_kin([100.0, 100.0], [10.0, 10.0], ea=[60.0, 60.0], ea_se=[1.0, 1.0])
    p = pareto(kin, metrics=("tof", "ea"), draws=20_000, seed=2).set_index("catalyst")
    # independent continuous draws: K0 is off the front only if K1 beats it on both metrics,
    # probability 1/2 x 1/2, so P(front) = 3/4 (closed form)
    np.testing.assert_allclose(p["p_front"], 0.75, atol=0.01)


def test_selectivity_and_ee_metrics_t_draws():
    # percent-scale metrics with t draws: P(A ahead of B) for B nearly exact = t.cdf(d / sA, df)
    # (scipy.stats.t); both high-is-good
    kin = fake_kin([10.0, 10.0], [1.0, 1.0])
    rates = kin.rates.assign(selectivity_pct=[92.0, 90.0], selectivity_se=[1.2, 1e-9], selectivity_df=[4.0, 4.0],
                             ee_pct=[-20.0, 35.0], ee_se=[3.0, 3.0], ee_df=[1e7, 1e7])
    kin = KineticsResult(kin.amounts, kin.wells, kin.blanks, rates, kin.arrhenius, kin.orders, kin.settings)
    r = rank_candidates(kin, metric="selectivity", draws=200_000, seed=5).set_index("catalyst")
    assert r.loc["K0", "p_best"] == pytest.approx(stats.t.cdf(2.0 / 1.2, 4), abs=0.005)
    assert r.loc["K0", "unit"] == "%"
    e = rank_candidates(kin, metric="ee", draws=1000, seed=5)
    assert e["catalyst"].tolist() == ["K1", "K0"] and e["p_best"].tolist() == [1.0, 0.0]


@pytest.mark.parametrize("df", [1.0, 2.0, 2.7, 6.0, 40.0, np.inf, 5e4])
def test_draw_matrix_columns_follow_student_t(df):
    # reference distribution: scipy.stats.t / scipy.stats.norm (Kolmogorov-Smirnov at 1e-3)
    d = draw_matrix([1.5, -2.0], [0.5, 2.0], [df, df], 40_000, np.random.default_rng(int(min(df, 99))))
    assert d.shape == (40_000, 2) and np.isfinite(d).all()
    ref = stats.norm if not np.isfinite(df) or df > 1e4 else stats.t(df)
    for j, (m, s) in enumerate([(1.5, 0.5), (-2.0, 2.0)]):
        assert stats.kstest((d[:, j].astype(float) - m) / s, ref.cdf).pvalue > 1e-3


def test_draw_matrix_mixed_columns_and_tail_quantiles():
    df = np.array([np.inf, 3.0, np.nan, 0.0, 12.5])
    d = draw_matrix(np.zeros(5), np.ones(5), df, 200_000, np.random.default_rng(4)).astype(float)
    # 99.5 % points: scipy.stats.t.ppf / scipy.stats.norm.ppf; NaN or zero df is drawn as normal
    exp = [stats.norm.ppf(0.995), stats.t.ppf(0.995, 3), stats.norm.ppf(0.995), stats.norm.ppf(0.995),
           stats.t.ppf(0.995, 12.5)]
    np.testing.assert_allclose(np.quantile(d, 0.995, axis=0), exp, rtol=0.04)
    assert np.corrcoef(d[:, 0], d[:, 1])[0, 1] == pytest.approx(0.0, abs=0.01)   # columns independent
