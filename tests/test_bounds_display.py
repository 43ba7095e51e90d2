"""Bounds shown as bounds: text formatting, the CLI table, the shortlist exports, the Arrhenius and
forest figures, and the rank command's options and usage errors (issue 14).

The rules here are stated in plain lines (a censored rate reads '>= x' / '<= x', its interval is
empty, its reason is given); the ranking numbers themselves are checked against outside references
in test_ranking.py, test_candidates.py and test_montecarlo.py.
"""
from __future__ import annotations

import dataclasses
import io
import json
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from screenlab.cli import main
from screenlab.cli.stats_cmd import ranking_for_reading
from screenlab.export.display import bound_text, number_text, show_bounds, value_text
from screenlab.export.shortlist import write_shortlist
from screenlab.stats.candidates import TOO_FAST
from screenlab.stats.ranking import rank_candidates
from screenlab.viz import figures


def test_number_and_bound_texts():
    assert number_text(1500) == "1,500" and number_text(1534.6) == "1,535" and number_text(123456) == "123,500"
    assert number_text(0.4) == "0.4" and number_text(13.6494) == "13.65" and number_text(np.nan) == ""
    assert bound_text(1500.0, "lower", "h-1") == ">= 1,500 h-1"
    assert bound_text(0.4, "upper", "h-1") == "<= 0.4 h-1"
    assert bound_text(12.0, "", "h-1") == ""
    assert value_text(13.6494, 11.487, 16.219, "", "h-1") == "13.65 (11.49 to 16.22) h-1"
    assert value_text(1500.0, 1500.0, np.nan, "lower", "h-1") == ">= 1,500 h-1"


def test_show_bounds_empties_the_interval_of_a_bound():
    f = pd.DataFrame({"tof_per_h": [20.0, 1500.0, 0.4], "tof_ci_low": [18.0, 1500.0, np.nan],
                      "tof_ci_high": [22.0, np.nan, 0.4], "censored": ["", "lower", "upper"]})
    out = show_bounds(f, "tof_per_h", "tof_ci_low", "tof_ci_high", unit="h-1", text="shown")
    assert out["shown"].tolist() == ["20 (18 to 22) h-1", ">= 1,500 h-1", "<= 0.4 h-1"]
    assert out["tof_ci_low"].isna().tolist() == [False, True, True] and out["tof_ci_high"].isna()[1:].all()
    assert f["tof_ci_low"].notna().sum() == 2                        # the input is not changed
    text = show_bounds(f, "tof_per_h", "tof_ci_low", "tof_ci_high", unit="h-1", text_only=True)
    assert text["tof_per_h"].tolist() == ["20", ">= 1,500 h-1", "<= 0.4 h-1"]
    assert text["tof_ci_low"].tolist() == ["18", "", ""]
    same = show_bounds(f.drop(columns="censored"), "tof_per_h", "tof_ci_low", "tof_ci_high", text="s")
    assert same["tof_ci_low"].notna().sum() == 2                     # no column: nothing is a bound


def _censored_ranking(fake_kin):
    kin = fake_kin([1500.0, 50.0, 40.0, 0.4], [np.nan, 4.0, 4.0, np.nan])
    rates = kin.rates.assign(censored=["lower", "", "", "upper"], tof_ci_low=[1500.0, 45.0, 35.0, np.nan],
                             tof_ci_high=[np.nan, 55.0, 45.0, 0.4])
    kin = dataclasses.replace(kin, rates=rates)
    return kin, rank_candidates(kin, draws=2000)


def test_cli_table_writes_bounds(fake_kin):
    _, r = _censored_ranking(fake_kin)
    t = ranking_for_reading(r).set_index("catalyst")
    assert t.loc["K0", "estimate"] == ">= 1,500 h-1" and t.loc["K0", "ci_low"] == "" and t.loc["K0", "ci_high"] == ""
    assert t.loc["K3", "estimate"] == "<= 0.4 h-1"
    assert t.loc["K0", "reason"] == TOO_FAST and "censored" in t.columns and "favours" not in t.columns


def test_shortlist_exports_write_bounds(tmp_path, fake_kin):
    kin, r = _censored_ranking(fake_kin)
    paths = write_shortlist(tmp_path, r, kin, campaign="demo", top_k=2)
    short = pd.read_csv(paths["csv"])
    assert short["shown"].str.endswith("h-1").all() and "censored" in short.columns
    book = openpyxl.load_workbook(paths["xlsx"], read_only=True)
    rows = list(book["ranking"].values)
    head = list(rows[0])
    ranking = pd.DataFrame(rows[1:], columns=head).set_index("catalyst")
    assert ranking.loc["K0", "shown"] == ">= 1,500 h-1" and pd.isna(ranking.loc["K0", "ci_low"])
    assert ranking.loc["K3", "shown"] == "<= 0.4 h-1"
    kinetics = pd.DataFrame(list(book["kinetics"].values)[1:], columns=list(next(book["kinetics"].values)))
    assert {"tof_shown", "censored_reason"} <= set(kinetics.columns)
    pq = pd.read_parquet(paths["parquet"])                           # one type per column
    assert pq["shown"].map(type).eq(str).all()


def test_arrhenius_plot_marks_points_left_out_and_bounds():
    pts = pd.DataFrame({"catalyst": ["A"] * 4, "temperature_c": [40.0, 50.0, 60.0, 70.0],
                        "tof_per_h": [10.0, 20.0, 40.0, 900.0], "tof_ci_low": [9.0, 18.0, 36.0, 900.0],
                        "tof_ci_high": [11.0, 22.0, 44.0, np.nan], "in_arrhenius_fit": [True, False, True, False],
                        "censored": ["", "", "", "lower"]})
    fig = figures.arrhenius_plot(pts)
    by_name = {t.name: t for t in fig.data}
    assert len(by_name["A"].x) == 2                                  # fitted, with error bars
    out = by_name["A (left out of the fit)"]
    assert out.marker.symbol.endswith("-open") and len(out.x) == 1
    bound = by_name["A (bound: faster than the first reading)"]
    assert bound.marker.symbol == "arrow-bar-up" and bound.error_y.array is None
    assert bound.marker.symbol not in figures.SYMBOLS                # never mistaken for a series
    # without the columns every point is a fitted, measured one
    plain = figures.arrhenius_plot(pts.drop(columns=["in_arrhenius_fit", "censored"]))
    assert [t.name for t in plain.data] == ["A"] and len(plain.data[0].x) == 4


def test_forest_plot_draws_bounds_apart(fake_kin):
    _, r = _censored_ranking(fake_kin)
    fig = figures.forest_plot(r, label="TOF / h⁻¹", log_x=True)
    est, bounds = fig.data
    assert list(est.y) == ["K1", "K2"]
    assert list(bounds.y) == ["K0", "K3"] and list(bounds.marker.symbol) == ["arrow-bar-right", "arrow-bar-left"]


# ------------------------------------------------------------------------------------------- the CLI
DEMO = Path(__file__).resolve().parents[1] / "demo_campaign"


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    path = tmp_path_factory.mktemp("rank-store") / "s.duckdb"
    assert main(["ingest", str(DEMO / "henry-chiral-2026"), str(DEMO / "th-screen-2026"), "--store", str(path)]) == 0
    return str(path)


def test_rank_ee_both_ways_on_the_demo(store, capsys):
    capsys.readouterr()
    assert main(["rank", "--campaign", "henry-chiral-2026", "--metric", "ee", "--store", store, "--format",
                 "json"]) == 0
    out = capsys.readouterr()
    rows = json.loads(out.out)
    assert [r["catalyst"] for r in rows][5] == "CU-DA2"              # -72 % ee, favouring the other enantiomer
    assert {r["favours"] for r in rows} == {"P_R", "P_S"}
    assert "draws" in out.err and "Monte Carlo SE" in out.err
    assert main(["rank", "--campaign", "henry-chiral-2026", "--metric", "ee", "--enantiomer", "P_S",
                 "--store", store]) == 0
    table = capsys.readouterr().out
    assert table.splitlines()[1].split()[1] == "CU-DA2" and "larger excess of P_S first" in table


def test_rank_requirements_and_usage_errors(store, capsys):
    base = ["rank", "--campaign", "henry-chiral-2026", "--store", store]
    capsys.readouterr()
    assert main(base + ["--require", "selectivity_pct>=90", "--require", "ee_pct>=80", "--format", "csv"]) == 0
    r = pd.read_csv(io.StringIO(capsys.readouterr().out))
    out = r[r["rank"].isna()]
    assert len(out) == 4 and out["reason"].str.contains("--require").all()
    assert r.loc[r["rank"].notna(), "p_best"].sum() == pytest.approx(1.0)
    for bad, msg in ((["--require", "selectivity_pct>90"], "COLUMN>=VALUE"),
                     (["--require", "selectivty_pct>=90"], "not a numeric column"),
                     (["--metric", "ee", "--enantiomer", "P_X"], "P_R, P_S"),
                     (["--enantiomer", "P_R"], "ee metric"),
                     (["--include-transport-limited"], "ea metric")):
        assert main(base + bad) == 2
        assert msg in capsys.readouterr().err
    assert main(["rank", "--campaign", "th-screen-2026", "--store", store, "--require", "ee_pct>=80"]) == 2
    assert "has no values" in capsys.readouterr().err


def test_rank_ea_help_and_transport_option(store, capsys):
    with pytest.raises(SystemExit):
        main(["rank", "--help"])
    helptext = capsys.readouterr().out
    assert "lower apparent barrier first" in helptext and "transport" in helptext and "--require" in helptext
    assert main(["rank", "--campaign", "th-screen-2026", "--metric", "ea", "--store", store, "--format", "csv"]) == 0
    r = pd.read_csv(io.StringIO(capsys.readouterr().out)).set_index("catalyst")
    assert pd.isna(r.loc["S-PT-AL", "rank"]) and "transport" in r.loc["S-PT-AL", "reason"]   # the demo's low-Ea one
    assert main(["rank", "--campaign", "th-screen-2026", "--metric", "ea", "--include-transport-limited",
                 "--store", store, "--format", "csv"]) == 0
    r2 = pd.read_csv(io.StringIO(capsys.readouterr().out)).set_index("catalyst")
    assert r2.loc["S-PT-AL", "rank"] == 1


def test_rank_says_at_which_temperature_it_compares(store, capsys):
    # a TOF ranking is a ranking at one temperature: the table says which (the campaign's
    # reference temperature, or --at-temperature); an Ea ranking has none to state
    capsys.readouterr()
    assert main(["rank", "--campaign", "th-screen-2026", "--store", store]) == 0
    assert "higher TOF first at 60 degC" in capsys.readouterr().out
    assert main(["rank", "--campaign", "th-screen-2026", "--store", store, "--at-temperature", "55"]) == 0
    assert "higher TOF first at 55 degC" in capsys.readouterr().out
    assert main(["rank", "--campaign", "th-screen-2026", "--metric", "ea", "--store", store]) == 0
    assert "degC" not in capsys.readouterr().out.splitlines()[-1]
