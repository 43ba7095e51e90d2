"""Layering: the computational core imports neither streamlit nor duckdb (DEVELOPERS.md)."""
from __future__ import annotations

import pkgutil
import subprocess
import sys

import screenlab

CORE_PREFIXES = ("screenlab.ingest", "screenlab.kinetics", "screenlab.stats", "screenlab.export",
                 "screenlab.model", "screenlab.units", "screenlab.plates", "screenlab.settings",
                 "screenlab.errors", "screenlab.pipeline", "screenlab.viz", "screenlab.flags", "screenlab.schema",
                 "screenlab.demo", "screenlab.synthetic")


def _core_modules() -> list[str]:
    names = []
    for info in pkgutil.walk_packages(screenlab.__path__, "screenlab."):
        if info.name.startswith(CORE_PREFIXES):
            names.append(info.name)
    return sorted(names)


def test_core_modules_exist():
    assert "screenlab.units" in _core_modules()


def test_core_never_imports_streamlit_or_duckdb():
    mods = _core_modules()
    code = (
        "import sys, importlib\n"
        f"for m in {mods!r}:\n"
        "    importlib.import_module(m)\n"
        "bad = [m for m in ('streamlit', 'duckdb') if m in sys.modules]\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"core pulled in: {out.stdout.strip()}"


def test_cli_help_does_not_import_heavy_modules():
    code = (
        "import sys\n"
        "from screenlab.cli import build_parser\n"
        "build_parser()\n"
        "print(','.join(m for m in ('streamlit', 'duckdb', 'scipy', 'plotly') if m in sys.modules))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
