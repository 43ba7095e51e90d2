"""``screenlab ingest`` and ``screenlab campaigns`` end to end (reader + store), exit codes and messages.

The expected counts come from the synthetic files as read by the stdlib ``csv`` module, not from
screenlab; the lock message format is DuckDB's (https://duckdb.org/docs/2.0/connect/concurrency.html).
"""
from __future__ import annotations

import csv
import io
import json
import os
import subprocess
import sys
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screenlab.cli import main
from screenlab.store import Store

CLI = [sys.executable, "-c", "import sys; from screenlab.cli import main; sys.exit(main())"]


def run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def n_rows(path: Path) -> int:
    with open(path, newline="") as fh:
        return sum(1 for _ in csv.DictReader(fh))


def test_ingest_a_folder_then_again(tmp_path, capsys, write_sample_campaign):
    folder = write_sample_campaign(tmp_path / "c", name="aldol-1")
    db = str(tmp_path / "s.duckdb")
    code, out, err = run(capsys, "ingest", str(folder), "--store", db)
    assert code == 0, err
    assert "aldol-1: new campaign with 2 plates (P1, P2)" in out
    assert f"{n_rows(folder / 'readings.csv'):,} readings" in out and f"{n_rows(folder / 'layout.csv')} wells" in out
    code, out, err = run(capsys, "ingest", str(folder), "--store", db)
    assert code == 0 and "unchanged, nothing to import" in out
    assert len(Store(db).imports()) == 1


def test_ingest_a_folder_of_campaigns_and_a_zip(tmp_path, capsys, write_sample_campaign):
    root = tmp_path / "round1"
    write_sample_campaign(root / "a", name="alpha")
    write_sample_campaign(root / "b", name="beta", plates=("Q1",))
    src = write_sample_campaign(tmp_path / "z", name="gamma", plates=("Z1",))
    with zipfile.ZipFile(root / "gamma.zip", "w") as zf:
        for f in src.iterdir():
            zf.write(f, f"gamma/{f.name}")
    db = str(tmp_path / "s.duckdb")
    code, out, err = run(capsys, "ingest", str(root), "--store", db)
    assert code == 0, err
    assert "3 campaigns: 3 done, 0 with errors" in out
    assert Store(db).campaign_names() == ["alpha", "beta", "gamma"]
    code, out, _ = run(capsys, "campaigns", "--store", db, "--format", "csv")
    rows = list(csv.DictReader(io.StringIO(out)))
    assert [r["campaign"] for r in rows] == ["alpha", "beta", "gamma"]
    assert [int(r["plates"]) for r in rows] == [2, 1, 1]
    assert int(rows[1]["readings"]) == n_rows(root / "b" / "readings.csv")
    assert rows[0]["imported_at"].endswith("Z")
    code, out, _ = run(capsys, "campaigns", "--store", db, "--format", "json")
    data = json.loads(out)
    assert {d["campaign"]: d["wells"] for d in data} == {"alpha": 192, "beta": 96, "gamma": 96}
    code, out, _ = run(capsys, "campaigns", "--store", db)
    assert code == 0 and "alpha" in out and "readings" in out.splitlines()[0]
    # first rounds have no parent: a blank cell, not the word None (the table prints what a
    # chemist reads; csv and json say empty / null)
    assert "None" not in out and "<NA>" not in out


def test_table_output_blanks_missing_cells_whatever_the_column_labels():
    from screenlab.cli.common import emit

    frame = pd.DataFrame({0: ["a", None], "tof_per_h": [1.25, np.nan],
                          ("n", "wells"): pd.array([3, None], dtype="Int64")})
    out = io.StringIO()
    emit(frame, "table", out)
    lines = out.getvalue().splitlines()
    assert lines[1].split() == ["a", "1.25", "3"]
    assert lines[2].strip() == "" and len(lines) == 3          # the second row: every cell missing
    # text left-aligned under its header, numbers right-aligned under theirs, two spaces apart
    head = lines[0]
    assert head.startswith("0  ") and lines[1].startswith("a  ")
    end = head.index("tof_per_h") + len("tof_per_h")
    assert lines[1][:end].endswith("1.25") and lines[1].endswith(" 3") and head.endswith("('n', 'wells')")


def test_bad_file_lists_every_problem_and_writes_nothing(tmp_path, capsys, write_sample_campaign):
    folder = write_sample_campaign(tmp_path / "bad", name="bad-one")
    with open(folder / "readings.csv", "a") as fh:
        fh.write("P1,Z99,x,5\nP9,A1,10,3\n")
    db = tmp_path / "s.duckdb"
    code, out, err = run(capsys, "ingest", str(folder), "--store", str(db))
    assert code == 1
    assert "nothing was written" in err
    assert "readings.csv, row" in err and "column 'well'" in err and "'Z99'" in err
    assert "column 'time'" in err
    assert "Traceback" not in err
    assert Store(db).campaign_names() == []


def test_one_bad_campaign_does_not_stop_the_others(tmp_path, capsys, write_sample_campaign):
    root = tmp_path / "r"
    write_sample_campaign(root / "good", name="good")
    bad = write_sample_campaign(root / "worse", name="worse")
    (bad / "plates.csv").write_text("plate,format,temperature_c\nP1,97,40\nP2,96,50\n")
    db = tmp_path / "s.duckdb"
    code, out, err = run(capsys, "ingest", str(root), "--store", str(db))
    assert code == 1
    assert "good: new campaign" in out and "1 with errors" in out
    assert "plates.csv, row 2, column 'format'" in err
    assert Store(db).campaign_names() == ["good"]


def test_usage_errors_exit_2(tmp_path, capsys, write_sample_campaign):
    code, _, err = run(capsys, "ingest", str(tmp_path / "nowhere"), "--store", str(tmp_path / "s.duckdb"))
    assert code == 2 and "does not exist" in err
    folder = write_sample_campaign(tmp_path / "c")
    code, _, err = run(capsys, "ingest", str(folder), "--store", str(tmp_path / "no" / "dir" / "s.duckdb"))
    assert code == 2 and "does not exist" in err
    with pytest.raises(SystemExit) as exc:
        main(["ingest"])
    assert exc.value.code == 2


def test_several_paths_in_one_call(tmp_path, capsys, write_sample_campaign):
    a = write_sample_campaign(tmp_path / "a", name="alpha")
    b = write_sample_campaign(tmp_path / "b", name="beta", plates=("Q1",))
    (tmp_path / "empty").mkdir()
    db = str(tmp_path / "s.duckdb")
    code, out, err = run(capsys, "ingest", str(a), str(tmp_path / "empty"), str(b), "--store", db)
    assert code == 1                                         # the empty folder is a data error ...
    assert "no campaign" in err
    assert "alpha: new campaign" in out and "beta: new campaign" in out   # ... the others are imported
    assert "3 campaigns: 2 done, 1 with errors" in out
    assert Store(db).campaign_names() == ["alpha", "beta"]
    code, _, err = run(capsys, "ingest", str(a), str(tmp_path / "nowhere"), "--store", str(tmp_path / "t.duckdb"))
    assert code == 2 and "nowhere does not exist" in err   # a missing path: usage error, nothing read
    assert not (tmp_path / "t.duckdb").exists()


def test_folder_without_campaign_is_a_data_error(tmp_path, capsys):
    (tmp_path / "empty").mkdir()
    code, _, err = run(capsys, "ingest", str(tmp_path / "empty"), "--store", str(tmp_path / "s.duckdb"))
    assert code == 1 and "no campaign" in err


def test_changed_plate_refused_then_replaced_and_dry_run(tmp_path, capsys, write_sample_campaign):
    db = str(tmp_path / "s.duckdb")
    folder = write_sample_campaign(tmp_path / "c", name="swap", plates=("P1", "P2"))
    assert run(capsys, "ingest", str(folder), "--store", db)[0] == 0
    write_sample_campaign(folder, name="swap", plates=("P1", "P2"), k_scale=1.5)   # new readings for both plates
    code, out, err = run(capsys, "ingest", str(folder), "--store", db)
    assert code == 1 and "refused" in err and "P1 (readings)" in err and "P2 (readings)" in err
    assert "--replace" in err
    code, out, err = run(capsys, "ingest", str(folder), "--store", db, "--replace", "--dry-run")
    assert code == 0 and "dry run, nothing written" in out
    assert len(Store(db).imports()) == 1
    code, out, err = run(capsys, "ingest", str(folder), "--store", db, "--replace")
    assert code == 0 and "replaced 2 plates (P1, P2)" in out
    hist = Store(db).imports("swap")
    assert hist["status"].tolist() == ["imported", "replaced"]
    # a new plate in the same folder is added
    write_sample_campaign(folder, name="swap", plates=("P1", "P2", "P3"), k_scale=1.5)
    code, out, _ = run(capsys, "ingest", str(folder), "--store", db)
    assert code == 0 and "added 1 plate (P3)" in out


def test_a_dry_run_creates_no_store(tmp_path, capsys, write_sample_campaign):
    """A dry run against a store file that does not exist yet checks the folder as new and leaves no
    file behind; the store object can import for real afterwards (its schema checked on the file)."""
    db = tmp_path / "new.duckdb"
    folder = write_sample_campaign(tmp_path / "c", name="fresh")
    code, out, _ = run(capsys, "ingest", str(folder), "--store", str(db), "--dry-run")
    assert code == 0 and "dry run, nothing written" in out and "would be new campaign" in out
    assert not list(tmp_path.glob("new.duckdb*"))
    from screenlab.ingest import read_campaign

    store = Store(db)
    assert store.import_campaign(read_campaign(folder), dry_run=True).status == "dry_run"
    assert not db.exists()
    assert store.import_campaign(read_campaign(folder)).status == "imported" and store.campaign_names() == ["fresh"]


def test_store_from_the_environment(tmp_path, capsys, monkeypatch, write_sample_campaign):
    monkeypatch.setenv("SCREENLAB_STORE", str(tmp_path / "env.duckdb"))
    folder = write_sample_campaign(tmp_path / "c", name="envy", plates=("P1",))
    assert run(capsys, "ingest", str(folder))[0] == 0
    assert (tmp_path / "env.duckdb").exists()
    code, out, _ = run(capsys, "campaigns", "--format", "json")
    assert json.loads(out)[0]["campaign"] == "envy"


def test_campaigns_without_a_store(tmp_path, capsys):
    code, _, err = run(capsys, "campaigns", "--store", str(tmp_path / "none.duckdb"))
    assert code == 1 and "no store at" in err


def test_busy_store_from_a_real_subprocess(tmp_path, write_sample_campaign):
    db = tmp_path / "busy.duckdb"
    folder = write_sample_campaign(tmp_path / "c", name="busy", plates=("P1",))
    Store(db).campaign_names()
    holder = subprocess.Popen(
        [sys.executable, "-c", "import sys, duckdb; con = duckdb.connect(sys.argv[1]); print('ready', flush=True); "
         "sys.stdin.read()", str(db)], stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "ready"
        env = dict(os.environ, SCREENLAB_BUSY_TIMEOUT_S="0.5")
        res = subprocess.run(CLI + ["ingest", str(folder), "--store", str(db)], capture_output=True, text=True,
                             env=env, timeout=120)
    finally:
        holder.stdin.close()
        holder.wait(timeout=20)
    assert res.returncode == 1
    assert f"in use by another process (PID {holder.pid})" in res.stderr
    assert "Traceback" not in res.stderr
    # once the other process is gone the same command works
    res = subprocess.run(CLI + ["ingest", str(folder), "--store", str(db)], capture_output=True, text=True,
                         timeout=120)
    assert res.returncode == 0 and "busy: new campaign" in res.stdout


def test_a_mistyped_plate_id_is_one_line_of_the_message_with_its_rows(tmp_path, capsys, write_sample_campaign):
    """A plate id mistyped in readings.csv is a problem on every reading of that plate; the message
    gives it once, with its rows as runs, so that the other problems are not buried under it (the
    problem list itself keeps one entry per row)."""
    from screenlab.errors import ValidationError
    from screenlab.ingest import read_campaign

    folder = write_sample_campaign(tmp_path / "typo", name="typo")
    text = (folder / "readings.csv").read_text().splitlines()
    bad_rows = [i + 1 for i, line in enumerate(text) if line.startswith("P1,")]     # 1-based, header = row 1
    text = [("PI," + line[3:]) if line.startswith("P1,") else line for line in text]
    (folder / "readings.csv").write_text("\n".join(text) + "\n")
    with open(folder / "readings.csv", "a") as fh:
        fh.write("P2,Z99,1,5\n")                                                   # an unrelated problem after them
    with pytest.raises(ValidationError) as exc:
        read_campaign(folder)
    unknown = [p for p in exc.value.problems if "unknown plate" in p.message]
    assert sorted(p.row for p in unknown) == bad_rows and len(bad_rows) > 50       # every row still listed
    db = tmp_path / "s.duckdb"
    code, _, err = run(capsys, "ingest", str(folder), "--store", str(db))
    lines = [ln for ln in err.splitlines() if ln.startswith("  - ")]
    typo = [ln for ln in lines if "unknown plate" in ln]
    assert code == 1 and len(typo) == 1, lines[:5]
    assert f"({len(bad_rows)} rows)" in typo[0] and "'PI'" in typo[0]
    assert any("'Z99'" in ln for ln in lines) and "... and" not in err            # the other problem is shown
    assert Store(db).campaign_names() == []


def test_problem_groups_state_their_rule():
    """The rule in plain lines: same file, column, value and message -> one group, its rows
    ascending; a problem of a whole file (no row) alone; runs of consecutive rows joined."""
    from screenlab.errors import Problem, group_problems, row_ranges

    probs = [Problem("r.csv", 5, "plate", "PI", "unknown plate"), Problem("r.csv", 2, "plate", "PI", "unknown plate"),
             Problem("r.csv", 3, "plate", "PI", "unknown plate"), Problem("r.csv", 4, "well", "Z9", "not a well"),
             Problem("l.csv", 3, "plate", "PI", "unknown plate"), Problem("r.csv", None, None, None, "empty"),
             Problem("r.csv", None, None, None, "empty"), Problem("r.csv", 9, "plate", "PI", "unknown plate")]
    groups = group_problems(probs)
    assert [(g.first.file, g.first.column, g.rows) for g in groups] == [
        ("r.csv", "plate", (2, 3, 5, 9)), ("r.csv", "well", (4,)), ("l.csv", "plate", (3,)),
        ("r.csv", None, ()), ("r.csv", None, ())]
    assert groups[0].first.row == 2
    assert str(groups[0]) == "r.csv, rows 2–3, 5, 9 (4 rows), column 'plate': unknown plate (value 'PI')"
    assert str(groups[1]) == str(probs[3])                                       # a single row reads as before
    assert row_ranges([1, 2, 3, 7, 9, 10]) == "1–3, 7, 9–10"
    assert row_ranges(list(range(2, 40, 2)), most=3) == "2, 4, 6, and 16 more"
