"""The quality / rank / shortlist commands on the demo campaign in a temporary store."""
from __future__ import annotations

import io
import json
from pathlib import Path

import pandas as pd
import pytest

from screenlab.cli import main

DEMO = Path(__file__).resolve().parents[1] / "demo_campaign" / "th-screen-2026"


@pytest.fixture(scope="module")
def store(tmp_path_factory):
    if not DEMO.exists():
        pytest.skip("demo campaign not generated")
    path = tmp_path_factory.mktemp("store") / "s.duckdb"
    assert main(["ingest", str(DEMO), "--store", str(path)]) == 0
    return str(path)


def test_rank_json_and_pareto(store, capsys):
    capsys.readouterr()
    assert main(["rank", "--campaign", "th-screen-2026", "--store", store, "--format", "json", "--draws", "2000",
                 "--top", "3"]) == 0
    rows = json.loads(capsys.readouterr().out)
    ranked = [r for r in rows if r["rank"] is not None]
    assert [r["rank"] for r in ranked] == list(range(1, len(ranked) + 1))
    assert sum(r["p_best"] for r in ranked) == pytest.approx(1.0)
    assert any(r["role"] == "reference" for r in ranked)
    unranked = rows[len(ranked):]
    assert all(r["reason"] for r in unranked)
    # plate flags come from the plates behind the 60 degC estimate, not from the 70 degC plate
    assert main(["quality", "--campaign", "th-screen-2026", "--store", store, "--format", "csv"]) == 0
    q = pd.read_csv(io.StringIO(capsys.readouterr().out))
    assert len(q) == 5 and set(q["status"]) <= {"ok", "flagged", "failed"}
    # the demo's 70 degC block has an evaporating outer ring; the 60 degC plates do not
    edge_plates = set(q.loc[q["flags"].fillna("").str.contains("edge_effect"), "plate"])
    assert "TH-70" in edge_plates and not any(p.startswith("TH-60") for p in edge_plates)
    assert not any("edge_effect" in (r["flags"] or "") for r in ranked if r["basis"] == "measured")


def test_quality_unknown_campaign_message(store, capsys):
    capsys.readouterr()
    assert main(["quality", "--campaign", "nope", "--store", store]) == 1
    err = capsys.readouterr().err
    assert "nope" in err and "Traceback" not in err


def test_shortlist_command_writes_everything(store, tmp_path, capsys):
    out = tmp_path / "sl"
    assert main(["shortlist", "--campaign", "th-screen-2026", "--store", store, "--top", "3", "--out", str(out),
                 "--temperatures", "50,70", "--draws", "2000", "--seed", "4"]) == 0
    for name in ("shortlist.csv", "shortlist.xlsx", "shortlist.parquet", "SAFETY.txt",
                 "next-round/campaign.toml", "next-round/layout.csv"):
        assert (out / name).exists(), name
    s = pd.read_csv(out / "shortlist.csv")
    assert s["shortlist"].dropna().tolist() == [1, 2, 3]
    assert set(pd.read_csv(out / "next-round" / "plates.csv")["temperature_c"]) == {50.0, 70.0}
    prov = pd.read_excel(out / "shortlist.xlsx", sheet_name="provenance", engine="openpyxl").set_index("item")["value"]
    assert prov["campaign"] == "th-screen-2026" and prov["seed"] == "4"
    assert any(k.startswith("import_file.") and k.endswith("layout.csv") for k in prov.index)
    assert main(["shortlist", "--campaign", "th-screen-2026", "--store", store, "--top", "2", "--out",
                 str(tmp_path / "bad"), "--temperatures", "warm"]) == 2
