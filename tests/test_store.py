"""The DuckDB store: migrations, round trips, import semantics, atomicity, locking, extensions.

Outside references used here:
* Python's stdlib ``csv`` module reads the synthetic CSV files independently of screenlab.ingest,
  and the stored counts / values are checked against it.
* ``hashlib.sha256`` over the file bytes (FIPS 180-4 via the stdlib) for the recorded file hashes.
* DuckDB documentation (https://duckdb.org/docs/2.0/connect/concurrency.html): a second process
  cannot open a file another process holds read-write, error "Could not set lock on file ...
  Conflicting lock is held in ... (PID n)"; and (https://duckdb.org/docs/2.0/sql/statements/transactions)
  a multi-statement string auto-commits each statement in 2.0.
* Built-in extensions of the Python wheel: core_functions, json, parquet, icu (duckdb/duckdb-python
  pyproject.toml BUILD_EXTENSIONS).
"""
from __future__ import annotations

import csv
import hashlib
import subprocess
import sys
import textwrap
import time
from dataclasses import replace as dc_replace

import numpy as np
import pandas as pd
import pytest

from screenlab.errors import NotFoundError, ScreenlabError, StoreBusyError, ValidationError
from screenlab.store import BUILTIN_EXTENSIONS, ImportRefusedError, Store
from screenlab.store import connection, writer

FRAMES = ("catalysts", "plates", "wells", "readings")


@pytest.fixture
def store(tmp_path):
    return Store(tmp_path / "s.duckdb")


def assert_same(a, b):
    for f in FRAMES:
        pd.testing.assert_frame_equal(getattr(a, f), getattr(b, f), check_exact=True, obj=f)
    assert a.manifest == b.manifest
    assert a.factor_names == b.factor_names


# ---------------------------------------------------------------------------------- migrations

def test_migrations_from_an_empty_store(tmp_path):
    path = tmp_path / "new.duckdb"
    s = Store(path)
    assert s.campaign_names() == []
    shipped = [v for v, _, _ in Store.migrations()]
    assert shipped == sorted(shipped) and shipped[0] == 1
    assert s.schema_versions() == shipped
    meta = s.metadata()
    assert meta["schema_version"] == str(shipped[-1])
    import duckdb

    assert meta["duckdb_version"].lstrip("v") == duckdb.__version__
    assert meta["storage_version"] and "DuckDB" in meta["storage_note"]
    assert "last_written_by" not in meta          # set by the first import
    # opening again (a new Store object) applies nothing twice
    assert Store(path).schema_versions() == shipped
    assert Store(path, read_only=True).campaigns().empty
    assert set(Store(path).table_counts().values()) == {0}


def test_read_only_needs_an_existing_store(tmp_path):
    with pytest.raises(NotFoundError, match="no store at"):
        Store(tmp_path / "missing.duckdb", read_only=True).campaigns()
    assert not (tmp_path / "missing.duckdb").exists()


def test_a_failing_migration_step_leaves_the_previous_schema(tmp_path, monkeypatch):
    path = tmp_path / "m.duckdb"
    Store(path).campaign_names()
    good = Store.migrations()
    bad = good + [(good[-1][0] + 1, "broken", "CREATE TABLE half_done (a INTEGER);\nSELECT * FROM no_such_table;")]
    monkeypatch.setattr(connection, "migrations", lambda: bad)
    with pytest.raises(ScreenlabError):
        Store(path).campaign_names()
    monkeypatch.setattr(connection, "migrations", lambda: good)
    s = Store(path)
    assert s.schema_versions() == [v for v, _, _ in good]
    with s._connect() as con:
        assert con.execute("SELECT count(*) FROM duckdb_tables() WHERE table_name = 'half_done'").fetchall()[0][0] == 0


def test_newer_schema_is_refused(tmp_path, monkeypatch):
    path = tmp_path / "n.duckdb"
    Store(path).campaign_names()
    monkeypatch.setattr(connection, "migrations", lambda: [(0, "old", "")])
    with pytest.raises(ScreenlabError, match="newer than this"):
        Store(path).campaign_names()


# ---------------------------------------------------------------------------------- round trips

def test_round_trip_of_built_data_is_exact(store, make_data):
    data = make_data(analytes=["P", "B1"])
    report = store.import_campaign(data)
    assert report.status == "imported" and report.plates_added == ("P1", "P2")
    assert report.n_wells == len(data.wells) and report.n_readings == len(data.readings)
    assert_same(data, store.load_campaign(data.name))


def test_round_trip_of_reader_output_matches_the_csv_files(store, tmp_path, write_sample_campaign):
    from screenlab.ingest import read_campaign

    folder = write_sample_campaign(tmp_path / "camp", name="csv-camp", plates=("A", "B", "C"))
    result = read_campaign(folder)
    report = store.import_campaign(result)
    assert report.status == "imported"
    back = store.load_campaign("csv-camp")
    assert_same(result.data, back)
    # independent read of the files with the stdlib csv module
    with open(folder / "readings.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    with open(folder / "layout.csv", newline="") as fh:
        layout = list(csv.DictReader(fh))
    summary = store.campaigns().set_index("campaign").loc["csv-camp"]
    assert summary["readings"] == len(rows) and summary["wells"] == len(layout) and summary["plates"] == 3
    want = sorted((r["plate"], r["well"], float(r["time"]) / 60.0, float(r["value"])) for r in rows)
    got = sorted(zip(back.readings["plate"], back.readings["well"], back.readings["time_h"], back.readings["value"]))
    assert len(got) == len(want)
    assert all(g[:2] == w[:2] and abs(g[2] - w[2]) < 1e-12 and g[3] == w[3] for g, w in zip(got, want))
    # the files recorded with the import carry the sha256 of their bytes
    files = store.import_files("csv-camp").set_index("name")
    for name in ("campaign.toml", "catalysts.csv", "plates.csv", "layout.csv", "readings.csv"):
        assert files.loc[name, "sha256"] == hashlib.sha256((folder / name).read_bytes()).hexdigest()
    assert files.loc["readings.csv", "n_rows"] == len(rows)


def test_str_nullable_and_timestamp_columns_round_trip(store, make_data):
    base = make_data("dtypes")
    plates = base.plates.copy()
    plates["run_date"] = pd.to_datetime(["2026-03-01 08:30", None]).as_unit("us")
    plates["format"] = plates["format"].astype("Int64")
    wells = base.wells.copy()
    wells["solvent"] = wells["solvent"].astype("string").where(wells["row"] != 3, pd.NA)   # NA-style strings
    wells["additive"] = pd.Series(np.where(wells["col"] % 3 == 0, "LiCl", None), dtype="str")  # NaN-style strings
    wells["row"] = wells["row"].astype("Int64")
    cats = base.catalysts.copy()
    cats["family"] = cats["family"].astype("object")
    data = dc_replace(base, plates=plates, wells=wells, catalysts=cats, factor_names=("solvent", "additive"))
    store.import_campaign(data)
    back = store.load_campaign("dtypes")
    assert_same(data, back)
    assert back.plates["run_date"].dtype.kind == "M"
    assert isinstance(back.wells["solvent"].dtype, pd.StringDtype) and back.wells["solvent"].dtype.na_value is pd.NA
    assert back.wells["solvent"].isna().sum() == (wells["row"] == 3).sum()
    assert str(back.wells["row"].dtype) == "Int64"
    # a stored timestamp comes back as a datetime column (compare by kind, not unit)
    assert store.imports()["imported_at"].dtype.kind == "M"


def test_unknown_campaign_is_not_found(store, make_data):
    store.import_campaign(make_data("one"))
    with pytest.raises(NotFoundError, match="stored campaigns: one"):
        store.load_campaign("two")


def test_frames_that_break_the_contract_are_refused(store, make_data):
    data = make_data("dup")
    wells = pd.concat([data.wells, data.wells.iloc[[5]]], ignore_index=True)
    with pytest.raises(ValidationError) as err:
        store.import_campaign(dc_replace(data, wells=wells))
    assert any(p.file == "wells" and p.row == len(wells) + 1 for p in err.value.problems)
    assert store.campaign_names() == []


# ---------------------------------------------------------------------------------- import semantics

def test_reimport_of_unchanged_data_adds_nothing(store, make_data):
    data = make_data()
    store.import_campaign(data)
    counts, version = store.table_counts(), store.data_version()
    again = store.import_campaign(data)
    assert store.metadata()["last_written_by"].startswith("DuckDB v")
    assert again.status == "unchanged" and again.import_id is None
    assert again.plates_unchanged == ("P1", "P2") and "nothing to import" in again.message
    assert store.table_counts() == counts and store.data_version() == version
    # the same data in another row order is the same data
    rng = np.random.default_rng(1)
    shuffled = dc_replace(data, wells=data.wells.sample(frac=1, random_state=rng),
                          readings=data.readings.sample(frac=1, random_state=rng))
    assert store.import_campaign(shuffled).status == "unchanged"
    assert store.table_counts() == counts


def test_a_folder_with_new_plates_adds_them(store, make_data):
    store.import_campaign(make_data(plates=("P1", "P2")))
    bigger = make_data(plates=("P1", "P2", "P3"))
    report = store.import_campaign(bigger)
    assert report.status == "added_plates"
    assert report.plates_added == ("P3",) and report.plates_unchanged == ("P1", "P2")
    assert report.n_wells == 96 and report.n_readings == 96 * 5
    back = store.load_campaign(bigger.name)
    assert_same(bigger, back)
    # a folder with only the new plate also adds it and leaves the stored ones alone
    only_new = make_data(plates=("P4",))
    r4 = store.import_campaign(only_new)
    assert r4.status == "added_plates" and r4.plates_kept == ("P1", "P2", "P3")
    assert list(store.load_campaign(bigger.name).plates["plate"]) == ["P1", "P2", "P3", "P4"]
    assert store.campaigns().loc[0, "plates"] == 4


def test_new_factor_and_new_catalyst_extend_the_campaign(store, make_data):
    store.import_campaign(make_data(plates=("P1",), solvent=False))
    more = make_data(plates=("P2",))
    cats = pd.concat([more.catalysts, more.catalysts.iloc[[0]].assign(catalyst="C99", name="new one")],
                     ignore_index=True)
    report = store.import_campaign(dc_replace(more, catalysts=cats))
    assert report.status == "added_plates" and report.catalysts_added == ("C99",)
    back = store.load_campaign(more.name)
    assert back.factor_names == ("solvent",)
    assert back.wells.loc[back.wells["plate"] == "P1", "solvent"].isna().all()
    assert (back.wells.loc[back.wells["plate"] == "P2", "solvent"].notna()).all()
    assert back.catalysts["catalyst"].tolist()[-1] == "C99"


def test_changed_plates_are_refused_with_their_names(store, make_data):
    data = make_data(plates=("P1", "P2", "P3"))
    store.import_campaign(data)
    counts = store.table_counts()
    readings = data.readings.copy()
    readings.loc[readings.index[(readings["plate"] == "P2").to_numpy()][3], "value"] += 0.5
    wells = data.wells.copy()
    wells.loc[(wells["plate"] == "P3") & (wells["well"] == "B2"), "loading"] = 0.75
    changed = dc_replace(data, readings=readings, wells=wells)
    with pytest.raises(ImportRefusedError) as err:
        store.import_campaign(changed)
    msg = str(err.value)
    assert err.value.plates == ("P2", "P3")
    assert "P2 (readings)" in msg and "P3 (layout)" in msg and "P1" not in msg
    assert "Nothing was written" in msg and "replace" in msg
    with pytest.raises(ImportRefusedError):
        store.import_campaign(changed, dry_run=True)
    assert store.table_counts() == counts


def test_replace_keeps_history_and_queries_see_only_current_rows(store, make_data):
    data = make_data(plates=("P1", "P2"))
    store.import_campaign(data)
    readings = data.readings.copy()
    on_p2 = (readings["plate"] == "P2").to_numpy()
    readings.loc[on_p2, "value"] = readings.loc[on_p2, "value"] * 0.5
    new = dc_replace(data, readings=readings)
    report = store.import_campaign(new, replace=True)
    assert report.status == "replaced" and report.plates_replaced == ("P2",) and report.plates_unchanged == ("P1",)
    assert "old version kept" in report.message
    assert_same(new, store.load_campaign(data.name))
    counts = store.table_counts()
    assert counts["readings"] == len(data.readings) + on_p2.sum()      # old rows still there
    assert counts["plates"] == 3 and counts["wells"] == len(data.wells) + 96
    summary = store.campaigns().iloc[0]
    assert summary["readings"] == len(data.readings) and summary["plates"] == 2 and summary["imports"] == 2
    hist = store.imports(data.name)
    assert hist["status"].tolist() == ["imported", "replaced"] and hist.loc[1, "plates_replaced"] == "P2"
    # the superseded rows are the originals, untouched
    with store._connect() as con:
        old = con.execute("SELECT r.value FROM readings r JOIN plates p USING (campaign, plate, import_id) "
                          "WHERE p.superseded_by IS NOT NULL ORDER BY r.seq").df()
    np.testing.assert_array_equal(old["value"].to_numpy(), data.readings.loc[on_p2, "value"].to_numpy())
    # importing the original again is a change back (refused), and with replace restores it
    assert store.import_campaign(data, replace=True).plates_replaced == ("P2",)
    assert_same(data, store.load_campaign(data.name))


def test_changed_manifest_or_catalyst_needs_replace(store, make_data):
    data = make_data()
    store.import_campaign(data)
    m2 = dc_replace(data.manifest, analysis={"reference_temperature_c": 70.0}, description="second look")
    with pytest.raises(ImportRefusedError, match="manifest"):
        store.import_campaign(dc_replace(data, manifest=m2))
    cats = data.catalysts.copy()
    cats.loc[cats["catalyst"] == "C3", "molar_mass_g_mol"] = 999.0
    with pytest.raises(ImportRefusedError, match="catalyst C3 differ") as err:
        store.import_campaign(dc_replace(data, catalysts=cats))
    assert err.value.catalysts == ("C3",)
    report = store.import_campaign(dc_replace(data, manifest=m2, catalysts=cats), replace=True)
    assert report.status == "replaced" and report.manifest_replaced and report.catalysts_replaced == ("C3",)
    back = store.load_campaign(data.name)
    assert back.manifest == m2 and back.manifest.analysis == {"reference_temperature_c": 70.0}
    assert back.catalysts.set_index("catalyst").loc["C3", "molar_mass_g_mol"] == 999.0
    assert store.table_counts()["campaigns"] == 2          # the old header is kept
    assert store.campaigns().iloc[0]["description"] == "second look"


def test_dry_run_writes_nothing(store, make_data):
    data = make_data()
    report = store.import_campaign(data, dry_run=True)
    assert report.status == "dry_run" and report.plates_added == ("P1", "P2") and report.import_id is None
    assert report.n_readings == len(data.readings) and "nothing written" in report.message
    assert store.campaign_names() == [] and set(store.table_counts().values()) == {0}


# ---------------------------------------------------------------------------------- atomicity

@pytest.mark.parametrize("last", ["readings", "import_files"])
def test_failure_while_writing_the_last_table_leaves_nothing(tmp_path, monkeypatch, last, write_sample_campaign):
    from screenlab.ingest import read_campaign

    store = Store(tmp_path / "a.duckdb")
    first = read_campaign(write_sample_campaign(tmp_path / "c1", name="atom", plates=("P1",)))
    store.import_campaign(first)
    before = store.table_counts()
    version = store.data_version()
    real = writer.bulk_insert
    seen = []

    def failing(con, table, frame):
        seen.append(table)
        if table == last:
            real(con, table, frame)           # the rows go in ... then the write fails
            raise RuntimeError("disk full (injected)")
        real(con, table, frame)

    monkeypatch.setattr(writer, "bulk_insert", failing)
    second = read_campaign(write_sample_campaign(tmp_path / "c2", name="atom", plates=("P1", "P2")))
    with pytest.raises(RuntimeError, match="injected"):
        store.import_campaign(second)
    assert last in seen
    if last == "import_files":
        assert seen[-1] == "import_files"      # it really is the last table written
    monkeypatch.setattr(writer, "bulk_insert", real)
    assert store.table_counts() == before and store.data_version() == version
    assert_same(first.data, store.load_campaign("atom"))
    # and a fresh store stays empty
    fresh = Store(tmp_path / "b.duckdb")
    monkeypatch.setattr(writer, "bulk_insert", failing)
    with pytest.raises(RuntimeError):
        fresh.import_campaign(first)
    monkeypatch.setattr(writer, "bulk_insert", real)
    assert set(fresh.table_counts().values()) == {0} and fresh.campaign_names() == []


def test_duckdb_multi_statement_strings_are_not_atomic(tmp_path):
    """Why the store uses begin()/commit(): DuckDB 2.0 auto-commits each statement of a script."""
    import duckdb

    con = duckdb.connect(str(tmp_path / "x.duckdb"))
    con.execute("CREATE TABLE t (a INTEGER)")
    with pytest.raises(duckdb.Error):
        con.execute("INSERT INTO t VALUES (1); INSERT INTO no_such_table VALUES (2)")
    n_script = con.execute("SELECT count(*) FROM t").fetchall()[0][0]
    con.begin()
    con.execute("INSERT INTO t VALUES (3)")
    con.rollback()
    n_after = con.execute("SELECT count(*) FROM t").fetchall()[0][0]
    con.close()
    assert n_after == n_script        # the explicit transaction rolled back
    assert n_script in (0, 1)         # 1 on 2.0 (auto-commit per statement), 0 on 1.x


# ---------------------------------------------------------------------------------- versions, size

def test_data_version_changes_on_every_write(store, make_data):
    assert store.data_version() == "empty"
    store.import_campaign(make_data(plates=("P1",)))
    v1 = store.data_version()
    store.import_campaign(make_data(plates=("P1",)))          # unchanged: no write
    assert store.data_version() == v1
    store.import_campaign(make_data(plates=("P1", "P2")))
    v2 = store.data_version()
    store.import_campaign(make_data("other", plates=("X",)))
    assert len({v1, v2, store.data_version()}) == 3
    assert Store(store.path, read_only=True).data_version() == store.data_version()


@pytest.mark.slow
def test_large_import_in_one_go(store, make_data):
    big = make_data("big", plates=tuple(f"B{i}" for i in range(10)), fmt=384, times=tuple(range(0, 136, 2)))
    assert len(big.readings) > 260_000
    t0 = time.perf_counter()
    report = store.import_campaign(big)
    elapsed = time.perf_counter() - t0
    print(f"imported {report.n_readings} readings in {elapsed:.2f} s")  # speed is reported, not asserted
    assert report.n_readings == len(big.readings)
    assert store.campaigns().iloc[0]["readings"] == len(big.readings)
    back = store.load_campaign("big")
    pd.testing.assert_frame_equal(back.readings, big.readings)


# ---------------------------------------------------------------------------------- environment

def test_only_builtin_extensions_load_and_autoinstall_is_off(store, tmp_path, write_sample_campaign):
    from screenlab.ingest import read_campaign

    store.import_campaign(read_campaign(write_sample_campaign(tmp_path / "c", name="ext")))
    store.load_campaign("ext")
    store.campaigns()
    assert set(store.loaded_extensions()) <= BUILTIN_EXTENSIONS
    with store._connect() as con:
        rows = con.execute("SELECT name, value FROM duckdb_settings() WHERE name IN "
                           "('autoinstall_known_extensions', 'autoload_known_extensions')").fetchall()
        assert {n: v.lower() for n, v in rows} == {"autoinstall_known_extensions": "false",
                                                   "autoload_known_extensions": "false"}
        # an extension outside the wheel fails at once instead of trying the network
        with pytest.raises(Exception):
            con.execute("SELECT * FROM sqlite_scan('x.db', 't')").fetchall()
        assert set(r[0] for r in con.execute(
            "SELECT extension_name FROM duckdb_extensions() WHERE loaded").fetchall()) <= BUILTIN_EXTENSIONS


HOLDER = textwrap.dedent("""
    import sys, duckdb
    con = duckdb.connect(sys.argv[1])
    con.execute("CREATE TABLE IF NOT EXISTS held (a INTEGER)")
    print("ready", flush=True)
    sys.stdin.read()
""")


@pytest.fixture
def held_store(tmp_path):
    """A store file held read-write by a second real process."""
    path = tmp_path / "busy.duckdb"
    Store(path).campaign_names()
    proc = subprocess.Popen([sys.executable, "-c", HOLDER, str(path)], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        yield path, proc.pid
    finally:
        proc.stdin.close()
        proc.wait(timeout=20)


@pytest.mark.parametrize("read_only", [False, True])
def test_store_busy_gives_a_clear_message_after_retrying(held_store, read_only):
    path, pid = held_store
    s = Store(path, read_only=read_only, busy_timeout_s=0.6)
    t0 = time.perf_counter()
    with pytest.raises(StoreBusyError) as err:
        s.campaigns()
    waited = time.perf_counter() - t0
    assert f"in use by another process (PID {pid})" in str(err.value)
    assert 0.3 <= waited < 5.0


def test_busy_timeout_from_the_environment(monkeypatch, tmp_path):
    monkeypatch.setenv("SCREENLAB_BUSY_TIMEOUT_S", "1.5")
    assert Store(tmp_path / "x.duckdb").busy_timeout_s == 1.5
    monkeypatch.delenv("SCREENLAB_BUSY_TIMEOUT_S")
    assert Store(tmp_path / "x.duckdb").busy_timeout_s == connection.DEFAULT_BUSY_TIMEOUT_S


def test_a_file_that_is_not_a_store_gives_a_message(tmp_path):
    bad = tmp_path / "notes.duckdb"
    bad.write_text("this is not a database\n" * 100)
    with pytest.raises(ScreenlabError, match="cannot open store"):
        Store(bad).campaigns()
