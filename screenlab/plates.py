"""Plate formats and well names (ANSI/SLAS 4-2004 footprints).

Formats: 24 = 4 x 6, 48 = 6 x 8, 96 = 8 x 12, 384 = 16 x 24. Rows are letters from A, columns
numbers from 1. Well names are accepted as ``A1``, ``a01``, ``A 1`` and returned canonical as
``A1``. All functions are vectorised over arrays of names.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

#: number of positions -> (rows, columns)
FORMATS: dict[int, tuple[int, int]] = {24: (4, 6), 48: (6, 8), 96: (8, 12), 384: (16, 24)}
ROW_LETTERS = "ABCDEFGHIJKLMNOP"


def parse_wells(names) -> pd.DataFrame:
    """Parse well names.

    Returns a frame with columns ``well`` (canonical, or NA when unparsable), ``row`` and ``col``
    (0-based ints, -1 when unparsable). Vectorised with pandas string methods.
    """
    s = pd.Series(names, dtype="string").str.strip().str.upper().str.replace(" ", "", regex=False)
    m = s.str.extract(r"^([A-P])0*([1-9][0-9]?)$")
    ok = m[0].notna() & m[1].notna()
    row = np.full(len(s), -1, dtype=np.int64)
    col = np.full(len(s), -1, dtype=np.int64)
    if ok.any():
        letters = m.loc[ok, 0].astype(str).to_numpy()
        row[ok.to_numpy()] = np.frombuffer("".join(letters).encode(), dtype=np.uint8) - ord("A")
        col[ok.to_numpy()] = m.loc[ok, 1].astype(int).to_numpy() - 1
    well = pd.Series(pd.NA, index=s.index, dtype="string")
    well[ok] = m.loc[ok, 0] + m.loc[ok, 1].astype(int).astype(str)
    return pd.DataFrame({"well": well.to_numpy(), "row": row, "col": col})


def well_name(row, col) -> np.ndarray:
    """Canonical names from 0-based row and column indices."""
    row = np.asarray(row, dtype=int)
    col = np.asarray(col, dtype=int)
    letters = np.array(list(ROW_LETTERS))[row]
    return np.char.add(letters.astype(str), (col + 1).astype(str))


def all_wells(fmt: int) -> pd.DataFrame:
    """Every position of a plate format in row-major order (A1, A2, ... )."""
    nr, nc = FORMATS[fmt]
    r, c = np.divmod(np.arange(nr * nc), nc)
    return pd.DataFrame({"well": well_name(r, c), "row": r, "col": c})


def format_dims(fmt) -> tuple[np.ndarray, np.ndarray]:
    """Rows and columns for an array of plate formats (0 for an unknown format)."""
    fmt = np.asarray(fmt, dtype=np.int64)
    nr = np.zeros(fmt.shape, dtype=np.int64)
    nc = np.zeros(fmt.shape, dtype=np.int64)
    for f, (r, c) in FORMATS.items():  # four formats, not a loop over wells
        hit = fmt == f
        nr[hit] = r
        nc[hit] = c
    return nr, nc


def is_edge(row, col, fmt) -> np.ndarray:
    """True for wells on the outer ring of their plate (vectorised; fmt may be an array)."""
    row = np.asarray(row, dtype=np.int64)
    col = np.asarray(col, dtype=np.int64)
    nr, nc = format_dims(np.broadcast_to(np.asarray(fmt), row.shape))
    return (row == 0) | (col == 0) | (row == nr - 1) | (col == nc - 1)
