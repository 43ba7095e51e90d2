"""Every flag code ScreenLab sets, with one plain sentence each (for the app, exports and docs).

Each module that sets flags owns a module-level ``FLAGS`` dict; this module only gathers them.
"""
from __future__ import annotations

import importlib

_FLAG_MODULES = (
    "screenlab.kinetics.rates",
    "screenlab.kinetics.turnover",
    "screenlab.kinetics.arrhenius",
    "screenlab.kinetics.orders",
    "screenlab.stats.quality",
    "screenlab.stats.candidates",
)


def flag_help() -> dict[str, str]:
    """code -> sentence, over every module that defines ``FLAGS``."""
    out: dict[str, str] = {}
    for name in _FLAG_MODULES:
        out.update(getattr(importlib.import_module(name), "FLAGS", {}))
    return out

