"""What the ranking ranks: ee either way, Ea's direction and transport limits, requirements on the
rates table, censored bounds, and reasons that say what is missing (issue 14).

Outside references: closed forms for two candidates from scipy.stats.norm (P(A ahead of B) =
Phi(d / sqrt(sA^2 + sB^2)) for independent normal draws; P(|X| > c) = 1 - Phi((c - m)/s) +
Phi((-c - m)/s) for a folded normal), Spearman's rho from scipy.stats.spearmanr against the
generating values of a campaign built with the demo generator (screenlab.demo, invented data).
"""
from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.errors import UsageError
from screenlab.stats.constraints import judge, parse_requirement, requirement_columns, Requirement
from screenlab.stats.ranking import NOT_SHOWN_ACTIVE, TOO_FAST, pareto, rank_candidates
from fake_kinetics import fake_kin

PAIR = ("P_R", "P_S")


def _with_rates(kin, **cols):
    return dataclasses.replace(kin, rates=kin.rates.assign(**cols))


def _ee_kin(ee, se, df=1e7):
    kin = fake_kin([10.0] * len(ee), [1.0] * len(ee))
    return _with_rates(kin, ee_pct=ee, ee_se=se, ee_df=df)


# ------------------------------------------------------------------------------------------- ee
def test_ee_ranks_by_magnitude_and_names_the_favoured_enantiomer():
    kin = _ee_kin([-72.0, 30.0, 55.0], [4.0, 3.0, 5.0])
    r = rank_candidates(kin, metric="ee", enantiomers=PAIR, seed=1).set_index("catalyst")
    assert list(r.index) == ["K0", "K2", "K1"]                  # -72 % is the strongest selectivity
    assert r.loc["K0", "favours"] == "P_S" and r.loc["K2", "favours"] == "P_R"
    assert r.loc["K0", "estimate"] == pytest.approx(72.0)
    assert r.loc["K0", "ci_low"] == pytest.approx(72 - stats.norm.ppf(0.975) * 4.0, rel=1e-6)
    # P(|ee0| > |ee2|): both intervals far from 0, so the fold does not matter (scipy.stats.norm)
    assert r.loc["K0", "p_best"] == pytest.approx(stats.norm.cdf(17 / np.hypot(4.0, 5.0)), abs=0.02)
    assert "larger" in r.attrs["direction"] and "|ee|" in r.attrs["direction"]


def test_ee_by_a_named_enantiomer_ranks_its_signed_excess():
    kin = _ee_kin([-72.0, 30.0, 55.0], [4.0, 3.0, 5.0])
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


def test_ee_magnitude_is_drawn_folded_when_the_interval_spans_zero():
    # A: ee 2 +/- 10 (either enantiomer possible), B: 5 with a tiny SE. P(A first) = P(|X_A| > 5)
    # = 1 - Phi(0.3) + Phi(-0.7) for X_A ~ N(2, 10^2) (folded normal, scipy.stats.norm)
    kin = _ee_kin([2.0, 5.0], [10.0, 1e-6])
    r = rank_candidates(kin, metric="ee", enantiomers=PAIR, seed=3).set_index("catalyst")
    expected = 1 - stats.norm.cdf(0.3) + stats.norm.cdf(-0.7)
    assert r.loc["K0", "p_best"] == pytest.approx(expected, abs=0.015)
    assert r.loc["K0", "ci_low"] == 0.0 and r.loc["K0", "ci_high"] == pytest.approx(2 + 1.959964 * 10, rel=1e-5)
    assert r.loc["K0", "favours"] == "P_R?" and "ee_sign_uncertain" in r.loc["K0", "flags"]


def _ee_campaign(tmp_path: Path):
    """An invented enantioselective campaign from the demo generator with catalysts favouring each
    enantiomer (true ee distinct in magnitude)."""
    import screenlab.demo as demo
    from screenlab.ingest import read_campaign

    lib = [("EE-A1", "cat A1", "fam A", 48.0, 14.0, 94.0, 92.0), ("EE-A2", "cat A2", "fam A", 52.0, 6.0, 97.0, -85.0),
           ("EE-A3", "cat A3", "fam A", 50.0, 11.0, 90.0, 70.0), ("EE-B1", "cat B1", "fam B", 44.0, 25.0, 82.0, -55.0),
           ("EE-B2", "cat B2", "fam B", 46.0, 19.0, 88.0, -96.0), ("EE-B3", "cat B3", "fam B", 58.0, 9.0, 75.0, 35.0),
           ("EE-C1", "cat C1", "fam C", 61.0, 8.0, 93.0, -20.0), ("EE-C2", "cat C2", "fam C", 55.0, 12.0, 70.0, 62.0),
           ("EE-C3", "cat C3", "fam C", 50.0, 10.0, 85.0, -78.0), ("EE-D1", "cat D1", "fam D", 53.0, 15.0, 91.0, 45.0),
           ("REF-CU", "benchmark", "benchmark", 50.0, 10.0, 92.0, 85.0)]
    orig = demo._HN_LIBRARY
    demo._HN_LIBRARY = lib
    try:
        c = demo._hn_campaign(np.random.default_rng(7))
    finally:
        demo._HN_LIBRARY = orig
    for name, frame in {"catalysts.csv": c.catalysts, "plates.csv": c.plates, "layout.csv": c.layout,
                        "readings.csv": c.readings}.items():
        (tmp_path / name).write_bytes(demo._csv(frame))
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


# ------------------------------------------------------------------------------------------- Ea
def test_ea_lower_first_and_transport_limited_after_the_others():
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


# ------------------------------------------------------------------------------------------- requirements
def test_requirement_expressions_and_their_errors():
    rates = fake_kin([1.0], [0.1]).rates.assign(selectivity_pct=90.0, selectivity_se=1.0, ee_pct=80.0)
    cols = requirement_columns(rates)
    assert {"tof_per_h", "ton", "selectivity_pct", "ee_pct"} <= set(cols)
    assert not {"tof_se_per_h", "tof_df", "enhancement_ci_low", "temperature_c", "n_wells"} & set(cols)
    assert parse_requirement(" selectivity_pct >= 90 ", cols) == Requirement("selectivity_pct", ">=", 90.0)
    assert parse_requirement("ton<=5e1", cols).value == 50.0
    for bad in ("selectivity_pct>90", "selectivity_pct=>90", "selectivity_pct>=ninety", "90<=selectivity_pct", ""):
        with pytest.raises(UsageError, match="COLUMN>=VALUE"):
            parse_requirement(bad, cols)
    with pytest.raises(UsageError, match="not a numeric column"):
        parse_requirement("selectivty_pct>=90", cols)


def test_requirement_judged_on_the_interval():
    req = Requirement("selectivity_pct", ">=", 90.0)
    status, text = judge(req, [95, 91, 85, np.nan], [92, 88, 80, np.nan], [98, 94, 89, np.nan])
    assert status.tolist() == ["met", "uncertain", "outside", "missing"]
    assert text[2] == "selectivity_pct 85 (80-89) is below 90 (--require selectivity_pct>=90)"
    assert "not measured" in text[3]
    up = judge(Requirement("ton", "<=", 50.0), [40, 49, 60], [35, 45, 51], [45, 55, 70])[0]
    assert up.tolist() == ["met", "uncertain", "outside"]


def test_ranking_under_requirements():
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


def test_pareto_respects_the_requirements():
    kin = fake_kin([100.0, 50.0, 40.0], [1.0, 1.0, 1.0], ea=[70.0, 50.0, 75.0], ea_se=[0.5, 0.5, 0.5])
    kin = _with_rates(kin, selectivity_pct=[60.0, 95.0, 96.0], selectivity_ci_low=[55.0, 93.0, 94.0],
                      selectivity_ci_high=[65.0, 97.0, 98.0])
    p = pareto(kin, metrics=("tof", "ea"), require=["selectivity_pct>=90"]).set_index("catalyst")
    assert not p.loc["K0", "on_front"] and "is below 90" in p.loc["K0", "reason"]
    assert p.loc["K1", "on_front"] and not p.loc["K2", "on_front"]     # K2 is beaten by K1 on both
    assert p.loc["K2", "dominated_by"] == "K1"


# ------------------------------------------------------------------------------------------- bounds
def test_censored_rates_are_listed_as_bounds_without_probabilities():
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


# ------------------------------------------------------------------------------------------- reasons
def test_reasons_say_what_is_missing():
    # K0 active but measured at one temperature, K1 inactive at every temperature, K2 at two
    kin = fake_kin([30.0, -1.0, 20.0], [3.0, 1.0, 2.0])
    arr = pd.DataFrame({"catalyst": ["K0", "K1", "K2"], "role": "sample", "n_temperatures": [1, 0, 2],
                        "t_min_c": 60.0, "t_max_c": [60.0, 60.0, 70.0], "ea_kj_mol": [np.nan, np.nan, 55.0],
                        "ea_se": np.nan, "fit_df": [np.nan, np.nan, 0.0], "flags": ["one_temperature",
                                                                                   "no_activity", "two_temperatures"],
                        "fit_intercept": [np.nan, np.nan, 25.0], "fit_slope_k": [np.nan, np.nan, -6600.0],
                        "cov_ii": np.nan, "cov_is": np.nan, "cov_ss": np.nan})
    kin = dataclasses.replace(kin, arrhenius=arr)
    r = rank_candidates(kin, at_temperature_c=45.0, draws=200).set_index("catalyst")["reason"]
    assert r["K0"] == "not measured at 45 degC; measured at one temperature only: no Arrhenius line to predict from"
    assert r["K1"] == "not measured at 45 degC; no activity over the blank at any temperature"
    assert "two temperatures" in r["K2"] and "no uncertainty" in r["K2"]
    assert not any("no activity" in x for x in r[["K0", "K2"]])       # active: never "no activity"
    e = rank_candidates(kin, metric="ea", draws=200).set_index("catalyst")["reason"]
    assert e["K0"] == "measured at one temperature only: no Ea"
    assert e["K1"] == "no activity over the blank at any temperature"
