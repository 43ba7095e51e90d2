"""The command line as its own process (``python -m screenlab``, the console script's entry
``screenlab.cli.console_main``): it ends without the interpreter's teardown where nothing is left
to finish, so these check what must survive that: the whole output through a pipe, the exit
codes, exit handlers, and a store written by one process and read by the next."""
from __future__ import annotations

import json
import subprocess
import sys
import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _screenlab(*args, cwd, check=True):
    out = subprocess.run([sys.executable, "-W", "ignore", "-m", "screenlab", *map(str, args)], capture_output=True,
                         text=True, timeout=300, cwd=cwd)
    if check:
        assert out.returncode == 0, out.stderr
    return out


def test_console_script_is_the_process_entry():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())
    assert project["project"]["scripts"]["screenlab"] == "screenlab.cli:console_main"


def test_a_store_written_by_one_process_is_complete_for_the_next(tmp_path, write_sample_campaign):
    folder = write_sample_campaign(tmp_path / "campaign", name="proc-check")
    store = tmp_path / "s.duckdb"
    _screenlab("ingest", folder, "--store", store, cwd=tmp_path)
    # a second process reads everything the first wrote (the write was committed and closed)
    rates = json.loads(_screenlab("rates", "--store", store, "--campaign", "proc-check", "--format", "json",
                                  cwd=tmp_path).stdout)
    assert len(rates) > 0
    csv = _screenlab("rank", "--store", store, "--campaign", "proc-check", "--format", "csv", cwd=tmp_path).stdout
    lines = csv.strip().splitlines()
    # every line of the output reached the pipe: a header and one row per catalyst, in one piece
    from screenlab.store import Store

    n_catalysts = len(Store(store, read_only=True).load_campaign("proc-check").catalysts)
    assert lines[0].startswith("rank,catalyst") and len(lines) == 1 + n_catalysts
    assert csv.endswith("\n")


def test_exit_codes_survive_the_early_end(tmp_path):
    missing = _screenlab("rank", "--store", tmp_path / "none.duckdb", "--campaign", "x", cwd=tmp_path, check=False)
    assert missing.returncode != 0 and "does not exist" in missing.stderr
    usage = _screenlab("rank", cwd=tmp_path, check=False)
    assert usage.returncode == 2 and "--campaign" in usage.stderr
    assert _screenlab("--version", cwd=tmp_path).stdout.startswith("screenlab ")


def test_exit_handlers_still_run(tmp_path):
    # atexit handlers registered by the work (here by a wrapper) run before the process ends, on
    # a command that returns its exit code (the early end) as well as on one that raises SystemExit
    marker = tmp_path / "ran.txt"
    for argv, code_expected in ((["rank", "--store", str(tmp_path / "none.duckdb"), "--campaign", "x"], 2),
                                (["--version"], 0)):
        marker.unlink(missing_ok=True)
        code = ("import atexit, pathlib, sys\n"
                f"atexit.register(lambda: pathlib.Path({str(marker)!r}).write_text('yes'))\n"
                f"sys.argv = ['screenlab', *{argv!r}]\n"
                "from screenlab.cli import console_main\n"
                "console_main()\n")
        out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, cwd=tmp_path)
        assert out.returncode == code_expected, out.stderr
        assert marker.read_text() == "yes"


def _shell(command: str, cwd):
    env = {k: v for k, v in __import__("os").environ.items() if k != "PYTHONUNBUFFERED"}  # buffered, as usual
    return subprocess.run(["sh", "-c", command], capture_output=True, text=True, timeout=300, cwd=cwd, env=env)


def test_output_that_cannot_be_written_is_an_error(tmp_path, write_sample_campaign):
    # a full disk (Linux's /dev/full): the lost output is reported and the status is Python's 120
    import pytest

    if not Path("/dev/full").exists():
        pytest.skip("no /dev/full on this system")
    folder = write_sample_campaign(tmp_path / "campaign", name="proc-full")
    store = tmp_path / "s.duckdb"
    _screenlab("ingest", folder, "--store", store, cwd=tmp_path)
    out = _shell(f"{sys.executable} -W ignore -m screenlab campaigns --store {store} > /dev/full", cwd=tmp_path)
    assert out.returncode == 120 and "cannot write the output" in out.stderr, (out.returncode, out.stderr)


def test_a_closed_stdout_or_a_profiler_take_the_usual_ending(tmp_path, write_sample_campaign):
    folder = write_sample_campaign(tmp_path / "campaign", name="proc-close")
    store = tmp_path / "s.duckdb"
    _screenlab("ingest", folder, "--store", store, cwd=tmp_path)
    # started with stdout closed (cron, >&-): the backup is written and the status is 0
    closed = _shell(f"{sys.executable} -W ignore -m screenlab backup --store {store} --out {tmp_path / 'bk'} >&-",
                    cwd=tmp_path)
    assert closed.returncode == 0, closed.stderr
    assert any((tmp_path / "bk").iterdir())
    # a profiler writes its results after the program returns: the early end must leave it room
    prof = tmp_path / "rank.prof"
    run = subprocess.run([sys.executable, "-W", "ignore", "-m", "cProfile", "-o", str(prof), "-m", "screenlab",
                          "rank", "--store", str(store), "--campaign", "proc-close", "--format", "csv"],
                         capture_output=True, text=True, timeout=300, cwd=tmp_path)
    assert run.returncode == 0, run.stderr
    assert prof.stat().st_size > 0


def test_a_command_collects_garbage_in_larger_batches_and_the_app_server_as_it_was_started(tmp_path, monkeypatch):
    # the command's process: the youngest generation is collected after COMMAND_GC_THRESHOLD net
    # allocations (the start-up's long-lived module objects are not walked again and again)
    import gc

    from screenlab import cli
    from screenlab.cli import app_cmd

    seen = tmp_path / "threshold.json"
    code = ("import atexit, gc, json, pathlib, sys\n"
            "gc.set_threshold(900, 11, 12)\n"
            f"atexit.register(lambda: pathlib.Path({str(seen)!r}).write_text(json.dumps(gc.get_threshold())))\n"
            "sys.argv = ['screenlab', '--version']\n"
            "from screenlab.cli import console_main\n"
            "console_main()\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120, cwd=tmp_path)
    assert out.returncode == 0, out.stderr
    assert json.loads(seen.read_text()) == [cli.COMMAND_GC_THRESHOLD, 11, 12]
    # the app server runs for hours: it starts with the thresholds the command replaced ...
    from streamlit.web import cli as stcli

    got = []
    monkeypatch.setattr(stcli, "main", lambda **kw: got.append(gc.get_threshold()))
    before = gc.get_threshold()
    try:
        gc.set_threshold(900, 11, 12)
        cli.command_gc_threshold()
        assert gc.get_threshold() == (cli.COMMAND_GC_THRESHOLD, 11, 12)
        assert app_cmd._launch(["run", "x.py"]) == 0
        # ... and one launched from main() in-process (no command threshold) leaves them alone
        gc.set_threshold(901, 9, 9)
        assert app_cmd._launch(["run", "x.py"]) == 0
    finally:
        gc.set_threshold(*before)
    assert got == [(900, 11, 12), (901, 9, 9)]
