"""ScreenLab: catalyst screening analysis.

Python API (names are imported lazily, so ``import screenlab`` stays fast)::

    import screenlab as sl
    result = sl.read_campaign("demo_campaign/<campaign folder>")   # validate a folder, zip or xlsx set
    analysis = sl.analyse(result.data)                              # kinetics + plate quality
    analysis.kinetics.rates          # per catalyst x temperature x condition (TOF, TON, enhancement)
    analysis.kinetics.arrhenius      # Ea, Eyring parameters, TOF at the reference temperature
    sl.rank_candidates(analysis.kinetics, analysis.quality, metric="tof")
    store = sl.Store("screenlab.duckdb")                            # the DuckDB store
"""
from __future__ import annotations

import importlib

__version__ = "0.1.0"

_LAZY = {
    "read_campaign": "screenlab.ingest",
    "find_campaigns": "screenlab.ingest",
    "Store": "screenlab.store",
    "analyse": "screenlab.pipeline",
    "Analysis": "screenlab.pipeline",
    "AnalysisSettings": "screenlab.settings",
    "CampaignData": "screenlab.model",
    "rank_candidates": "screenlab.stats.ranking",
    "pareto": "screenlab.stats.pareto",
}

__all__ = sorted(_LAZY) + ["__version__"]


def __getattr__(name: str):
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'screenlab' has no attribute {name!r}")
