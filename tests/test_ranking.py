"""Ranking with uncertainty (screenlab.stats.ranking.rank_candidates): closed forms for few
candidates (scipy.stats.norm / scipy.stats.t: P(A ahead of B) = Phi(d / sqrt(sA^2 + sB^2)) for
independent normal draws; P(|X| > c) = 1 - Phi((c - m)/s) + Phi((-c - m)/s) for a folded normal),
ee either way, Ea's direction and transport limits, requirements, censored bounds, the Monte Carlo
figures it reports, the check of its rates table, and seeded campaigns whose generating values are
known (Spearman's rho, scipy.stats.spearmanr; invented data).
"""
from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.errors import FrameError, UsageError
from screenlab.stats import montecarlo as M
from screenlab.stats.candidates import NOT_SHOWN_ACTIVE, TOO_FAST
from screenlab.stats.ranking import rank_candidates

PAIR = ("P_R", "P_S")


def _with_rates(kin, **cols):
    return dataclasses.replace(kin, rates=kin.rates.assign(**cols))


def _ee_kin(fake_kin, ee, se, df=1e7):
    kin = fake_kin([10.0] * len(ee), [1.0] * len(ee))
    return _with_rates(kin, ee_pct=ee, ee_se=se, ee_df=df)


def test_two_lognormal_candidates_match_normal_cdf(fake_kin):
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


def test_two_normal_candidates_ea_lower_is_better(fake_kin):
    # Ea: t draws (here df huge -> normal). P(A ahead) = P(EaA < EaB) = Phi((muB - muA)/sqrt(sA^2+sB^2))
    kin = fake_kin([10, 10], [1, 1], ea=[60.0, 63.0], ea_se=[2.0, 1.5])
    r = rank_candidates(kin, metric="ea", draws=200_000, seed=2).set_index("catalyst")
    expected = stats.norm.cdf(3.0 / np.hypot(2.0, 1.5))
    assert r.loc["K0", "p_best"] == pytest.approx(expected, abs=0.005)
    assert r.loc["K0", "rank"] == 1 and r.loc["K0", "unit"] == "kJ/mol"
    assert r.loc["K0", "ci_low"] == pytest.approx(60 - stats.norm.ppf(0.975) * 2, rel=1e-6)


def test_t_draws_against_student_t_cdf(fake_kin):
    # A has t(3) uncertainty, B is nearly exact: P(A ahead) = t.cdf(d / sA, 3) (scipy.stats.t)
    kin = fake_kin([10, 10], [1, 1], ea=[60.0, 62.0], ea_se=[1.5, 1e-9], ea_df=[3.0, 3.0])
    r = rank_candidates(kin, metric="ea", draws=200_000, seed=3).set_index("catalyst")
    assert r.loc["K0", "p_best"] == pytest.approx(stats.t.cdf(2.0 / 1.5, 3), abs=0.005)
    assert r.loc["K0", "ci_high"] == pytest.approx(60 + stats.t.ppf(0.975, 3) * 1.5, rel=1e-9)


def test_identical_candidates_equal_chance(fake_kin):
    # K exchangeable candidates: P(best) = 1/K for each (symmetry), p_top = top/K
    k = 6
    r = rank_candidates(fake_kin([50.0] * k, [5.0] * k), draws=60_000, seed=4, top_k=2)
    assert r["p_best"].sum() == pytest.approx(1.0, abs=1e-12)
    np.testing.assert_allclose(r["p_best"], 1 / k, atol=0.01)
    np.testing.assert_allclose(r["p_top"], 2 / k, atol=0.012)
    assert (r["rank_low"] == 1).all() and (r["rank_high"] == k).all()


def test_far_apart_candidates_certain(fake_kin):
    r = rank_candidates(fake_kin([1000.0, 100.0, 10.0], [10.0, 1.0, 0.1]), draws=5000, seed=5)
    assert list(r["catalyst"]) == ["K0", "K1", "K2"]
    assert r["p_best"].tolist() == [1.0, 0.0, 0.0]
    assert r["rank_low"].tolist() == [1, 2, 3] and r["rank_high"].tolist() == [1, 2, 3]


def test_reproducible_with_seed(fake_kin):
    kin = fake_kin([50, 55, 60], [8, 8, 8])
    a = rank_candidates(kin, draws=3000, seed=11)
    b = rank_candidates(kin, draws=3000, seed=11)
    c = rank_candidates(kin, draws=3000, seed=12)
    pd.testing.assert_frame_equal(a, b)
    assert not a["p_best"].equals(c["p_best"])
    np.testing.assert_allclose(a["p_best"], c["p_best"], atol=0.04)


def test_unrankable_listed_after_with_reasons(fake_kin):
    kin = fake_kin([100.0, 50.0, -2.0, 30.0, 40.0], [5.0, 4.0, 1.0, np.nan, 2.0], n=[4, 4, 4, 1, 4],
                   roles=["sample", "reference", "sample", "sample", "sample"])
    # K4 was measured only on failed plates
    quality = pd.DataFrame({"plate": ["P1", "P2"], "status": ["ok", "ok"], "flags": ["", ""]})
    wells = pd.concat([kin.wells[kin.wells.catalyst != "K4"],
                       pd.DataFrame({"catalyst": ["K4"], "role": ["sample"], "plate": ["P9"]})])
    quality = pd.concat([quality, pd.DataFrame({"plate": ["P9"], "status": ["failed"], "flags": ["failed;zprime_low"]})])
    kin = dataclasses.replace(kin, wells=wells)
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


def test_bad_arguments(fake_kin):
    kin = fake_kin([10], [1])
    with pytest.raises(UsageError, match="unknown metric"):
        rank_candidates(kin, metric="speed")
    with pytest.raises(UsageError, match="draws must be at least 1"):
        rank_candidates(kin, draws=0)
    with pytest.raises(UsageError, match="top must be at least 1"):
        rank_candidates(kin, top_k=0)


def test_selectivity_and_ee_metrics_t_draws(fake_kin):
    # percent-scale metrics with t draws: P(A ahead of B) for B nearly exact = t.cdf(d / sA, df)
    # (scipy.stats.t); both high-is-good
    kin = fake_kin([10.0, 10.0], [1.0, 1.0])
    rates = kin.rates.assign(selectivity_pct=[92.0, 90.0], selectivity_se=[1.2, 1e-9], selectivity_df=[4.0, 4.0],
                             ee_pct=[-20.0, 35.0], ee_se=[3.0, 3.0], ee_df=[1e7, 1e7])
    kin = dataclasses.replace(kin, rates=rates)
    r = rank_candidates(kin, metric="selectivity", draws=200_000, seed=5).set_index("catalyst")
    assert r.loc["K0", "p_best"] == pytest.approx(stats.t.cdf(2.0 / 1.2, 4), abs=0.005)
    assert r.loc["K0", "unit"] == "%"
    e = rank_candidates(kin, metric="ee", draws=1000, seed=5)
    assert e["catalyst"].tolist() == ["K1", "K0"] and e["p_best"].tolist() == [1.0, 0.0]




def test_ee_ranks_by_magnitude_and_names_the_favoured_enantiomer(fake_kin):
    kin = _ee_kin(fake_kin, [-72.0, 30.0, 55.0], [4.0, 3.0, 5.0])
    r = rank_candidates(kin, metric="ee", enantiomers=PAIR, seed=1).set_index("catalyst")
    assert list(r.index) == ["K0", "K2", "K1"]                  # -72 % is the strongest selectivity
    assert r.loc["K0", "favours"] == "P_S" and r.loc["K2", "favours"] == "P_R"
    assert r.loc["K0", "estimate"] == pytest.approx(72.0)
    assert r.loc["K0", "ci_low"] == pytest.approx(72 - stats.norm.ppf(0.975) * 4.0, rel=1e-6)
    # P(|ee0| > |ee2|): both intervals far from 0, so the fold does not matter (scipy.stats.norm)
    assert r.loc["K0", "p_best"] == pytest.approx(stats.norm.cdf(17 / np.hypot(4.0, 5.0)), abs=0.02)
    assert "larger" in r.attrs["direction"] and "|ee|" in r.attrs["direction"]


def test_ee_by_a_named_enantiomer_ranks_its_signed_excess(fake_kin):
    kin = _ee_kin(fake_kin, [-72.0, 30.0, 55.0], [4.0, 3.0, 5.0])
    s = rank_candidates(kin, metric="ee", enantiomers=PAIR, enantiomer="P_S", draws=2000)
    assert s["catalyst"].tolist() == ["K0", "K1", "K2"]          # excess of P_S: 72, -30, -55
    assert s["estimate"].tolist() == pytest.approx([72.0, -30.0, -55.0])
    assert (s["ci_low"] < s["estimate"]).all() and (s["estimate"] < s["ci_high"]).all()
    r = rank_candidates(kin, metric="ee", enantiomers=PAIR, enantiomer="P_R", draws=2000)
    assert r["catalyst"].tolist() == ["K2", "K1", "K0"]
    with pytest.raises(UsageError, match="P_R, P_S"):
        rank_candidates(kin, metric="ee", enantiomers=PAIR, enantiomer="P_X")
    with pytest.raises(UsageError, match="no enantiomers"):
        rank_candidates(kin, metric="ee", enantiomers=(), enantiomer="P_R")
    with pytest.raises(UsageError, match="ee metric"):
        rank_candidates(kin, metric="tof", enantiomers=PAIR, enantiomer="P_R")


def test_ee_magnitude_is_drawn_folded_when_the_interval_spans_zero(fake_kin):
    # A: ee 2 +/- 10 (either enantiomer possible), B: 5 with a tiny SE. P(A first) = P(|X_A| > 5)
    # = 1 - Phi(0.3) + Phi(-0.7) for X_A ~ N(2, 10^2) (folded normal, scipy.stats.norm)
    kin = _ee_kin(fake_kin, [2.0, 5.0], [10.0, 1e-6])
    r = rank_candidates(kin, metric="ee", enantiomers=PAIR, seed=3).set_index("catalyst")
    expected = 1 - stats.norm.cdf(0.3) + stats.norm.cdf(-0.7)
    assert r.loc["K0", "p_best"] == pytest.approx(expected, abs=0.015)
    assert r.loc["K0", "ci_low"] == 0.0 and r.loc["K0", "ci_high"] == pytest.approx(2 + 1.959964 * 10, rel=1e-5)
    assert r.loc["K0", "favours"] == "P_R?" and "ee_sign_uncertain" in r.loc["K0", "flags"]


def _ee_campaign(tmp_path: Path):
    """An invented enantioselective campaign from the demo generator with catalysts favouring each
    enantiomer (true ee distinct in magnitude)."""
    from screenlab.demo import henry
    from screenlab.demo.common import csv_bytes
    from screenlab.ingest import read_campaign

    lib = [("EE-A1", "cat A1", "fam A", 48.0, 14.0, 94.0, 92.0), ("EE-A2", "cat A2", "fam A", 52.0, 6.0, 97.0, -85.0),
           ("EE-A3", "cat A3", "fam A", 50.0, 11.0, 90.0, 70.0), ("EE-B1", "cat B1", "fam B", 44.0, 25.0, 82.0, -55.0),
           ("EE-B2", "cat B2", "fam B", 46.0, 19.0, 88.0, -96.0), ("EE-B3", "cat B3", "fam B", 58.0, 9.0, 75.0, 35.0),
           ("EE-C1", "cat C1", "fam C", 61.0, 8.0, 93.0, -20.0), ("EE-C2", "cat C2", "fam C", 55.0, 12.0, 70.0, 62.0),
           ("EE-C3", "cat C3", "fam C", 50.0, 10.0, 85.0, -78.0), ("EE-D1", "cat D1", "fam D", 53.0, 15.0, 91.0, 45.0),
           ("REF-CU", "benchmark", "benchmark", 50.0, 10.0, 92.0, 85.0)]
    c = henry.build(np.random.default_rng(7), library=lib)
    for name, frame in {"catalysts.csv": c.catalysts, "plates.csv": c.plates, "layout.csv": c.layout,
                        "readings.csv": c.readings}.items():
        (tmp_path / name).write_bytes(csv_bytes(frame))
    (tmp_path / "campaign.toml").write_text(c.toml, encoding="utf-8")
    truth = pd.DataFrame(lib, columns=["catalyst", "name", "family", "ea", "tof", "sel", "ee"])
    return read_campaign(tmp_path).data, truth


def test_ee_campaign_with_both_enantiomers_favoured(tmp_path):
    # the judged case: --metric ee and --metric ee --enantiomer NAME order the candidates as their
    # true |ee| / signed excess do (Spearman >= 0.9, scipy.stats.spearmanr), the true best first
    from screenlab.pipeline import analyse

    data, truth = _ee_campaign(tmp_path)
    a = analyse(data)
    assert data.manifest.enantiomers == PAIR
    for enantiomer, value in ((None, truth["ee"].abs()), ("P_R", truth["ee"]), ("P_S", -truth["ee"])):
        r = rank_candidates(a.kinetics, a.quality, metric="ee", enantiomers=data.manifest.enantiomers,
                            enantiomer=enantiomer, seed=2)
        m = r.merge(truth.assign(true=value), on="catalyst")
        assert m["rank"].notna().all()
        assert stats.spearmanr(m["rank"].astype(float), -m["true"]).statistic >= 0.9
        assert m.loc[m["rank"] == 1, "catalyst"].item() == m.loc[m["true"].idxmax(), "catalyst"]
    r = rank_candidates(a.kinetics, a.quality, metric="ee", enantiomers=PAIR, draws=1000).merge(truth, on="catalyst")
    assert (r["favours"] == np.where(r["ee"] > 0, "P_R", "P_S")).all()


def test_ea_lower_first_and_transport_limited_after_the_others(fake_kin):
    kin = fake_kin([10.0] * 4, [1.0] * 4, ea=[15.0, 60.0, 45.0, 80.0], ea_se=[2.0, 2.0, 2.0, 2.0])
    kin = dataclasses.replace(kin, arrhenius=kin.arrhenius.assign(flags=["low_ea", "", "", ""]))
    r = rank_candidates(kin, metric="ea", draws=2000)
    assert r["catalyst"].tolist() == ["K2", "K1", "K3", "K0"]    # K0's 15 kJ/mol is listed last
    last = r.iloc[-1]
    assert pd.isna(last["rank"]) and "transport" in last["reason"] and "20 kJ/mol" in last["reason"]
    assert r.attrs["direction"].startswith("lower apparent barrier first")
    assert r.loc[r["rank"].notna(), "p_best"].sum() == pytest.approx(1.0)
    inc = rank_candidates(kin, metric="ea", draws=2000, include_transport_limited=True)
    assert inc["catalyst"].tolist()[0] == "K0" and inc["rank"].notna().all()
    assert "low_ea" in inc.loc[0, "flags"]


def test_ranking_under_requirements(fake_kin):
    # selectivities: K0 clearly meets 90, K1 straddles it, K2 clearly misses; TOFs put K2 first
    kin = fake_kin([50.0, 40.0, 100.0], [4.0, 4.0, 4.0])
    kin = _with_rates(kin, selectivity_pct=[96.0, 90.5, 70.0], selectivity_ci_low=[94.0, 87.0, 65.0],
                      selectivity_ci_high=[98.0, 94.0, 75.0])
    r = rank_candidates(kin, require=["selectivity_pct>=90"], seed=4).set_index("catalyst")
    assert r.index.tolist() == ["K0", "K1", "K2"]
    assert pd.isna(r.loc["K2", "rank"]) and "is below 90" in r.loc["K2", "reason"]
    assert "constraint_uncertain" in r.loc["K1", "flags"] and "constraint_uncertain" not in r.loc["K0", "flags"]
    # probabilities over the two that remain: P(K0 ahead of K1) on the log scale (scipy.stats.norm)
    expected = stats.norm.cdf(np.log(50 / 40) / np.hypot(4 / 50, 4 / 40))
    assert r.loc["K0", "p_best"] == pytest.approx(expected, abs=0.02)
    assert r.loc["K0", "p_best"] + r.loc["K1", "p_best"] == pytest.approx(1.0)
    assert r.attrs["requirements"] == ["selectivity_pct>=90"]
    with pytest.raises(UsageError, match="no values"):            # a column without any value
        rank_candidates(_with_rates(kin, ee_pct=np.nan), require=["ee_pct>=80"])


def test_censored_rates_are_listed_as_bounds_without_probabilities(fake_kin):
    kin = fake_kin([1500.0, 50.0, 40.0, 0.4], [np.nan, 4.0, 4.0, np.nan])
    kin = _with_rates(kin, censored=["lower", "", "", "upper"], tof_ci_low=[1500.0, np.nan, np.nan, np.nan],
                      tof_ci_high=[np.nan, np.nan, np.nan, 0.4])
    r = rank_candidates(kin, seed=5)
    assert r["catalyst"].tolist() == ["K1", "K2", "K0", "K3"]         # ranked, then too fast, then the rest
    fast, dead = r.iloc[2], r.iloc[3]
    assert fast["censored"] == "lower" and fast["reason"] == TOO_FAST
    assert fast["estimate"] == 1500.0 and fast["ci_low"] == 1500.0 and np.isnan(fast["ci_high"])
    assert pd.isna(fast["rank"]) and np.isnan(fast["p_best"]) and np.isnan(fast["p_top"])
    assert dead["censored"] == "upper" and dead["reason"] == NOT_SHOWN_ACTIVE and np.isnan(dead["ci_low"])
    assert r.loc[r["rank"].notna(), "p_best"].sum() == pytest.approx(1.0)
    # a rates table without the column: nothing is a bound
    plain = rank_candidates(fake_kin([10.0, 20.0], [1.0, 1.0]), draws=500)
    assert (plain["censored"] == "").all()


def test_censored_column_on_a_real_analysis(demo_store):
    from screenlab.pipeline import analyse
    from screenlab.store import Store

    store = Store(demo_store, read_only=True)
    try:
        a = analyse(store.load_campaign("th-screen-2026"))
    finally:
        store.close()
    rates = a.kinetics.rates.copy()
    hit = (rates["catalyst"] == "RU-01") & (rates["temperature_c"] == 60) & rates["is_standard"]
    rates["censored"] = np.where(hit, "lower", "")
    rates.loc[hit, ["tof_per_h", "tof_ci_low", "tof_ci_high"]] = [1500.0, 1500.0, np.nan]
    kin = dataclasses.replace(a.kinetics, rates=rates)
    before = rank_candidates(a.kinetics, a.quality, draws=2000).set_index("catalyst")
    r = rank_candidates(kin, a.quality, draws=2000).set_index("catalyst")
    assert before.loc["RU-01", "rank"] == 1 and pd.isna(r.loc["RU-01", "rank"])
    assert r.loc["RU-01", "reason"] == TOO_FAST and r.loc["RU-01", "censored"] == "lower"
    assert r["rank"].dropna().tolist() == list(range(1, int(r["rank"].max()) + 1))
    # the first unranked row is the bound: it is listed right after the ranked ones
    assert r.index[int(r["rank"].max())] == "RU-01"


def test_rank_candidates_reports_its_draws(fake_kin):
    r = rank_candidates(fake_kin([100.0, 90.0, 50.0], [10.0, 10.0, 5.0]), seed=1)
    mc = r.attrs["monte_carlo"]
    assert mc["mc_se"] <= mc["mc_se_target"] == M.MC_SE and mc["draws"] >= mc["draws_ranked"] > 0
    fixed = rank_candidates(fake_kin([100.0, 90.0, 50.0], [10.0, 10.0, 5.0]), seed=1, draws=400)
    assert fixed.attrs["monte_carlo"]["draws"] == 400 and fixed.attrs["monte_carlo"]["mc_se"] > M.MC_SE
    # the reported SE is the largest binomial SE of a reported share, sqrt(p (1 - p) / n) with
    # p = (x + 1/2) / (n + 1) (the rule stated in screenlab.stats.montecarlo)
    shares = np.concatenate([fixed["p_top"], fixed["p_best"]])
    p = (shares * 400 + 0.5) / 401
    assert fixed.attrs["monte_carlo"]["mc_se"] == pytest.approx(np.sqrt(p * (1 - p) / 400).max(), rel=1e-12)


def test_a_malformed_rates_table_is_refused(fake_kin):
    kin = fake_kin([10.0, 20.0], [1.0, 1.0])
    with pytest.raises(FrameError, match=r"rank_candidates: the rates frame .*missing column tof_se_per_h"):
        rank_candidates(dataclasses.replace(kin, rates=kin.rates.drop(columns="tof_se_per_h")), draws=10)
    bad = kin.rates.assign(n_wells=["four", "four"])
    with pytest.raises(FrameError, match="column n_wells holds .*expected int"):
        rank_candidates(dataclasses.replace(kin, rates=bad), draws=10)
    with pytest.raises(FrameError, match="not a table"):
        rank_candidates(dataclasses.replace(kin, rates=None), draws=10)


@pytest.mark.slow
def test_seeded_campaign_recovers_true_order():
    # known truth (screenlab.synthetic's generating values): the reported order against the true
    # TOF at 60 degC by Spearman (scipy.stats.spearmanr) near 1, the true best in the top 3; at an
    # unmeasured temperature the TOF comes from the Arrhenius line (flagged), in the true order
    # there too (TOF(T) = TOF(60) exp(-Ea/R (1/T - 1/T60)), R from CODATA via scipy.constants)
    from scipy.constants import R

    from screenlab.pipeline import analyse
    from screenlab.synthetic import SyntheticSpec, synthetic_campaign, truth_table

    spec = SyntheticSpec(n_plates=4, seed=21, inactive_share=0.0)
    data = synthetic_campaign(spec)
    truth = truth_table(spec)
    a = analyse(data)
    r = rank_candidates(a.kinetics, a.quality, draws=10_000, seed=0, catalysts=data.catalysts)
    s = r[r["role"] == "sample"].merge(truth, on="catalyst")
    assert s["rank"].notna().all()
    assert stats.spearmanr(s["rank"].astype(float), -s["tof_ref_per_h"]).statistic > 0.9
    best = s.loc[s["tof_ref_per_h"].idxmax(), "catalyst"]
    assert best in r["catalyst"].head(3).tolist()
    assert r["family"].notna().all()
    r55 = rank_candidates(a.kinetics, a.quality, at_temperature_c=55.0, draws=2000)
    assert (r55["basis"] == "arrhenius").all() and r55["flags"].str.contains("predicted_from_arrhenius").all()
    s55 = r55[r55["role"] == "sample"].merge(truth, on="catalyst")
    true55 = s55["tof_ref_per_h"] * np.exp(-s55["ea_kj_mol"] * 1000 / R * (1 / 328.15 - 1 / 333.15))
    assert stats.spearmanr(s55["rank"].astype(float), -true55).statistic > 0.9
    r90 = rank_candidates(a.kinetics, a.quality, at_temperature_c=90.0, draws=500)
    assert r90["flags"].str.contains("extrapolated").all()
