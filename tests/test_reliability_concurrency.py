"""Real processes on one store: a reader (the app) during an import, two imports at once, and
``kill -9`` at several moments of a large import.

Outside references used here:
* DuckDB documentation (https://duckdb.org/docs/2.0/connect/concurrency.html): one read-write
  process or several read-only ones per file; the others get "Could not set lock ... PID n".
* DuckDB crash safety (https://duckdb.org/docs/1.5/sql/statements/checkpoint.html, storage
  internals): committed transactions live in the .wal until a checkpoint and are replayed on the
  next open; an uncommitted transaction leaves nothing.
* Expected counts come from the campaign files read with the stdlib ``csv`` module, not screenlab.
* POSIX: SIGKILL cannot be caught, so the child gets no chance to clean up (signal(7)).
"""
from __future__ import annotations

import csv
import os
import random
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

from screenlab.store import Store
from screenlab.synthetic import SyntheticSpec, write_campaign_folder

CLI = [sys.executable, "-c", "import sys; from screenlab.cli import main; sys.exit(main())"]


def csv_count(path: Path) -> int:
    with open(path, newline="", encoding="utf-8") as fh:
        return sum(1 for _ in csv.DictReader(fh))


def expected(folder: Path) -> dict:
    return {"plates": csv_count(folder / "plates.csv"), "wells": csv_count(folder / "layout.csv"),
            "readings": csv_count(folder / "readings.csv"), "catalysts": csv_count(folder / "catalysts.csv")}


def stored(store: Store, name: str) -> dict | None:
    """Counts of one campaign as stored (None when absent)."""
    frame = store.campaigns()
    row = frame[frame["campaign"] == name]
    if row.empty:
        return None
    r = row.iloc[0]
    return {k: int(r[k]) for k in ("plates", "wells", "readings", "catalysts")}


def campaign(tmp: Path, name: str, **kw) -> Path:
    spec = dict(n_plates=2, fmt=96, n_times=6, seed=abs(hash(name)) % 1000)
    spec.update(kw)
    return write_campaign_folder(tmp / name, SyntheticSpec(name=name, **spec))


def ingest(folder: Path, store: Path, timeout_s: float | None = None) -> subprocess.Popen:
    env = dict(os.environ)
    if timeout_s is not None:
        env["SCREENLAB_BUSY_TIMEOUT_S"] = str(timeout_s)
    return subprocess.Popen(CLI + ["ingest", str(folder), "--store", str(store)], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env)


# ---------------------------------------------------------------------------------- app + ingest

READER = textwrap.dedent("""
    import sys, time
    from screenlab.store import Store
    s = Store(sys.argv[1], read_only=True)
    n, errors, end = 0, [], time.monotonic() + float(sys.argv[2])
    while time.monotonic() < end:
        try:
            s.campaigns(); s.data_version(); n += 1
        except Exception as exc:  # anything a page would show
            errors.append(f"{type(exc).__name__}: {exc}")
        time.sleep(0.05)  # a user clicking: a few reads a second
    print(n, len(errors)); print("\\n".join(errors[:3]), file=sys.stderr)
""")


def test_import_lands_while_the_app_keeps_reading(tmp_path):
    db = tmp_path / "s.duckdb"
    first = campaign(tmp_path, "first")
    Store(db).import_campaign(__import__("screenlab.ingest", fromlist=["read_campaign"]).read_campaign(first))
    reader = subprocess.Popen([sys.executable, "-c", READER, str(db), "4"], stdout=subprocess.PIPE,
                              stderr=subprocess.PIPE, text=True)
    time.sleep(1.0)  # the reader is polling
    folder = campaign(tmp_path, "second", n_plates=3)
    res = ingest(folder, db)
    out, err = res.communicate(timeout=120)
    r_out, r_err = reader.communicate(timeout=120)
    assert res.returncode == 0, err
    assert "second: new campaign" in out and "Traceback" not in err
    assert stored(Store(db), "second") == expected(folder)
    n_reads, n_errors = map(int, r_out.split())
    assert n_reads > 5 and n_errors == 0, r_err  # the reader waited for the lock instead of failing


# ---------------------------------------------------------------------------------- two imports

@pytest.mark.parametrize("busy_timeout", [10.0, 0.0])
def test_two_imports_at_once_both_land_or_one_is_refused_cleanly(tmp_path, busy_timeout):
    db = tmp_path / "s.duckdb"
    Store(db).campaign_names()  # the schema exists, so both processes race for the data writes
    a = campaign(tmp_path, "alpha", n_plates=3)
    b = campaign(tmp_path, "beta", n_plates=3)
    pa, pb = ingest(a, db, busy_timeout), ingest(b, db, busy_timeout)
    results = {name: p.communicate(timeout=120) + (p.returncode,) for name, p in (("alpha", pa), ("beta", pb))}
    store = Store(db)
    landed = 0
    for name, folder in (("alpha", a), ("beta", b)):
        out, err, code = results[name]
        assert "Traceback" not in err
        got = stored(store, name)
        if code == 0:
            assert got == expected(folder), name
            landed += 1
        else:
            assert code == 1 and "in use by another process" in err, err
            assert got is None, f"{name}: refused but partly stored: {got}"
    if busy_timeout >= 10:
        assert landed == 2
    assert landed >= 1  # whoever got the lock first finished
    assert store.table_counts()["imports"] == landed


def test_the_same_campaign_from_two_processes_is_stored_once(tmp_path):
    db = tmp_path / "s.duckdb"
    Store(db).campaign_names()
    a = campaign(tmp_path, "same", n_plates=3)
    procs = [ingest(a, db, 10.0), ingest(a, db, 10.0)]
    outs = [p.communicate(timeout=120) for p in procs]
    assert [p.returncode for p in procs] == [0, 0], outs
    statuses = sorted("new campaign" in o for o, _ in outs)
    assert statuses == [False, True]  # one imported it, the other found it unchanged
    assert any("unchanged" in o for o, _ in outs)
    store = Store(db)
    assert stored(store, "same") == expected(a)
    assert store.imports()["status"].tolist() == ["imported"]


# ---------------------------------------------------------------------------------- kill -9

@pytest.fixture(scope="module")
def big(tmp_path_factory) -> tuple[Path, dict]:
    """About 50,000 readings: large enough that the import also runs the post-import CHECKPOINT."""
    folder = write_campaign_folder(tmp_path_factory.mktemp("big") / "big",
                                   SyntheticSpec(name="big", n_plates=6, fmt=384, n_times=22, seed=3))
    return folder, expected(folder)


def _renamed(folder: Path, dst: Path, name: str) -> Path:
    dst.mkdir()
    for p in folder.iterdir():
        data = p.read_bytes()
        if p.name == "campaign.toml":
            data = data.replace(b'name = "big"', f'name = "{name}"'.encode())
        (dst / p.name).write_bytes(data)
    return dst


# moments: a fixed delay after start, or a delay after the WAL file appears (the write phase)
MOMENTS = [("start", 0.4), ("wal", 0.0), ("wal", 0.1), ("random", None)]


@pytest.mark.slow
@pytest.mark.parametrize("when,delay", MOMENTS, ids=[f"{w}+{d}" for w, d in MOMENTS])
def test_kill_9_during_a_large_import_leaves_a_clean_store(tmp_path, big, when, delay):
    folder, want = big
    db = tmp_path / "k.duckdb"
    wal = Path(str(db) + ".wal")
    Store(db).import_campaign(__import__("screenlab.ingest", fromlist=["read_campaign"]).read_campaign(
        campaign(tmp_path, "before", n_plates=1)))
    before = Store(db).table_counts()
    src = _renamed(folder, tmp_path / "victim", "victim")
    proc = ingest(src, db)
    t0 = time.monotonic()
    if when == "start":
        time.sleep(delay)
    elif when == "wal":
        while not wal.exists() and proc.poll() is None and time.monotonic() - t0 < 60:
            time.sleep(0.001)
        time.sleep(delay)
    else:
        time.sleep(random.Random(os.getpid()).uniform(0.05, 1.5))
    finished_first = proc.poll() is not None   # poll() reaps a finished child: kill only a live one
    if not finished_first:
        try:
            os.kill(proc.pid, signal.SIGKILL)
        except ProcessLookupError:            # ended between poll() and kill()
            finished_first = True
    proc.communicate(timeout=60)

    store = Store(db)  # opens cleanly (the WAL, if any, is replayed or discarded)
    got = stored(store, "victim")
    assert got is None or got == want, f"partial campaign after kill: {got}"
    if finished_first:
        assert got == want
    counts = store.table_counts()
    if got is None:
        assert counts == before  # nothing of the killed import is left
    else:
        data = store.load_campaign("victim")
        assert len(data.readings) == want["readings"] and data.readings["value"].notna().all()
    # and the store still takes imports: the killed one again (once; it takes a few seconds), then another
    if when == "wal" and delay == 0.0:
        again = ingest(src, db)
        out, err = again.communicate(timeout=120)
        assert again.returncode == 0, err
        assert stored(store, "victim") == want
    fresh = ingest(campaign(tmp_path, "after", n_plates=1), db)
    assert fresh.wait(timeout=120) == 0
    assert stored(store, "after") is not None and stored(store, "before") is not None
