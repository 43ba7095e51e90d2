"""Where the app's store is and whether it may write: read once per script run.

``screenlab app --store PATH --read-only`` passes its options after ``--`` to ``streamlit run``,
so they reach the entrypoint as ``sys.argv[1:]``. Under ``streamlit.testing`` (AppTest) the
process arguments belong to pytest, so the environment is used instead:
``SCREENLAB_STORE`` (path) and ``SCREENLAB_READ_ONLY`` (``1``/``true``/``yes``).
"""
from __future__ import annotations

import argparse
import os
import sys
from dataclasses import dataclass
from pathlib import Path

ENTRYPOINT = Path(__file__).resolve().parent / "streamlit_app.py"
DEFAULT_STORE = "screenlab.duckdb"


@dataclass(frozen=True)
class AppConfig:
    store_path: str
    read_only: bool


def _truthy(text: str | None) -> bool:
    return (text or "").strip().lower() in {"1", "true", "yes", "on"}


def config(argv: list[str] | None = None) -> AppConfig:
    """The store path and mode from the script arguments, else the environment."""
    argv = list(sys.argv if argv is None else argv)
    parser = argparse.ArgumentParser(add_help=False)
    parser.add_argument("--store")
    parser.add_argument("--read-only", action="store_true")
    store, read_only = None, False
    if argv and Path(argv[0]).name == ENTRYPOINT.name:
        try:
            ns, _ = parser.parse_known_args(argv[1:])
            store, read_only = ns.store, ns.read_only
        except SystemExit:  # a malformed argument list: fall back to the environment
            pass
    store = store or os.environ.get("SCREENLAB_STORE") or DEFAULT_STORE
    read_only = read_only or _truthy(os.environ.get("SCREENLAB_READ_ONLY"))
    return AppConfig(store_path=str(Path(store).resolve()), read_only=read_only)
