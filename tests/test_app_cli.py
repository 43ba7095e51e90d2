"""The app launcher: ``screenlab app`` / ``screenlab demo`` options and the streamlit arguments.

One test starts ``screenlab demo`` as a newcomer would (browser mode, no Streamlit settings in the
home folder); the browser test opens the pages.
"""
from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
import tomllib
import urllib.request
from pathlib import Path

import pytest

from screenlab.cli import app_cmd
from screenlab.app import runtime

ROOT = Path(__file__).resolve().parent.parent


def test_app_help_runs_without_a_server():
    code = "import sys; from screenlab.cli import main; sys.exit(main(sys.argv[1:]))"
    out = subprocess.run([sys.executable, "-c", code, "app", "--help"], capture_output=True, text=True,
                         timeout=60, cwd=ROOT)
    assert out.returncode == 0, out.stderr
    for word in ("--store", "--port", "--read-only", "127.0.0.1"):
        assert word in out.stdout


def test_demo_help_lists_its_options(capsys):
    from screenlab.cli import main

    with pytest.raises(SystemExit) as exc:
        main(["demo", "--help"])
    assert exc.value.code == 0
    text = capsys.readouterr().out
    assert "--no-browser" in text and "--port" in text and app_cmd.DEFAULT_DEMO_STORE in text


def test_argv_binds_locally_headless_and_quiet(tmp_path):
    args = app_cmd.streamlit_argv(tmp_path / "s.duckdb", port=8765, read_only=True)
    assert args[:2] == ["run", str(app_cmd.ENTRYPOINT)]
    opts = dict(zip(args[2:args.index("--"):2], args[3:args.index("--"):2]))
    assert opts["--server.address"] == "127.0.0.1"
    assert opts["--server.port"] == "8765"
    assert opts["--server.headless"] == "true"
    assert opts["--browser.gatherUsageStats"] == "false"
    assert opts["--server.fileWatcherType"] == "none"
    assert opts["--server.showEmailPrompt"] == "false"     # nothing asked on the terminal
    # the app's own options come after "--"
    assert args[args.index("--") + 1:] == ["--store", str((tmp_path / "s.duckdb").resolve()), "--read-only"]
    assert app_cmd.ENTRYPOINT.is_file()


def test_demo_opens_a_browser_unless_told_not_to(tmp_path):
    args = app_cmd.streamlit_argv(tmp_path / "d.duckdb", port=8501, open_browser=True)
    assert args[args.index("--server.headless") + 1] == "false"
    assert "--read-only" not in args


@pytest.mark.parametrize("bad", ["0", "70000", "abc"])
def test_bad_port_is_a_usage_error(bad, capsys):
    from screenlab.cli import main

    with pytest.raises(SystemExit) as exc:
        main(["app", "--port", bad])
    assert exc.value.code == 2
    assert "port" in capsys.readouterr().err


def test_read_only_on_a_missing_store_is_a_clear_error(tmp_path, capsys):
    from screenlab.cli import main

    code = main(["app", "--store", str(tmp_path / "missing.duckdb"), "--read-only"])
    assert code == 2
    err = capsys.readouterr().err
    assert "missing.duckdb" in err and "Traceback" not in err


def test_runtime_reads_script_arguments_then_environment(tmp_path, monkeypatch):
    monkeypatch.delenv("SCREENLAB_STORE", raising=False)
    monkeypatch.delenv("SCREENLAB_READ_ONLY", raising=False)
    cfg = runtime.config([str(runtime.ENTRYPOINT), "--store", str(tmp_path / "a.duckdb"), "--read-only"])
    assert cfg.store_path == str((tmp_path / "a.duckdb").resolve()) and cfg.read_only
    # under pytest / AppTest the process arguments are not the app's: the environment decides
    monkeypatch.setenv("SCREENLAB_STORE", str(tmp_path / "b.duckdb"))
    cfg = runtime.config(["pytest", "--store", "ignored"])
    assert cfg.store_path == str((tmp_path / "b.duckdb").resolve()) and not cfg.read_only
    monkeypatch.setenv("SCREENLAB_READ_ONLY", "yes")
    assert runtime.config(["pytest"]).read_only


def test_shipped_config_is_local_and_offline():
    for path in (ROOT / "screenlab" / "app" / ".streamlit" / "config.toml", ROOT / ".streamlit" / "config.toml"):
        cfg = tomllib.loads(path.read_text())
        assert cfg["server"]["address"] == "127.0.0.1"
        assert cfg["server"]["headless"] is True
        assert cfg["server"]["fileWatcherType"] == "none"
        assert cfg["browser"]["gatherUsageStats"] is False
        # no fonts or other assets fetched from the internet
        assert "http" not in path.read_text().replace("127.0.0.1", "")


def test_package_data_ships_the_app_files():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())
    patterns = project["tool"]["setuptools"]["package-data"]["screenlab"]
    assert "app/.streamlit/*.toml" in patterns and "app/app_pages/*.py" in patterns and "app/*.py" in patterns


@pytest.mark.parametrize("module", ["screenlab", "screenlab.cli"])
def test_python_dash_m_runs_the_command_line_without_path(module):
    # a venv's interpreter called by its full path, with no venv bin/ on PATH (the README's commands)
    out = subprocess.run([sys.executable, "-m", module, "--help"], capture_output=True, text=True,
                         timeout=60, cwd=ROOT, env={"PATH": "/usr/bin:/bin"})
    assert out.returncode == 0, out.stderr
    assert "usage: screenlab" in out.stdout and "ingest" in out.stdout


def test_demo_in_browser_mode_serves_without_asking_anything_on_the_terminal(tmp_path):
    # a fresh machine: no ~/.streamlit (HOME is empty), a terminal that never answers (stdin a
    # pipe nobody writes to); BROWSER=true makes Python's webbrowser run /bin/true instead of a
    # browser. Streamlit's first-run e-mail prompt would block the server here.
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    (tmp_path / "home").mkdir()
    env = dict(os.environ, HOME=str(tmp_path / "home"), BROWSER="true")
    code = "import sys; from screenlab.cli import main; sys.exit(main(sys.argv[1:]))"
    proc = subprocess.Popen([sys.executable, "-c", code, "demo", "--store", str(tmp_path / "demo.duckdb"),
                             "--port", str(port)], stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                            stderr=subprocess.STDOUT, text=True, env=env, cwd=tmp_path)
    healthy = False
    try:
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and proc.poll() is None and not healthy:
            try:
                with urllib.request.urlopen(f"http://127.0.0.1:{port}/_stcore/health", timeout=2) as r:
                    healthy = r.read().decode().strip() == "ok"
            except OSError:
                time.sleep(0.5)
    finally:
        proc.terminate()
        try:
            out, _ = proc.communicate(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
            out, _ = proc.communicate()
    assert healthy, out[-2000:]
    assert "Email:" not in out and (tmp_path / "demo.duckdb").is_file()
