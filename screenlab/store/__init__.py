"""The DuckDB store (the only package that imports duckdb). See :mod:`screenlab.store.db`;
recorded decisions, round links and cross-campaign catalyst look-ups: :mod:`screenlab.store.decisions`."""
from __future__ import annotations

from screenlab.store.addreadings import add_readings, campaigns_awaiting_readings, plate_readings
from screenlab.store.db import (
    BUILTIN_EXTENSIONS,
    ImportRefusedError,
    ImportReport,
    Store,
    plate_fingerprints,
)

__all__ = ["BUILTIN_EXTENSIONS", "ImportRefusedError", "ImportReport", "Store", "add_readings",
           "campaigns_awaiting_readings", "plate_fingerprints", "plate_readings"]
