"""Stores written by earlier screenlab versions (tests/fixtures/stores/schema_<N>.duckdb.gz) open,
migrate to the current schema, read back complete, accept imports and survive a backup round trip.

The expected counts in each schema_<N>.json were taken with the stdlib ``csv`` module from the
campaign files the fixture was imported from (see tests/fixtures/make_store_fixtures.py), not by
screenlab. The committed fixtures are never opened for writing: each test unpacks a private copy.
"""
from __future__ import annotations

import gzip
import json
import shutil
from pathlib import Path

import pytest

from screenlab.errors import ScreenlabError
from screenlab.store import Store
from screenlab.store.backup import backup_store, restore_store

FIXTURES = Path(__file__).parent / "fixtures" / "stores"
STORES = sorted(FIXTURES.glob("schema_*.duckdb.gz"))


def test_there_is_a_fixture_for_every_shipped_schema():
    have = {int(p.name.split("_")[1].split(".")[0]) for p in STORES}
    shipped = {v for v, _, _ in Store.migrations()}
    # every released schema needs its fixture; write the newest with make_store_fixtures.py
    assert shipped <= have, f"no fixture store for schema {sorted(shipped - have)}"


def unpack(gz: Path, tmp_path: Path) -> tuple[Path, dict]:
    dst = tmp_path / gz.name[: -len(".gz")]
    with gzip.open(gz, "rb") as src, open(dst, "wb") as out:
        shutil.copyfileobj(src, out)
    expected = json.loads(Path(str(gz)[: -len(".duckdb.gz")] + ".json").read_text(encoding="utf-8"))
    return dst, expected


@pytest.mark.parametrize("gz", STORES, ids=lambda p: p.name)
def test_fixture_store_opens_migrates_and_reads(gz, tmp_path, make_data):
    path, expected = unpack(gz, tmp_path)
    latest = Store.migrations()[-1][0]
    if expected["schema_version"] < latest:
        with pytest.raises(ScreenlabError, match="needs a schema upgrade"):
            Store(path, read_only=True).campaign_names()
    store = Store(path)
    assert store.schema_versions() == [v for v, _, _ in Store.migrations()]
    assert sorted(store.campaign_names()) == sorted(expected["campaigns"])
    summary = store.campaigns().set_index("campaign")
    for name, want in expected["campaigns"].items():
        row = summary.loc[name]
        assert (row["plates"], row["wells"], row["readings"], row["catalysts"]) == \
            (want["plates"], want["wells"], want["readings"], want["catalysts"])
        data = store.load_campaign(name)
        assert len(data.plates) == want["plates"] and len(data.wells) == want["wells"]
        assert len(data.readings) == want["readings"] and len(data.catalysts) == want["catalysts"]
        assert data.manifest.name == name
        assert data.readings["value"].notna().all() and (data.readings["time_h"] >= 0).all()
    counts = store.table_counts()
    for table, n in expected["table_counts"].items():
        assert counts[table] == n, table
    # still a working store: a fresh import lands, then a backup round trip keeps everything
    store.import_campaign(make_data("after-upgrade", plates=("N1",)))
    backup_store(path, tmp_path / "bk")
    restore_store(tmp_path / "bk", tmp_path / "again.duckdb")
    again = Store(tmp_path / "again.duckdb")
    assert again.table_counts() == store.table_counts()
    assert sorted(again.campaign_names()) == sorted(list(expected["campaigns"]) + ["after-upgrade"])


@pytest.mark.parametrize("gz", STORES, ids=lambda p: p.name)
def test_fixture_store_keeps_decisions_links_and_aliases_through_the_upgrade(gz, tmp_path):
    """Whatever the fixture holds of schema 2 (decisions, round links, aliases) reads back as written,
    also after a backup round trip; a schema-1 store gains the tables empty. And a campaign stored by
    the older code imports again as unchanged (its plates, catalysts and manifest compare equal)."""
    from fixtures.make_store_fixtures import plain_folder  # tests/fixtures/, beside this file

    from screenlab.ingest import read_campaign
    from screenlab.store import decisions as D

    path, expected = unpack(gz, tmp_path)
    store = Store(path)
    listed = D.decisions(store)
    want = expected.get("decisions", [])
    assert len(listed) == len(want)
    for row, w in zip(listed.to_dict(orient="records"), want):
        assert {k: row[k] for k in w} == w
        assert row["on_current_data"] and row["status"] == "current"
    links = store.campaigns().set_index("campaign")
    for name, (parent, decision) in expected.get("links", {}).items():
        assert (links.loc[name, "parent"], links.loc[name, "parent_decision"]) == (parent, decision)
    for name, renamed in expected.get("aliases", {}).items():
        cats = store.load_campaign(name).catalysts.set_index("catalyst")
        for new, old in renamed.items():
            assert cats.loc[new, "alias"] == old
            assert set(D.same_catalyst(D.all_catalysts(store), old)) == {old, new}
    rep = store.import_campaign(read_campaign(plain_folder(tmp_path)))
    assert rep.status == "unchanged", rep.message
    backup_store(path, tmp_path / "bk")
    restore_store(tmp_path / "bk", tmp_path / "again.duckdb")
    import pandas as pd

    pd.testing.assert_frame_equal(D.decisions(Store(tmp_path / "again.duckdb")), D.decisions(store))
