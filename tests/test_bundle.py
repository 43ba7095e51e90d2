"""export.bundle.shortlist_bundle: the Shortlist page's downloads built without Streamlit (zip
contents and names, shortlist bytes, next-round summary)."""
from __future__ import annotations

import io
import zipfile
from pathlib import Path

import pandas as pd
import pytest

from screenlab.export.bundle import shortlist_bundle
from screenlab.export.nextround import design_next_round
from screenlab.ingest import read_campaign
from screenlab.pipeline import analyse
from screenlab.stats.ranking import rank_candidates

DEMO = Path(__file__).resolve().parents[1] / "demo_campaign" / "henry-chiral-2026"


@pytest.fixture(scope="module")
def henry():
    a = analyse(read_campaign(DEMO).data)
    r = rank_candidates(a.kinetics, a.quality, top_k=3, draws=2000, seed=0, catalysts=a.data.catalysts,
                        enantiomers=a.data.manifest.enantiomers)
    ranked = r[r["rank"].notna() & (r["role"].astype(str) != "reference")]
    return a, r, tuple(ranked["catalyst"].astype(str).head(2))


def _bundle(henry, note="", decision=None):
    a, r, picked = henry
    return shortlist_bundle(a, r, picked, campaign="henry-chiral-2026", metric="tof", temperature_c=None, top_k=3,
                            note=note, decision=decision)


def test_zip_holds_the_next_round_folder_under_one_name(henry, tmp_path):
    a, _, picked = henry
    b = _bundle(henry, note="  pick these two \n")
    z = zipfile.ZipFile(io.BytesIO(b.next_round_zip))
    names = z.namelist()
    folder = design_next_round(tmp_path / "nr", a.data, list(picked), name="henry-chiral-2026-next-round")
    files = sorted(p.name for p in folder.iterdir() if p.is_file())
    # the rule: the folder's files in name order under <campaign>-next-round/, then NOTE.txt
    assert names == [f"henry-chiral-2026-next-round/{n}" for n in files] + ["henry-chiral-2026-next-round/NOTE.txt"]
    assert {"campaign.toml", "catalysts.csv", "layout.csv", "plates.csv"} <= set(files)
    for n in files:  # the same bytes as the next round written directly (deterministic layout)
        assert z.read(f"henry-chiral-2026-next-round/{n}") == (folder / n).read_bytes()
    assert z.read("henry-chiral-2026-next-round/NOTE.txt") == b"pick these two\n"
    assert all(i.compress_type == zipfile.ZIP_DEFLATED for i in z.infolist())


def test_no_note_no_note_file_and_decision_in_the_manifest(henry):
    b = _bundle(henry, decision=7)
    z = zipfile.ZipFile(io.BytesIO(b.next_round_zip))
    assert not any(n.endswith("NOTE.txt") for n in z.namelist())
    toml = z.read("henry-chiral-2026-next-round/campaign.toml").decode()
    assert "decision = 7" in toml and 'parent = "henry-chiral-2026"' in toml


def test_shortlist_rows_and_summary(henry):
    a, r, picked = henry
    b = _bundle(henry)
    # CSV bytes and table are one thing; rows: the picks in ranking order, then the benchmark
    pd.testing.assert_frame_equal(b.table, pd.read_csv(io.BytesIO(b.csv)))
    expect = r[(r["catalyst"].isin(picked) | (r["role"] == "reference")) & r["rank"].notna()]
    assert list(b.table["catalyst"]) == list(expect["catalyst"])
    assert set(b.table["catalyst"]) == set(picked) | set(r.loc[r["role"] == "reference", "catalyst"])
    assert b.xlsx[:2] == b"PK"  # an xlsx is a zip
    # summary: plates and wells per role of the zipped layout (pandas value_counts, plain reading)
    z = zipfile.ZipFile(io.BytesIO(b.next_round_zip))
    lay = pd.read_csv(io.BytesIO(z.read("henry-chiral-2026-next-round/layout.csv")))
    assert b.next_round_summary.startswith(f"Next round: {lay['plate'].nunique()} plate(s), ")
    for role, n in lay["role"].value_counts().items():
        assert f"{n} {role}" in b.next_round_summary
    assert b.next_round_summary.endswith("files: campaign.toml, catalysts.csv, layout.csv, plates.csv.")
