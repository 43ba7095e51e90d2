"""Shared fixtures. Keep them small and generic; add your own below.

``demo_store``: a store holding the demo campaigns, built once per test session in a temporary
folder (about 6 s). Tests must not write to it; copy it (``demo_store_copy``) to write.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import pytest


@pytest.fixture(scope="session")
def demo_store(tmp_path_factory) -> Path:
    from screenlab.demo import build_demo_store

    path = tmp_path_factory.mktemp("demo-store") / "demo.duckdb"
    build_demo_store(path)
    return path


@pytest.fixture()
def demo_store_copy(demo_store, tmp_path) -> Path:
    """A private, writable copy of the demo store (the .wal, if any, goes with it)."""
    dst = tmp_path / "demo-copy.duckdb"
    shutil.copy2(demo_store, dst)
    wal = Path(str(demo_store) + ".wal")
    if wal.exists():
        shutil.copy2(wal, Path(str(dst) + ".wal"))
    return dst
