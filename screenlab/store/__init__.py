"""The DuckDB store (the only package that imports duckdb). :class:`Store` (:mod:`screenlab.store.db`)
is the public face; see its module docstring for the modules behind it. Recorded decisions, round
links and cross-campaign catalyst look-ups: :mod:`screenlab.store.decisions`; readings added to
planned plates: :mod:`screenlab.store.addreadings`; backups: :mod:`screenlab.store.backup`."""
from __future__ import annotations

from importlib import import_module

#: the package's public names and the module each lives in: imported when first asked for, so a
#: command that only reads (``Store.load_campaign``) does not load the import planner and writer
_EXPORTS = {"add_readings": "addreadings", "campaigns_awaiting_readings": "addreadings",
            "plate_readings": "addreadings", "BUILTIN_EXTENSIONS": "connection", "Store": "db",
            "plate_fingerprints": "fingerprints", "ImportPlan": "planner", "ImportRefusedError": "planner",
            "ImportReport": "planner", "plan_import": "planner"}

__all__ = sorted(_EXPORTS)


#: the package's modules, reachable as attributes after ``import screenlab.store`` (as when the
#: package imported them all)
_MODULES = ("addreadings", "backup", "connection", "db", "decisions", "fingerprints", "planner", "queries",
            "storage", "writer")


def __getattr__(name: str):
    if name in _EXPORTS:
        value = getattr(import_module(f"screenlab.store.{_EXPORTS[name]}"), name)
    elif name in _MODULES:
        value = import_module(f"screenlab.store.{name}")
    else:
        raise AttributeError(f"module 'screenlab.store' has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS) | set(_MODULES))
