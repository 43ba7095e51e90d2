"""Backups and restores of the store (screenlab/store/backup.py, screenlab backup / restore).

Outside references used here:
* ``hashlib.sha256`` (FIPS 180-4, Python stdlib) recomputes every file hash of the manifest.
* ``pyarrow.parquet`` and ``pandas.read_parquet`` (Apache Parquet readers independent of DuckDB)
  read every exported table; their row counts and values are compared with the store's.
* DuckDB documentation (https://duckdb.org/docs/2.0/connect/concurrency.html): a file held
  read-write by one process cannot be opened by another ("Could not set lock ... PID n").
"""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import duckdb
import pandas as pd
import pyarrow.parquet as pq
import pytest

from screenlab.cli import main
from screenlab.errors import NotFoundError, StoreBusyError
from screenlab.store import Store
from screenlab.store import backup as B

FRAMES = ("catalysts", "plates", "wells", "readings")
CLI = [sys.executable, "-c", "import sys; from screenlab.cli import main; sys.exit(main())"]


def assert_same(a, b):
    for f in FRAMES:
        pd.testing.assert_frame_equal(getattr(a, f), getattr(b, f), check_exact=True, obj=f)
    assert a.manifest == b.manifest
    assert a.factor_names == b.factor_names


@pytest.fixture(scope="module")
def filled_once(tmp_path_factory, make_data) -> Path:
    """A store with two campaigns, one with a replaced plate (history rows) and odd names."""
    path = tmp_path_factory.mktemp("backup-src") / "live.duckdb"
    s = Store(path)
    s.import_campaign(make_data("aldol 'A'; \"quoted\" ✓", plates=("P1", "P2")))
    s.import_campaign(make_data("hydrog-2", plates=("Q1",), analytes=("prod", "side")))
    s.import_campaign(make_data("hydrog-2", plates=("Q1",), analytes=("prod", "side"), k_scale=1.5), replace=True)
    return path


@pytest.fixture
def filled(filled_once, tmp_path) -> Path:
    """A private copy of that store (with its .wal, if any)."""
    dst = tmp_path / "live.duckdb"
    shutil.copy2(filled_once, dst)
    if Path(str(filled_once) + ".wal").exists():
        shutil.copy2(Path(str(filled_once) + ".wal"), Path(str(dst) + ".wal"))
    return dst


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


# ---------------------------------------------------------------------------------- round trip

def test_backup_then_restore_gives_the_same_campaigns_and_history(filled, tmp_path, make_data):
    live = Store(filled)
    rep = B.backup_store(filled, tmp_path / "bk")
    assert rep.tables == {**live.table_counts(), **{k: v for k, v in rep.tables.items()
                                                    if k not in live.table_counts()}}
    assert rep.schema_version == max(live.schema_versions())
    res = B.restore_store(tmp_path / "bk", tmp_path / "back.duckdb")
    assert res.replaced is None
    back = Store(tmp_path / "back.duckdb")
    assert back.campaign_names() == live.campaign_names()
    for name in live.campaign_names():
        assert_same(live.load_campaign(name), back.load_campaign(name))
    assert back.table_counts() == live.table_counts()
    pd.testing.assert_frame_equal(back.imports(), live.imports())
    # the restored store keeps working: a new import lands
    back.import_campaign(make_data("after-restore", plates=("R1",)))
    assert "after-restore" in back.campaign_names()


def test_manifest_hashes_counts_and_versions(filled, tmp_path):
    from screenlab import __version__

    B.backup_store(filled, tmp_path / "bk")
    m = json.loads((tmp_path / "bk" / "manifest.json").read_text())
    assert m["format"] == B.BACKUP_FORMAT and m["screenlab_version"] == __version__
    assert m["schema_version"] == Store.migrations()[-1][0] and m["duckdb_version"].lstrip("v") == duckdb.__version__
    on_disk = {str(p.relative_to(tmp_path / "bk")) for p in (tmp_path / "bk").rglob("*") if p.is_file()}
    assert on_disk == set(m["files"]) | {"manifest.json"}
    for rel, info in m["files"].items():
        data = (tmp_path / "bk" / rel).read_bytes()
        assert hashlib.sha256(data).hexdigest() == info["sha256"]  # FIPS 180-4 via hashlib
        assert len(data) == info["bytes"]
    counts = Store(filled).table_counts()
    for t, n in counts.items():
        assert m["tables"][t]["rows"] == n
    assert {"schema_migrations", "metadata"} <= set(m["tables"])


def test_parquet_tables_are_readable_by_pyarrow_and_pandas(filled, tmp_path):
    B.backup_store(filled, tmp_path / "bk")
    m = B.read_manifest(tmp_path / "bk")
    for t, info in m["tables"].items():
        path = tmp_path / "bk" / info["file"]
        assert pq.read_table(path).num_rows == info["rows"]       # Apache Arrow's Parquet reader
        assert len(pd.read_parquet(path)) == info["rows"]         # pandas (pyarrow engine)
    # values, not only counts: the readings as pandas reads them equal the store's readings table
    got = pd.read_parquet(tmp_path / "bk" / "tables" / "readings.parquet")
    con = duckdb.connect(str(filled), read_only=True)
    try:
        want = con.execute("SELECT * FROM readings").df()
    finally:
        con.close()
    key = ["import_id", "plate", "seq"]
    got = got.sort_values(key).reset_index(drop=True)
    want = want.sort_values(key).reset_index(drop=True)
    assert list(got.columns) == list(want.columns)
    for c in ("time_h", "value", "seq", "import_id"):
        assert (got[c].to_numpy() == want[c].to_numpy()).all(), c
    assert got["campaign"].astype(str).tolist() == want["campaign"].astype(str).tolist()
    names = set(pd.read_parquet(tmp_path / "bk" / "tables" / "campaigns.parquet")["campaign"])
    assert "aldol 'A'; \"quoted\" ✓" in names


def test_backup_includes_an_import_still_in_the_write_ahead_log(tmp_path, make_data):
    path = tmp_path / "w.duckdb"
    Store(path).import_campaign(make_data("first", plates=("P1",)))
    # a commit that stays in the WAL: the process ends without closing (no checkpoint on close)
    code = ("import os, sys, duckdb; con = duckdb.connect(sys.argv[1]); "
            "con.execute(\"UPDATE metadata SET value = 'wal-only' WHERE key = 'last_written_by'\"); os._exit(0)")
    subprocess.run([sys.executable, "-c", code, str(path)], check=True, timeout=60)
    assert Path(str(path) + ".wal").exists()
    B.backup_store(path, tmp_path / "bk")
    B.restore_store(tmp_path / "bk", tmp_path / "r.duckdb")
    assert Store(tmp_path / "r.duckdb").metadata()["last_written_by"] == "wal-only"
    assert not Path(str(tmp_path / "r.duckdb") + ".wal").exists()


# ---------------------------------------------------------------------------------- refusals

def test_restore_refuses_an_existing_store_without_force_and_keeps_it_aside_with_force(filled, tmp_path, make_data):
    B.backup_store(filled, tmp_path / "bk")
    target = tmp_path / "t.duckdb"
    Store(target).import_campaign(make_data("other", plates=("X1",)))
    with pytest.raises(B.BackupError, match="already exists"):
        B.restore_store(tmp_path / "bk", target)
    assert Store(target).campaign_names() == ["other"]
    res = B.restore_store(tmp_path / "bk", target, force=True)
    assert sorted(Store(target).campaign_names()) == sorted(Store(filled).campaign_names())
    assert res.replaced is not None and res.replaced.exists()
    assert Store(res.replaced, read_only=True).campaign_names() == ["other"]


def test_a_changed_or_missing_file_is_refused_before_anything_is_written(filled, tmp_path):
    B.backup_store(filled, tmp_path / "bk")
    pfile = tmp_path / "bk" / "tables" / "wells.parquet"
    data = bytearray(pfile.read_bytes())
    data[len(data) // 2] ^= 0xFF
    pfile.write_bytes(bytes(data))
    with pytest.raises(B.BackupError, match="wells.parquet does not match its sha256"):
        B.restore_store(tmp_path / "bk", tmp_path / "r.duckdb")
    assert not (tmp_path / "r.duckdb").exists()
    (tmp_path / "bk" / "store.duckdb").unlink()
    with pytest.raises(B.BackupError, match="store.duckdb is missing"):
        B.restore_store(tmp_path / "bk", tmp_path / "r.duckdb")
    assert not any(p.name.startswith(".r.duckdb") for p in tmp_path.iterdir())


def test_counts_that_disagree_with_the_manifest_are_refused(filled, tmp_path):
    B.backup_store(filled, tmp_path / "bk")
    mpath = tmp_path / "bk" / "manifest.json"
    m = json.loads(mpath.read_text())
    m["tables"]["readings"]["rows"] += 1
    mpath.write_text(json.dumps(m))
    with pytest.raises(B.BackupError, match="table readings"):
        B.restore_store(tmp_path / "bk", tmp_path / "r.duckdb")
    assert not (tmp_path / "r.duckdb").exists()


@pytest.mark.parametrize("content", ["", "{not json", json.dumps({"format": "something else"}),
                                     json.dumps({"format": B.BACKUP_FORMAT, "format_version": 99}),
                                     json.dumps({"format": B.BACKUP_FORMAT, "format_version": 1, "files": {}})])
def test_a_bad_manifest_gives_a_message(tmp_path, content):
    (tmp_path / "bk").mkdir()
    (tmp_path / "bk" / "manifest.json").write_text(content)
    with pytest.raises(B.BackupError):
        B.restore_store(tmp_path / "bk", tmp_path / "r.duckdb")


def test_a_manifest_cannot_point_outside_the_backup(filled, tmp_path):
    B.backup_store(filled, tmp_path / "bk")
    mpath = tmp_path / "bk" / "manifest.json"
    m = json.loads(mpath.read_text())
    m["files"]["../../etc/passwd"] = {"sha256": "0" * 64, "bytes": 1}
    mpath.write_text(json.dumps(m))
    with pytest.raises(B.BackupError, match="bad file entry"):
        B.verify_backup(tmp_path / "bk")


def test_backup_needs_a_store_and_a_new_folder(filled, tmp_path):
    with pytest.raises(NotFoundError):
        B.backup_store(tmp_path / "none.duckdb", tmp_path / "bk")
    assert not (tmp_path / "none.duckdb").exists()  # the check does not create an empty store
    (tmp_path / "full").mkdir()
    (tmp_path / "full" / "x").write_text("x")
    with pytest.raises(B.BackupError, match="already exists"):
        B.backup_store(filled, tmp_path / "full")
    (tmp_path / "empty").mkdir()
    B.backup_store(filled, tmp_path / "empty")  # an empty folder is fine
    assert (tmp_path / "empty" / "manifest.json").exists()


def test_a_failing_backup_leaves_no_backup_folder(filled, tmp_path, monkeypatch):
    def boom(path, chunk=0):
        raise OSError("disk full (simulated)")

    monkeypatch.setattr(B, "sha256_file", boom)
    with pytest.raises(OSError):
        B.backup_store(filled, tmp_path / "bk")
    assert not (tmp_path / "bk").exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".bk")]


HOLDER = ("import sys, duckdb; con = duckdb.connect(sys.argv[1]); print('ready', flush=True); sys.stdin.read()")


def test_backup_of_a_store_in_use_is_refused_with_a_message(filled, tmp_path):
    proc = subprocess.Popen([sys.executable, "-c", HOLDER, str(filled)], stdin=subprocess.PIPE,
                            stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "ready"
        with pytest.raises(StoreBusyError, match=f"PID {proc.pid}"):
            B.backup_store(filled, tmp_path / "bk", busy_timeout_s=0.3)
        env = dict(os.environ, SCREENLAB_BUSY_TIMEOUT_S="0.3")
        res = subprocess.run(CLI + ["backup", "--store", str(filled), "--out", str(tmp_path / "bk")],
                             capture_output=True, text=True, env=env, timeout=60)
    finally:
        proc.stdin.close()
        proc.wait(timeout=20)
    assert res.returncode == 1 and "in use by another process" in res.stderr and "Traceback" not in res.stderr
    assert not (tmp_path / "bk").exists()


# ---------------------------------------------------------------------------------- CLI

def test_cli_backup_and_restore_exit_codes(filled, tmp_path, capsys):
    bk = str(tmp_path / "bk")
    code, out, err = run(capsys, "backup", "--store", str(filled), "--out", bk)
    assert code == 0 and "tables" in out and err == ""
    code, _, err = run(capsys, "backup", "--store", str(filled), "--out", bk)
    assert code == 2 and "already exists" in err
    code, _, err = run(capsys, "backup", "--store", str(tmp_path / "no.duckdb"), "--out", str(tmp_path / "b2"))
    assert code == 1 and "no store at" in err
    target = str(tmp_path / "r.duckdb")
    code, out, _ = run(capsys, "restore", "--from", bk, "--store", target)
    assert code == 0 and "restored" in out
    code, _, err = run(capsys, "restore", "--from", bk, "--store", target)
    assert code == 1 and "--force" in err
    code, out, _ = run(capsys, "restore", "--from", bk, "--store", target, "--force")
    assert code == 0 and "kept as" in out
    code, _, err = run(capsys, "restore", "--from", str(tmp_path / "nothing"), "--store", target)
    assert code == 2 and "does not exist" in err
    code, _, err = run(capsys, "restore", "--from", str(tmp_path), "--store", str(tmp_path / "z.duckdb"))
    assert code == 1 and "manifest.json" in err
    with pytest.raises(SystemExit) as e:  # argparse: --out is required
        main(["backup", "--store", str(filled)])
    assert e.value.code == 2
    capsys.readouterr()
