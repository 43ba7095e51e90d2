"""The DuckDB store (the only package that imports duckdb). :class:`Store` (:mod:`screenlab.store.db`)
is the public face; see its module docstring for the modules behind it. Recorded decisions, round
links and cross-campaign catalyst look-ups: :mod:`screenlab.store.decisions`; readings added to
planned plates: :mod:`screenlab.store.addreadings`; backups: :mod:`screenlab.store.backup`."""
from __future__ import annotations

from screenlab.store.addreadings import add_readings, campaigns_awaiting_readings, plate_readings
from screenlab.store.connection import BUILTIN_EXTENSIONS
from screenlab.store.db import Store
from screenlab.store.fingerprints import plate_fingerprints
from screenlab.store.planner import ImportPlan, ImportRefusedError, ImportReport, plan_import

__all__ = ["BUILTIN_EXTENSIONS", "ImportPlan", "ImportRefusedError", "ImportReport", "Store", "add_readings",
           "campaigns_awaiting_readings", "plan_import", "plate_fingerprints", "plate_readings"]
