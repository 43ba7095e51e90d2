"""Fingerprints: what tells a re-import "unchanged", "new" and "changed" apart, and says what changed.

Each plate has three fingerprints over its canonical content in storage form
(:mod:`screenlab.store.storage`): the plate row; the layout (wells sorted by well, factor values
sorted by well and factor); the readings (sorted by well, analyte, time and value). The row order
of the files does not matter.

Definition (version :data:`FINGERPRINT_VERSION`):

* a **cell** hashes to 64 bits by its value alone: text by BLAKE2b (8-byte digest) of its UTF-8,
  integers and floats by the splitmix64 finaliser of their 64-bit pattern (xor 1 for integers,
  2 for floats; -0.0 is 0.0 in storage form, one NaN pattern), a missing cell to a fixed constant;
* a **row** combines its cells in column order, each tagged with the BLAKE2b of its column name:
  ``h = mix(h * 0x100000001B3 ^ mix(cell ^ tag))`` from ``h = 0`` (``mix`` = splitmix64);
* a **part** is the SHA-256 of the little-endian row hashes of the plate's rows in canonical order
  (the layout part: SHA-256 of the wells' and the factors' hex digests joined).

A stored plate's fingerprint is the text ``fp_plate:fp_layout:fp_readings``. The manifest's is
the SHA-256 of its stored dict as sorted JSON.

Everything is vectorised: each row is hashed once into 64 bits, rows are sorted once over the
whole frame (skipped when they already come in order), and each plate's digest is taken of its
contiguous slice of the hash array. Text is hashed per distinct value and spread to the rows.
"""
from __future__ import annotations

import hashlib
import json
from typing import Any

import numpy as np
import pandas as pd

from screenlab.model import Manifest
from screenlab.store.storage import (PLATE_COLS, READING_COLS, WELL_COLS, Prepared, manifest_dict, storage_form,
                                     text)

#: fingerprint definition recorded in the store metadata (key ``fingerprint_version``). A store
#: whose plates carry another version has them recomputed from its stored rows when it is first
#: opened for writing (see :func:`screenlab.store.connection.refresh_fingerprints`), so an
#: unchanged re-import stays unchanged.
FINGERPRINT_VERSION = "2"
_NA_HASH = np.uint64(0x9E3779B97F4A7C15)   # hash of a missing cell (any kind)


def mix64(x: np.ndarray, inplace: bool = False) -> np.ndarray:
    """The splitmix64 finaliser (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number
    generators", OOPSLA): a bijective avalanche mix of uint64 values, wrapping arithmetic.

    Computed with one scratch array (``inplace``: in ``x`` itself, which the caller owns), as row
    hashes of a large table go through it several times per column."""
    t = np.right_shift(x, np.uint64(30))
    if inplace:
        np.bitwise_xor(x, t, out=x)
    else:
        x = np.bitwise_xor(x, t, out=t)
        t = np.empty_like(x)
    np.multiply(x, np.uint64(0xBF58476D1CE4E5B9), out=x)
    np.right_shift(x, np.uint64(27), out=t)
    np.bitwise_xor(x, t, out=x)
    np.multiply(x, np.uint64(0x94D049BB133111EB), out=x)
    np.right_shift(x, np.uint64(31), out=t)
    return np.bitwise_xor(x, t, out=x)


def _text_hash(values) -> np.ndarray:
    """64-bit BLAKE2b of each text (UTF-8); used on the distinct values of a column only."""
    out = np.empty(len(values), dtype=np.uint64)
    for i, t in enumerate(values):  # distinct values (plates, well names, catalysts), not rows
        out[i] = int.from_bytes(hashlib.blake2b(str(t).encode("utf-8", "surrogatepass"), digest_size=8).digest(),
                                "little")
    return out


def _is_text(s: pd.Series) -> bool:
    return isinstance(s.dtype, pd.StringDtype) or s.dtype == object


def _number_hash(s: pd.Series) -> np.ndarray:
    """Cell hashes of a numeric stored-form column (nullable integers or floats)."""
    if isinstance(s.dtype, pd.Int64Dtype):
        na = s.isna().to_numpy(dtype=bool)
        v = s.fillna(0).to_numpy(dtype=np.int64).view(np.uint64)
        return np.where(na, _NA_HASH, mix64(v ^ np.uint64(0x1)))
    v = s.to_numpy(dtype=np.float64)
    na = np.isnan(v)
    bits = np.where(na, 0.0, v).view(np.uint64)  # a new array: hashed in place below
    np.bitwise_xor(bits, np.uint64(0x2), out=bits)
    h = mix64(bits, inplace=True)
    h[na] = _NA_HASH
    return h


def _sort_key(s: pd.Series) -> np.ndarray:
    """A numeric key ordering a numeric column by value (NaN last, as lexsort puts it)."""
    return pd.to_numeric(s, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)


class _ColumnReader:
    """The columns of one stored-form frame (optionally only the rows of ``keep``), each read
    once: cell hashes and sort keys. A text column is factorised once; its distinct values are
    hashed and ranked (code-point order, missing first), and both are spread to the rows through
    the codes."""

    def __init__(self, frame: pd.DataFrame, keep: np.ndarray | None = None):
        self.frame = frame
        self.keep = keep
        self._factors: dict[str, tuple[np.ndarray, Any]] = {}

    def _factor(self, c: str) -> tuple[np.ndarray, Any]:
        if c not in self._factors:
            codes, uniques = pd.factorize(self.frame[c], use_na_sentinel=True)
            codes = np.asarray(codes, dtype=np.intp)
            self._factors[c] = (codes if self.keep is None else codes[self.keep], uniques)
        return self._factors[c]

    def _values(self, c: str) -> pd.Series:
        s = self.frame[c]
        return s if self.keep is None else s[self.keep]

    def hash(self, c: str, tag: np.uint64, first: bool = False) -> np.ndarray:
        """``mix64(cell hash ^ tag)`` per row of column ``c``, with ``first`` mixed once more (the
        first column's row-hash step); for text taken on the distinct values and spread."""
        def steps(h: np.ndarray) -> np.ndarray:  # on an array of its own
            np.bitwise_xor(h, tag, out=h)
            h = mix64(h, inplace=True)
            return mix64(h, inplace=True) if first else h

        if not _is_text(self.frame[c]):
            return steps(_number_hash(self._values(c)))
        codes, uniques = self._factor(c)
        h = np.append(_text_hash(uniques.tolist() if hasattr(uniques, "tolist") else list(uniques)), _NA_HASH)
        return steps(h)[codes]  # last slot: missing (code -1)

    def key(self, c: str) -> tuple[np.ndarray, int | None]:
        """(sort key, number of distinct values); text keys are ranks 0..n-1 (missing -1), and
        only they carry the count."""
        if not _is_text(self.frame[c]):
            return _sort_key(self._values(c)), None
        codes, uniques = self._factor(c)
        ranks = np.append(pd.factorize(pd.Series(uniques), sort=True, use_na_sentinel=True)[0], -1).astype(np.int64)
        return ranks[codes], len(uniques)


def _row_hashes(reader: _ColumnReader, cols: list[str]) -> np.ndarray:
    """One uint64 per row combining ``cols`` in order (see the module docstring)."""
    n = len(reader.frame) if reader.keep is None else int(np.count_nonzero(reader.keep))
    h = None
    for c in cols:  # columns, not rows
        tag = _text_hash([c])[0]
        if h is None:  # first column: h = 0, so mix(h * P ^ x) is mix(x)
            h = reader.hash(c, tag, first=True)
        else:  # h is this function's own array: updated in place
            np.multiply(h, np.uint64(0x100000001B3), out=h)
            np.bitwise_xor(h, reader.hash(c, tag), out=h)
            h = mix64(h, inplace=True)
    return np.zeros(n, dtype=np.uint64) if h is None else h


def lex_sorted(keys: list[np.ndarray]) -> bool:
    """True when rows already follow the order ``np.lexsort(keys[::-1])`` gives (primary key
    first; NaN after every number, NaNs tied), so that the sort can be skipped: a stable sort of
    sorted rows is the identity."""
    if len(keys[0]) < 2:
        return True
    open_ = np.ones(len(keys[0]) - 1, dtype=bool)  # pairs not yet decided by an earlier key
    for k in keys:
        a, b = k[:-1], k[1:]
        if k.dtype.kind == "f":
            na, nb = np.isnan(a), np.isnan(b)
            lt, gt = (a < b) | (~na & nb), (a > b) | (na & ~nb)
        else:
            lt, gt = a < b, a > b
        if (open_ & gt).any():
            return False
        open_ &= ~lt
        if not open_.any():
            return True
    return True


def _plate_positions(names: pd.Index, plate: pd.Series) -> np.ndarray:
    """Position in ``names`` of each row's plate (as text, missing as NUL; -1 when absent), looked
    up once per distinct name."""
    codes, uniques = pd.factorize(plate, use_na_sentinel=True)
    as_text = pd.Series(uniques).astype("string").fillna("\x00").tolist() + ["\x00"]  # last: missing
    return names.get_indexer(pd.Index(as_text, dtype="string"))[np.asarray(codes, dtype=np.intp)]


def _plate_digests(names: pd.Index, frame: pd.DataFrame, keys: list[str], cols: list[str]) -> list[str]:
    """SHA-256 per plate of ``names`` over the row hashes of its rows, rows sorted canonically by
    ``keys``. Rows are hashed in their own order and the hashes permuted (a row's hash does not
    depend on its place). The plate position and the text keys right after it are folded into one
    int64 key (lexicographic order of small ranks = numeric order of the mixed-radix number)."""
    pos = _plate_positions(names, frame["plate"])
    keep = None
    if (pos < 0).any():  # rows of a plate not in the plates table (the validation refuses them)
        keep = pos >= 0
        pos = pos[keep]
    reader = _ColumnReader(frame, keep)
    lead, span, rest = pos.astype(np.int64), max(len(names), 1), []
    for k in keys:
        key, n_distinct = reader.key(k)
        if not rest and n_distinct is not None and span * (n_distinct + 1) < 2 ** 62:
            lead, span = lead * (n_distinct + 1) + (key + 1), span * (n_distinct + 1)
        else:
            rest.append(key)
    ordered = [lead] + rest
    hashes = _row_hashes(reader, cols)
    if not lex_sorted(ordered):
        hashes = hashes[np.lexsort(ordered[::-1])]
    bounds = np.concatenate([[0], np.cumsum(np.bincount(pos, minlength=len(names)))])
    return [hashlib.sha256(hashes[a:b].tobytes()).hexdigest() for a, b in zip(bounds[:-1], bounds[1:])]


def plate_fingerprints(plates: pd.DataFrame, wells: pd.DataFrame, factors: pd.DataFrame,
                       readings: pd.DataFrame) -> pd.DataFrame:
    """Per-plate fingerprints of stored-form frames: ``plate, fp_plate, fp_layout, fp_readings``
    (SHA-256 hex, definition :data:`FINGERPRINT_VERSION`)."""
    p = plates.reset_index(drop=True)
    names = pd.Index(p["plate"].astype("string").fillna("\x00"))
    p_hash = _row_hashes(_ColumnReader(p), [c for c in PLATE_COLS if c != "plate"])
    fp_plate = [hashlib.sha256(h.tobytes()).hexdigest() for h in p_hash]  # one per plate
    wl = _plate_digests(names, wells, ["well"], [c for c in WELL_COLS if c != "plate"])
    fl = _plate_digests(names, factors, ["well", "factor"], ["well", "factor", "value"])
    fp_layout = [hashlib.sha256((a + b).encode()).hexdigest() for a, b in zip(wl, fl)]
    fp_readings = _plate_digests(names, readings, ["well", "analyte", "time_h", "value"],
                                 ["well", "analyte", "time_h", "value"])
    return pd.DataFrame({"plate": p["plate"].tolist(), "fp_plate": fp_plate, "fp_layout": fp_layout,
                         "fp_readings": fp_readings}, columns=["plate", "fp_plate", "fp_layout", "fp_readings"])


def of_prepared(prep: Prepared) -> pd.DataFrame:
    """:func:`plate_fingerprints` of a prepared campaign."""
    return plate_fingerprints(prep.plates, prep.wells, prep.factors, prep.readings)


def with_text(fps: pd.DataFrame) -> pd.DataFrame:
    """``fps`` with the stored text of each plate's fingerprint, ``fp`` = ``fp_plate:fp_layout:fp_readings``."""
    return fps.assign(fp=[f"{r.fp_plate}:{r.fp_layout}:{r.fp_readings}" for r in fps.itertuples()])  # per plate


def manifest_fingerprint(m: Manifest) -> str:
    return hashlib.sha256(json.dumps(manifest_dict(m), sort_keys=True).encode()).hexdigest()


def stored_versions(plates: pd.DataFrame, wells: pd.DataFrame, factors: pd.DataFrame,
                    readings: pd.DataFrame) -> pd.DataFrame:
    """Fingerprints of stored plate versions, from rows as the store holds them (each frame with
    ``campaign, plate, import_id`` and the stored columns): ``campaign, plate, import_id,
    fingerprint`` (the stored text), one row per plate version."""
    keyed = []
    for frame, cols in zip((plates, wells, factors, readings), (PLATE_COLS, WELL_COLS, None, READING_COLS)):
        key = (frame["campaign"].astype("string") + "\x1f" + frame["plate"].astype("string") + "\x1f"
               + frame["import_id"].astype("int64").astype("string"))
        body = frame.drop(columns=["campaign", "plate", "import_id"])
        if cols is None:  # well factors: all text
            body = body.apply(text)
        else:
            body = storage_form(body, {c: k for c, k in cols.items() if c != "plate"})
        keyed.append(body.assign(plate=key.to_numpy()))
    fps = with_text(plate_fingerprints(*keyed))
    return pd.DataFrame({"campaign": plates["campaign"].astype("string"),
                         "plate": plates["plate"].astype("string"),
                         "import_id": plates["import_id"].astype("int64"),
                         "fingerprint": pd.array(fps["fp"].tolist(), dtype="string")})
