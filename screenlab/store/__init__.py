"""The DuckDB store (the only package that imports duckdb). See :mod:`screenlab.store.db`."""
from __future__ import annotations

from screenlab.store.db import (
    BUILTIN_EXTENSIONS,
    ImportRefusedError,
    ImportReport,
    Store,
    plate_fingerprints,
)

__all__ = ["BUILTIN_EXTENSIONS", "ImportRefusedError", "ImportReport", "Store", "plate_fingerprints"]
