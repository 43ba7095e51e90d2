"""The team lead's path on the command line: shortlist --note -> decisions -> next-round folder ->
ingest (parent set) -> campaigns -> history -> report."""
from __future__ import annotations

import io
import json
import shutil
import tomllib
from pathlib import Path

import pandas as pd
import pytest

from rounds import ROUND1, round2_readings

from screenlab.cli import main

NOTE = "RU-01 and RU-02 lead; RU-04 is the safe third. Confirm at 50-70 C."


@pytest.fixture()
def store(demo_store, tmp_path):
    path = tmp_path / "s.duckdb"
    shutil.copy2(demo_store, path)
    return str(path)


def _run(capsys, *argv) -> tuple[int, str, str]:
    capsys.readouterr()
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_two_rounds_on_the_command_line(store, tmp_path, capsys):
    out = tmp_path / "sl"
    code, text, err = _run(capsys, "shortlist", "--campaign", ROUND1, "--store", store, "--top", "3", "--out", out,
                           "--temperatures", "50", "60", "70", "--draws", "2000", "--note", NOTE, "--author", "A. Lead")
    assert code == 0, err
    assert "recorded decision 1" in text
    # decisions: every column the issue asks for, in csv; the chosen catalysts with estimates in json
    code, text, _ = _run(capsys, "decisions", "--store", store, "--format", "csv")
    frame = pd.read_csv(io.StringIO(text))
    for col in ("decision", "campaign", "created_at", "author", "metric", "temperature_c", "catalysts", "note",
                "supersedes"):
        assert col in frame.columns
    row = frame.iloc[0]
    assert (row["decision"], row["campaign"], row["author"], row["metric"], row["temperature_c"], row["note"]) == \
        (1, ROUND1, "A. Lead", "tof", 60.0, NOTE)
    assert row["catalysts"] == "RU-01, RU-02, RU-04" and pd.isna(row["supersedes"])
    assert row["created_at"].endswith("Z")
    code, text, _ = _run(capsys, "decisions", "--store", store, "--format", "json", "--campaign", ROUND1)
    rec = json.loads(text)[0]
    assert [c["catalyst"] for c in rec["chosen"] if c["position"] is not None] == ["RU-01", "RU-02", "RU-04"]
    assert all(c["ci_low"] < c["estimate"] < c["ci_high"] for c in rec["chosen"])
    assert rec["constraints"]["next_round_temperatures_c"] == [50.0, 60.0, 70.0]
    # the shortlist files carry the decision; the next round names its parent and the decision
    prov = pd.read_excel(out / "shortlist.xlsx", sheet_name="provenance", engine="openpyxl").set_index("item")["value"]
    assert str(prov["decision"]) == "1" and prov["note"] == NOTE
    doc = tomllib.loads((out / "next-round" / "campaign.toml").read_text(encoding="utf-8"))
    assert doc["campaign"]["parent"] == ROUND1 and doc["campaign"]["decision"] == 1
    # the round is run (invented readings) and imported: campaigns shows its parent
    folder = round2_readings(Path(shutil.copytree(out / "next-round", tmp_path / "round2")))
    code, text, err = _run(capsys, "ingest", folder, "--store", store)
    assert code == 0, err
    code, text, _ = _run(capsys, "campaigns", "--store", store, "--format", "csv")
    camps = pd.read_csv(io.StringIO(text)).set_index("campaign")
    assert camps.loc[f"{ROUND1}-next", "parent"] == ROUND1 and camps.loc[f"{ROUND1}-next", "parent_decision"] == 1
    assert "parent" in _run(capsys, "campaigns", "--store", store)[1].splitlines()[0]
    # history: both rounds with TOF intervals and the benchmark ratio
    code, text, _ = _run(capsys, "history", "--catalyst", "RU-01", "--store", store, "--format", "json",
                         "--draws", "1000")
    hist = json.loads(text)
    assert [h["campaign"] for h in hist] == [ROUND1, f"{ROUND1}-next"]
    for h in hist:
        assert h["tof_ci_low"] < h["tof_per_h"] < h["tof_ci_high"]
        assert h["vs_benchmark_ci_low"] < h["vs_benchmark"] < h["vs_benchmark_ci_high"]
    code, text, _ = _run(capsys, "history", "--catalyst", "RU-01", "--store", store, "--draws", "500")
    assert code == 0 and "vs_benchmark" in text and f"{ROUND1}-next" in text
    # report of the first round: its decision, note and catalysts
    code, text, err = _run(capsys, "report", "--campaign", ROUND1, "--out", tmp_path / "r.html", "--store", store)
    html = (tmp_path / "r.html").read_text(encoding="utf-8")
    assert code == 0 and NOTE in html and "RU-02" in html and "<svg" in html


def test_a_changed_mind_supersedes(store, tmp_path, capsys):
    args = ["shortlist", "--campaign", ROUND1, "--store", store, "--out", tmp_path / "a", "--draws", "500"]
    assert _run(capsys, *args, "--top", "3", "--note", "first")[0] == 0
    assert _run(capsys, *args, "--top", "4", "--note", "add MN-01", "--supersedes", "1")[0] == 0
    code, text, _ = _run(capsys, "decisions", "--store", store, "--format", "json")
    d = {r["decision"]: r for r in json.loads(text)}
    assert d[1]["status"] == "superseded by 2" and d[1]["catalysts"] == "RU-01, RU-02, RU-04"
    assert d[2]["supersedes"] == 1 and d[2]["catalysts"] == "RU-01, RU-02, RU-04, MN-01"
    code, text, err = _run(capsys, *args, "--top", "2", "--note", "again", "--supersedes", "1")
    assert code == 2 and "already superseded" in err
    code, text, _ = _run(capsys, "decisions", "--store", store, "--decision", "2")
    assert "MN-01" in text and "add MN-01" in text


@pytest.mark.parametrize("extra, message", [
    (["--author", "x"], "go with --note"),
    (["--note", "  "], "give a note"),
    (["--note", "n", "--supersedes", "5"], "no decision 5"),
])
def test_shortlist_recording_usage_errors(store, tmp_path, capsys, extra, message):
    code, _, err = _run(capsys, "shortlist", "--campaign", ROUND1, "--store", store, "--top", "2", "--out",
                        tmp_path / "x", "--draws", "200", *extra)
    assert code == 2 and message in err and "Traceback" not in err
    assert _run(capsys, "decisions", "--store", store, "--format", "json")[1].strip() == "[]"


def test_decisions_and_history_messages(store, capsys):
    code, text, _ = _run(capsys, "decisions", "--store", store)
    assert code == 0 and text.strip() == "(no rows)"
    code, _, err = _run(capsys, "decisions", "--store", store, "--campaign", "nope")
    assert code == 1 and "nope" in err
    code, _, err = _run(capsys, "history", "--catalyst", "ru-01", "--store", store)
    assert code == 1 and "matched exactly" in err and "RU-01" in err
    code, _, err = _run(capsys, "history", "--catalyst", "RU-01", "--store", "/nonexistent/s.duckdb")
    assert code == 2
