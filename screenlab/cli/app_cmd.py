"""``screenlab app`` and ``screenlab demo``: open the browser app on a store.

Both start Streamlit through its public command line (``streamlit.web.cli.main``) on the
packaged entrypoint ``screenlab/app/streamlit_app.py``. The options that keep the app local and
quiet are passed as flags, so a user's own Streamlit config cannot override them: bound to
127.0.0.1, headless, no usage statistics, no file watcher. The store path and ``--read-only``
reach the app after ``--``.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from screenlab.cli.common import add_store_option, resolve_store_path

DEFAULT_PORT = 8501
DEFAULT_DEMO_STORE = "screenlab-demo.duckdb"
ENTRYPOINT = Path(__file__).resolve().parent.parent / "app" / "streamlit_app.py"


def _port(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"port must be a whole number, got {text!r}") from None
    if not 1 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"port must be between 1 and 65535, got {value}")
    return value


def register(sub) -> None:
    p = sub.add_parser("app", help="open the browser app on a store",
                       description="Open the ScreenLab browser app on a store. The server listens on "
                       "127.0.0.1 only; open the printed address in a browser.")
    add_store_option(p)
    p.add_argument("--port", type=_port, default=DEFAULT_PORT, metavar="N",
                   help=f"port to listen on (default {DEFAULT_PORT})")
    p.add_argument("--read-only", action="store_true",
                   help="open the store read-only and hide the Import page (others can read the "
                   "same store at the same time)")
    p.set_defaults(func=run_app)

    d = sub.add_parser("demo", help="build the demo store (if missing) and open the app on it",
                       description="Build a small demo campaign store (only if the file is missing) "
                       "and open the browser app on it.")
    d.add_argument("--store", metavar="PATH", default=DEFAULT_DEMO_STORE,
                   help=f"demo store file (default ./{DEFAULT_DEMO_STORE})")
    d.add_argument("--port", type=_port, default=DEFAULT_PORT, metavar="N",
                   help=f"port to listen on (default {DEFAULT_PORT})")
    d.add_argument("--no-browser", action="store_true",
                   help="do not open a browser window (for scripts and CI)")
    d.set_defaults(func=run_demo)


def streamlit_argv(store: Path, *, port: int, read_only: bool = False,
                   open_browser: bool = False) -> list[str]:
    """The ``streamlit run`` arguments (without the program name) for the packaged app."""
    args = [
        "run", str(ENTRYPOINT),
        "--server.address", "127.0.0.1",
        "--server.port", str(port),
        "--server.headless", "false" if open_browser else "true",
        "--server.fileWatcherType", "none",
        "--server.runOnSave", "false",
        "--browser.gatherUsageStats", "false",
        # no first-run e-mail prompt: it waits for a reply on the terminal before the server starts
        "--server.showEmailPrompt", "false",
        "--browser.serverAddress", "127.0.0.1",
        "--global.showWarningOnDirectExecution", "false",
        "--",
        "--store", str(Path(store).resolve()),
    ]
    if read_only:
        args.append("--read-only")
    return args


def _launch(args: list[str]) -> int:
    from streamlit.web import cli as stcli

    from screenlab.cli import restore_gc_threshold

    restore_gc_threshold()      # a server that runs for hours: the collector settings it was started with

    try:
        stcli.main(args=args, prog_name="streamlit", standalone_mode=True)
    except SystemExit as exc:  # click ends with SystemExit; pass its code on
        code = exc.code
        return code if isinstance(code, int) else (0 if code is None else 1)
    return 0


def run_app(args) -> int:
    from screenlab.errors import UsageError

    store = resolve_store_path(args.store)
    if args.read_only and not store.exists():
        raise UsageError(f"no store at {store}; import a campaign first (screenlab ingest) "
                         "or try the demo (screenlab demo)")
    print(f"ScreenLab app on {store} at http://127.0.0.1:{args.port}"
          + (" (read-only)" if args.read_only else ""), flush=True)
    return _launch(streamlit_argv(store, port=args.port, read_only=args.read_only))


def run_demo(args) -> int:
    store = Path(args.store)
    if store.exists():
        print(f"using the existing demo store {store} (delete it to rebuild)", flush=True)
    else:
        from screenlab.demo import build_demo_store

        print(f"building the demo store {store} ...", flush=True)
        build_demo_store(store)
    print(f"ScreenLab demo on {store} at http://127.0.0.1:{args.port}", flush=True)
    return _launch(streamlit_argv(store, port=args.port, open_browser=not args.no_browser))
