"""The DuckDB store: one file holding every imported campaign, with its import history.

Design
------
* **Short-lived connections.** Every public method opens a connection, does its work and closes
  it, so the app (reading) and the CLI (writing) can share one file. DuckDB allows one read-write
  process *or* several read-only ones; when the file is locked, the open is retried with backoff
  for ``busy_timeout_s`` (default 10 s, or ``$SCREENLAB_BUSY_TIMEOUT_S``) and then fails with
  :class:`~screenlab.errors.StoreBusyError` naming the other process.
* **Offline.** Connections never install or auto-load extensions (only the ones built into the
  wheel: core_functions, icu, json, parquet).
* **Versioned rows, nothing lost.** A campaign header (manifest, catalyst set, factor names) and
  each plate (plate row, layout, factor values, readings) are versions written by one import. A
  replaced version is marked ``superseded_by`` the replacing import and stays in the file; the
  ``current_*`` views (and every method here) see only current versions. Raw imported values are
  never updated.
* **All or nothing.** One import is one explicit transaction (``begin``/``commit``, ``rollback`` on
  any error): DuckDB 2.0 auto-commits each statement of a multi-statement string, so no step
  relies on that.
* **Fingerprints.** Each plate's canonical content (plate row; layout rows and factor values
  sorted by well; readings sorted by well, analyte, time) is hashed with SHA-256 in three parts,
  so a re-import can tell "unchanged", "new" and "changed" apart and say *what* changed.
* **Import speed.** Rows go to DuckDB as one Arrow table of one record batch per table (one
  ``INSERT ... SELECT``); the campaign and import id, the same on every row, are parameters of
  that statement, not columns of the table. While the data is put in storage form, a worker
  thread opens the store; while the rows are written, another computes the fingerprints (DuckDB
  runs without the GIL).
  An import of at least :data:`CHECKPOINT_READINGS` readings commits straight into the file.

Schema migrations live in ``screenlab/store/migrations/NNN_name.sql`` and are applied in order,
each in one transaction, recorded in ``schema_migrations(version, name, applied_at)``.
"""
from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import re
import time
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timezone
from importlib import resources
from pathlib import Path
from typing import Any, Iterable

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa

from screenlab.errors import NotFoundError, Problem, ScreenlabError, StoreBusyError, ValidationError
from screenlab.model import DEFAULT_ANALYTE, CampaignData, Manifest
from screenlab.store import queries as Q

#: default seconds to keep retrying a locked store file
DEFAULT_BUSY_TIMEOUT_S = 10.0
BUSY_TIMEOUT_ENV = "SCREENLAB_BUSY_TIMEOUT_S"
#: an import that writes at least this many readings commits straight into the database file
#: (a checkpoint at commit instead of a WAL write), and a CHECKPOINT follows it
CHECKPOINT_READINGS = 50_000
#: extensions compiled into the duckdb wheel; nothing else may load (offline machines)
BUILTIN_EXTENSIONS = frozenset({"core_functions", "icu", "json", "parquet"})

_CONFIG = {"autoinstall_known_extensions": False, "autoload_known_extensions": False}
_LOCK_WORDS = ("could not set lock", "conflicting lock")

# Canonical columns of the CampaignData frames (see screenlab.model.CampaignData), with the kind
# each is stored as: "s" text, "f" float, "i" integer.
CATALYST_COLS = {"catalyst": "s", "name": "s", "family": "s", "molar_mass_g_mol": "f", "sites_per_unit": "f",
                 "metal_wt_pct": "f", "metal_molar_mass_g_mol": "f", "dispersion": "f",
                 "alias": "s"}  # alias: schema 2 (catalysts.csv column of our own; absent from older frames)
PLATE_COLS = {"plate": "s", "format": "i", "n_rows": "i", "n_cols": "i", "temperature_c": "f",
              "run_date": "s", "notes": "s"}
WELL_COLS = {"plate": "s", "well": "s", "row": "i", "col": "i", "role": "s", "catalyst": "s", "loading": "f",
             "loading_unit": "s", "substrate_conc_mM": "f", "volume_uL": "f", "temperature_c": "f"}
READING_COLS = {"plate": "s", "well": "s", "analyte": "s", "time_h": "f", "value": "f"}
_FRAME_COLS = {"catalysts": CATALYST_COLS, "plates": PLATE_COLS, "wells": WELL_COLS, "readings": READING_COLS}
_REQUIRED = {"catalysts": ("catalyst",), "plates": ("plate",), "wells": ("plate", "well"),
             "readings": ("plate", "well", "time_h", "value")}
_STATUSES = ("imported", "unchanged", "added_plates", "replaced", "dry_run")


class ImportRefusedError(ScreenlabError):
    """Data for a stored campaign differs from what the store holds and ``replace`` was not given."""

    def __init__(self, message: str, *, campaign: str, plates: tuple[str, ...] = (),
                 catalysts: tuple[str, ...] = (), manifest: bool = False):
        super().__init__(message)
        self.campaign = campaign
        self.plates = plates
        self.catalysts = catalysts
        self.manifest = manifest


@dataclass(frozen=True)
class ImportReport:
    """What one import did (or, with ``dry_run``, would do).

    ``status``: imported (new campaign) | unchanged (nothing written) | added_plates (new plates or
    catalysts for a stored campaign) | replaced (changed plates / manifest / catalysts stored as the
    new current version, the old one kept as history) | dry_run (nothing written; the lists say
    what an import would do). ``n_wells`` and ``n_readings`` count the rows written (or that would
    be written). ``import_id`` is None when nothing was written.
    """

    campaign: str
    status: str
    plates_added: tuple[str, ...] = ()
    plates_replaced: tuple[str, ...] = ()
    plates_unchanged: tuple[str, ...] = ()
    n_wells: int = 0
    n_readings: int = 0
    message: str = ""
    import_id: int | None = None
    catalysts_added: tuple[str, ...] = ()
    catalysts_replaced: tuple[str, ...] = ()
    manifest_replaced: bool = False
    plates_kept: tuple[str, ...] = ()   # stored plates the imported data did not mention (left as they are)


# --------------------------------------------------------------------------------------------
# dtype bookkeeping: load_campaign gives back the frames with the dtypes they were imported with
# --------------------------------------------------------------------------------------------

def _dtype_spec(dtype) -> Any:
    if isinstance(dtype, pd.StringDtype):
        return {"string": dtype.storage, "na": "nan" if dtype.na_value is np.nan else "NA"}
    return str(dtype)


def _dtype_from_spec(spec) -> Any:
    if isinstance(spec, dict) and "string" in spec:
        return pd.StringDtype(spec["string"], na_value=np.nan if spec["na"] == "nan" else pd.NA)
    return pd.api.types.pandas_dtype(spec)


def _restore(frame: pd.DataFrame, schema: list[list]) -> pd.DataFrame:
    out = {}
    for col, spec in schema:
        s = frame[col] if col in frame.columns else pd.Series([pd.NA] * len(frame), dtype=object)
        try:
            out[col] = s.astype(_dtype_from_spec(spec))
        except (TypeError, ValueError):
            out[col] = s
        out[col] = out[col].reset_index(drop=True)
    return pd.DataFrame(out, columns=[c for c, _ in schema]) if out else pd.DataFrame(index=range(len(frame)))


# --------------------------------------------------------------------------------------------
# canonical frames as stored, and their fingerprints
# --------------------------------------------------------------------------------------------

def _text(s: pd.Series) -> pd.Series:
    """Text column as pandas ``string`` (missing = NA); non-text values become their str()."""
    if pd.api.types.is_datetime64_any_dtype(s):
        out = s.dt.strftime("%Y-%m-%d %H:%M:%S").str.replace(" 00:00:00", "", regex=False)
        return out.astype("string")
    return s.astype("string")


def _prepared(frame: pd.DataFrame, cols: dict[str, str]) -> pd.DataFrame:
    """The canonical columns of ``frame`` in storage form (absent optional columns as missing)."""
    n = len(frame)
    out = {}
    for col, kind in cols.items():
        if col in frame.columns:
            s = frame[col].reset_index(drop=True)
        else:
            s = pd.Series([pd.NA] * n, dtype=object)
        if kind == "s":
            out[col] = _text(s)
        elif kind == "i":
            out[col] = pd.to_numeric(s, errors="coerce").astype("Int64")
        else:
            v = pd.to_numeric(s, errors="coerce").astype("float64")
            out[col] = v + 0.0  # -0.0 -> 0.0 so equal values fingerprint equally
    return pd.DataFrame(out, index=range(n))


#: fingerprint definition recorded in the store metadata (key ``fingerprint_version``). A store
#: whose plates carry another version has them recomputed from its stored rows when it is first
#: opened for writing (see ``Store._refresh_fingerprints``), so an unchanged re-import stays unchanged.
FINGERPRINT_VERSION = "2"
_M64 = np.uint64(0xFFFFFFFFFFFFFFFF)
_NA_HASH = np.uint64(0x9E3779B97F4A7C15)   # hash of a missing cell (any kind)


def _mix64(x: np.ndarray, inplace: bool = False) -> np.ndarray:
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


def _column_hash(s: pd.Series) -> np.ndarray:
    """One uint64 per cell of a stored-form column, defined by the value alone (not by dtype or
    pandas internals): text by BLAKE2b of its UTF-8, integers and floats by their 64-bit pattern
    (one NaN pattern; -0.0 was already made 0.0), missing cells by a fixed constant."""
    if _is_text(s):
        return _ColumnReader(s.to_frame("c")).hash("c")
    if isinstance(s.dtype, pd.Int64Dtype):
        na = s.isna().to_numpy(dtype=bool)
        v = s.fillna(0).to_numpy(dtype=np.int64).view(np.uint64)
        return np.where(na, _NA_HASH, _mix64(v ^ np.uint64(0x1)))
    v = s.to_numpy(dtype=np.float64)
    na = np.isnan(v)
    bits = np.where(na, 0.0, v).view(np.uint64)  # a new array: hashed in place below
    np.bitwise_xor(bits, np.uint64(0x2), out=bits)
    h = _mix64(bits, inplace=True)
    h[na] = _NA_HASH
    return h


def _is_text(s: pd.Series) -> bool:
    return isinstance(s.dtype, pd.StringDtype) or s.dtype == object


def _sort_key(s: pd.Series) -> np.ndarray:
    """A numeric key ordering a column by value (text via sorted factor codes, missing first)."""
    if _is_text(s):
        return pd.factorize(s, sort=True, use_na_sentinel=True)[0]
    return pd.to_numeric(s, errors="coerce").to_numpy(dtype=np.float64, na_value=np.nan)


class _ColumnReader:
    """The columns of one stored-form frame (optionally only the rows of ``keep``), each read
    once: cell hashes as :func:`_column_hash` defines them and sort keys ordering rows as
    :func:`_sort_key` does. A text column is factorised once; its distinct values are hashed
    and ranked, and both are spread to the rows through the codes."""

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

    def hash(self, c: str, tag: np.uint64 | None = None, first: bool = False) -> np.ndarray:
        """Cell hashes of column ``c``; with ``tag``, ``_mix64(hash ^ tag)``, and with ``first``
        also mixed once more (the first column's row-hash step); for text these are taken on the
        distinct values and spread, which gives the same number per cell."""
        def steps(h: np.ndarray) -> np.ndarray:  # on an array of its own
            if tag is not None:
                np.bitwise_xor(h, tag, out=h)
                h = _mix64(h, inplace=True)
            return _mix64(h, inplace=True) if first else h

        if not _is_text(self.frame[c]):
            return steps(_column_hash(self._values(c)))
        codes, uniques = self._factor(c)
        h = np.append(_text_hash(uniques.tolist() if hasattr(uniques, "tolist") else list(uniques)), _NA_HASH)
        return steps(h)[codes]  # last slot: missing (code -1)

    def key(self, c: str) -> tuple[np.ndarray, int | None]:
        """(sort key, number of distinct values); text keys are ranks 0..n-1 (missing -1), and
        only they carry the count."""
        if not _is_text(self.frame[c]):
            return _sort_key(self._values(c)), None
        codes, uniques = self._factor(c)
        ranks = np.append(_sort_key(pd.Series(uniques)), -1).astype(np.int64)  # ranks of the distinct values
        return ranks[codes], len(uniques)


def _row_hashes(frame: pd.DataFrame | _ColumnReader, cols: list[str]) -> np.ndarray:
    """One uint64 per row combining ``cols`` in order (each column tagged with its name):
    ``h = mix(h * P ^ mix(cell ^ tag))`` from ``h = 0``."""
    reader = frame if isinstance(frame, _ColumnReader) else _ColumnReader(frame)
    n = len(reader.frame) if reader.keep is None else int(np.count_nonzero(reader.keep))
    h = None
    for c in cols:  # columns, not rows
        tag = _text_hash([c])[0]
        if h is None:  # first column: h = 0, so mix(h * P ^ x) is mix(x)
            h = reader.hash(c, tag, first=True)
        else:  # h is this function's own array: updated in place
            np.multiply(h, np.uint64(0x100000001B3), out=h)
            np.bitwise_xor(h, reader.hash(c, tag), out=h)
            h = _mix64(h, inplace=True)
    return np.zeros(n, dtype=np.uint64) if h is None else h


def _lex_sorted(keys: list[np.ndarray]) -> bool:
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
    text = pd.Series(uniques).astype("string").fillna("\x00").tolist() + ["\x00"]  # last: missing
    return names.get_indexer(pd.Index(text, dtype="string"))[np.asarray(codes, dtype=np.intp)]


def _plate_digests(names: pd.Index, frame: pd.DataFrame, keys: list[str], cols: list[str]) -> list[str]:
    """SHA-256 per plate of ``names`` over the row hashes of its rows, rows sorted canonically by
    ``keys`` (so the order of rows in the files does not matter). One vectorised sort and hash over
    the whole frame; each plate's digest is taken of its contiguous slice of the hash array.

    Rows are hashed in their own order and the hashes permuted (a row's hash does not depend on
    its place). The plate position and the text keys right after it are folded into one int64
    key (lexicographic order of small ranks = numeric order of the mixed-radix number), and the
    sort is skipped when the rows already come in that order."""
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
    if not _lex_sorted(ordered):
        hashes = hashes[np.lexsort(ordered[::-1])]
    bounds = np.concatenate([[0], np.cumsum(np.bincount(pos, minlength=len(names)))])
    return [hashlib.sha256(hashes[a:b].tobytes()).hexdigest() for a, b in zip(bounds[:-1], bounds[1:])]


def plate_fingerprints(plates: pd.DataFrame, wells: pd.DataFrame, factors: pd.DataFrame,
                       readings: pd.DataFrame) -> pd.DataFrame:
    """Per-plate fingerprints of stored-form frames: ``plate, fp_plate, fp_layout, fp_readings``
    (SHA-256 hex, definition :data:`FINGERPRINT_VERSION`).

    Each row is hashed once, vectorised, into 64 bits (:func:`_row_hashes`); rows are sorted
    canonically first (layout by well, factors by well and factor, readings by well, analyte, time
    and value), and each part's digest is the SHA-256 of the plate's slice of those row hashes.
    """
    p = plates.reset_index(drop=True)
    names = pd.Index(p["plate"].astype("string").fillna("\x00"))
    p_hash = _row_hashes(p, [c for c in PLATE_COLS if c != "plate"])
    fp_plate = [hashlib.sha256(h.tobytes()).hexdigest() for h in p_hash]  # one per plate
    wl = _plate_digests(names, wells, ["well"], [c for c in WELL_COLS if c != "plate"])
    fl = _plate_digests(names, factors, ["well", "factor"], ["well", "factor", "value"])
    fp_layout = [hashlib.sha256((a + b).encode()).hexdigest() for a, b in zip(wl, fl)]
    fp_readings = _plate_digests(names, readings, ["well", "analyte", "time_h", "value"],
                                 ["well", "analyte", "time_h", "value"])
    return pd.DataFrame({"plate": p["plate"].tolist(), "fp_plate": fp_plate, "fp_layout": fp_layout,
                         "fp_readings": fp_readings}, columns=["plate", "fp_plate", "fp_layout", "fp_readings"])


#: Manifest fields added after stores were first written: left out of the stored dict (and so of
#: the fingerprint) while they hold their default None, so an unchanged campaign stays unchanged
_LATER_MANIFEST_FIELDS = ("linear_range_max", "parent", "decision")


def _manifest_dict(m: Manifest) -> dict:
    d = dataclasses.asdict(m)
    for key in _LATER_MANIFEST_FIELDS:
        if d.get(key) is None:
            d.pop(key, None)
    return json.loads(json.dumps(d, default=str))


def _manifest_fingerprint(m: Manifest) -> str:
    return hashlib.sha256(json.dumps(_manifest_dict(m), sort_keys=True).encode()).hexdigest()


def _manifest_from_json(text: str) -> Manifest:
    d = json.loads(text)
    known = {f.name for f in dataclasses.fields(Manifest)}
    d = {k: v for k, v in d.items() if k in known}
    if "byproducts" in d:
        d["byproducts"] = tuple(d["byproducts"] or ())
    if d.get("enantiomers") is not None:
        d["enantiomers"] = tuple(d["enantiomers"])
    return Manifest(**d)


@dataclass(frozen=True)
class _Prepared:
    """One CampaignData in storage form (``fingerprints`` None when left to the caller)."""

    catalysts: pd.DataFrame
    plates: pd.DataFrame
    wells: pd.DataFrame
    factors: pd.DataFrame      # long: plate, seq, well, factor, value (non-missing values only)
    readings: pd.DataFrame
    fingerprints: pd.DataFrame | None
    factor_columns: tuple[str, ...]
    schema: dict               # frame -> [[column, dtype spec], ...]


def _validate(data: CampaignData) -> None:
    problems: list[Problem] = []
    frames = {"catalysts": data.catalysts, "plates": data.plates, "wells": data.wells, "readings": data.readings}
    for name, frame in frames.items():
        if not isinstance(frame, pd.DataFrame):
            problems.append(Problem(name, None, None, None, "is not a table (pandas DataFrame)"))
            continue
        for col in _REQUIRED[name]:
            if col not in frame.columns:
                problems.append(Problem(name, None, col, None, "required column is missing"))
        if name in ("catalysts", "plates", "readings"):
            extra = [c for c in frame.columns if c not in _FRAME_COLS[name]]
            for c in extra:
                problems.append(Problem(name, None, str(c), None,
                                        f"column the store does not know; expected only {', '.join(_FRAME_COLS[name])}"))
    if not str(data.manifest.name or "").strip():
        problems.append(Problem("campaign.toml", None, "name", None, "campaign name is empty"))
    if problems:
        raise ValidationError(problems, source=f"campaign {data.manifest.name!r}")

    def dupes(frame, keys, name):
        # missing or repeated keys, judged on per-column factor codes (the same equality as
        # DataFrame.duplicated, which factorises the key columns too)
        key = np.zeros(len(frame), dtype=np.int64)
        missing = np.zeros(len(frame), dtype=bool)
        for k in keys:  # one or two key columns
            codes, uniques = pd.factorize(frame[k], use_na_sentinel=True)
            missing |= codes < 0
            key = key * (len(uniques) + 1) + (codes + 1)
        bad = missing | _repeated(key)
        for pos in np.flatnonzero(bad)[:20]:
            vals = ", ".join(str(frame[k].iloc[pos]) for k in keys)
            problems.append(Problem(name, int(pos) + 2, keys[-1], vals, f"{'/'.join(keys)} missing or not unique"))

    dupes(data.catalysts, ["catalyst"], "catalysts")
    dupes(data.plates, ["plate"], "plates")
    dupes(data.wells, ["plate", "well"], "wells")
    known = set(data.plates["plate"].dropna().astype(str))
    for name in ("wells", "readings"):
        frame = getattr(data, name)
        bad = ~_rows_in(frame["plate"], known)
        for pos in np.flatnonzero(bad)[:20]:
            problems.append(Problem(name, int(pos) + 2, "plate", str(frame["plate"].iloc[pos]),
                                    "plate is not in the plates table"))
    if problems:
        raise ValidationError(problems, source=f"campaign {data.manifest.name!r}")


def _repeated(key: np.ndarray) -> np.ndarray:
    """True for every element equal to an earlier one (``duplicated(keep="first")``)."""
    return pd.Index(key).duplicated(keep="first")


def _rows_in(values: pd.Series, names) -> np.ndarray:
    """Per row: is the cell, as text, one of ``names`` (missing: no)? Judged once per distinct value."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    text = pd.Series(uniques).astype("string").tolist()
    hit = np.array([t is not pd.NA and t in names for t in text] + [False], dtype=bool)  # last: missing
    return hit[np.asarray(codes, dtype=np.intp)]


def _prepare(data: CampaignData, fingerprints: bool = True, validated: bool = False) -> _Prepared:
    if not validated:
        _validate(data)
    cat = _prepared(data.catalysts, CATALYST_COLS)
    pla = _prepared(data.plates, PLATE_COLS)
    wel = _prepared(data.wells, WELL_COLS)
    rea = _prepared(data.readings, READING_COLS)
    if "analyte" not in data.readings.columns:
        rea["analyte"] = pd.array([DEFAULT_ANALYTE] * len(rea), dtype="string")
    for frame, name in ((cat, "catalysts"), (pla, "plates"), (wel, "wells"), (rea, "readings")):
        frame["seq"] = np.arange(len(frame), dtype=np.int64)
    # every wells column that is not canonical is a named factor, kept in long form
    labels = [c for c in data.wells.columns if c not in WELL_COLS]
    factor_columns = tuple(str(c) for c in labels)
    parts = []
    for c in labels:  # a few named factors; each keeps its non-missing cells, in well order
        value = _text(data.wells[c].reset_index(drop=True))
        seq = np.flatnonzero(value.notna().to_numpy(dtype=bool))
        parts.append(pd.DataFrame({
            "plate": wel["plate"].array.take(seq), "seq": seq.astype(np.int64), "well": wel["well"].array.take(seq),
            "factor": pd.array([str(c)], dtype="string").take(np.zeros(len(seq), dtype=np.intp)),
            "value": value.array.take(seq)}))
    if parts:
        factors = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
    else:
        factors = pd.DataFrame({"plate": pd.array([], dtype="string"), "seq": np.array([], dtype=np.int64),
                                "well": pd.array([], dtype="string"), "factor": pd.array([], dtype="string"),
                                "value": pd.array([], dtype="string")})
    fps = plate_fingerprints(pla, wel, factors, rea) if fingerprints else None
    schema = {name: [[str(c), _dtype_spec(frame[c].dtype)] for c in frame.columns]
              for name, frame in (("catalysts", data.catalysts), ("plates", data.plates),
                                  ("wells", data.wells), ("readings", data.readings))}
    return _Prepared(cat, pla, wel, factors, rea, fps, factor_columns, schema)


def _fp_text(row) -> str:
    return f"{row.fp_plate}:{row.fp_layout}:{row.fp_readings}"


def _equal_cells(a: pd.Series, b: pd.Series) -> np.ndarray:
    a = a.reset_index(drop=True)
    b = b.reset_index(drop=True)
    both_na = (a.isna() & b.isna()).to_numpy(dtype=bool)
    eq = (a.astype(object) == b.astype(object)).to_numpy(dtype=bool) if len(a) else np.zeros(0, bool)
    return both_na | (eq & ~(a.isna() | b.isna()).to_numpy(dtype=bool))


def _plain_list(values: Iterable) -> list[str]:
    return [str(v) for v in values]


def _files_frame(files, import_id: int) -> pd.DataFrame:
    rows = []
    for i, f in enumerate(files or ()):
        if isinstance(f, dict):
            name, sha, n = f.get("name"), f.get("sha256"), f.get("n_rows")
        elif hasattr(f, "name"):
            name, sha, n = f.name, getattr(f, "sha256", None), getattr(f, "n_rows", None)
        else:
            name, sha, n = (tuple(f) + (None, None, None))[:3]
        rows.append((import_id, i, str(name), None if sha is None else str(sha), None if n is None else int(n)))
    frame = pd.DataFrame(rows, columns=["import_id", "seq", "name", "sha256", "n_rows"])
    return frame.astype({"import_id": "int64", "seq": "int64", "name": "string", "sha256": "string",
                         "n_rows": "Int64"})


def _names(items) -> str:
    items = list(items)
    if len(items) <= 12:
        return ", ".join(items)
    return ", ".join(items[:12]) + f" and {len(items) - 12} more"


# --------------------------------------------------------------------------------------------
# the store
# --------------------------------------------------------------------------------------------

class Store:
    """A ScreenLab store file. Cheap to create; every method opens its own short connection.

    ``read_only=True`` never writes (and needs an existing, up-to-date store file).
    """

    def __init__(self, path: str | os.PathLike, read_only: bool = False, *, busy_timeout_s: float | None = None):
        self.path = Path(path)
        self.read_only = bool(read_only)
        if busy_timeout_s is None:
            env = os.environ.get(BUSY_TIMEOUT_ENV)
            try:
                busy_timeout_s = float(env) if env else DEFAULT_BUSY_TIMEOUT_S
            except ValueError:
                busy_timeout_s = DEFAULT_BUSY_TIMEOUT_S
        self.busy_timeout_s = float(busy_timeout_s)
        self._schema_ok = False

    def __repr__(self) -> str:
        return f"Store({str(self.path)!r}, read_only={self.read_only})"

    def close(self) -> None:
        """Nothing to release: every method closes its own connection (kept for callers that close)."""

    # -- connections ---------------------------------------------------------------------------

    def _open(self) -> duckdb.DuckDBPyConnection:
        if self.read_only and not self.path.exists():
            raise NotFoundError(f"no store at {self.path} (import a campaign first: screenlab ingest FOLDER)")
        if not self.read_only and not self.path.parent.exists():
            raise ScreenlabError(f"cannot create store {self.path}: folder {self.path.parent} does not exist")
        deadline = time.monotonic() + self.busy_timeout_s
        delay = 0.05
        while True:
            try:
                return duckdb.connect(str(self.path), read_only=self.read_only, config=dict(_CONFIG))
            except duckdb.IOException as exc:
                text = str(exc)
                if not any(w in text.lower() for w in _LOCK_WORDS):
                    raise ScreenlabError(f"cannot open store {self.path}: {text}") from exc
                if time.monotonic() + delay > deadline:
                    m = re.search(r"PID (\d+)", text)
                    pid = m.group(1) if m else "unknown"
                    raise StoreBusyError(
                        f"store {self.path} is in use by another process (PID {pid}); gave up after "
                        f"{self.busy_timeout_s:g} s. Close the program holding it (or wait for its import "
                        f"to finish) and try again.") from exc
                time.sleep(delay)
                delay = min(delay * 2, 0.5)
            except duckdb.Error as exc:
                raise ScreenlabError(f"cannot open store {self.path}: {exc}") from exc

    @contextmanager
    def _connect(self, opened: Future | None = None):
        """A connection with the schema checked (``opened``: one being opened by
        :meth:`_open_checked` in another thread), closed on exit."""
        con = self._open() if opened is None else opened.result()
        try:
            if not self._schema_ok:
                self._check_schema(con)
            yield con
        except duckdb.Error as exc:
            raise ScreenlabError(f"store {self.path}: {exc}") from exc
        finally:
            con.close()

    def _open_checked(self) -> duckdb.DuckDBPyConnection:
        """:meth:`_open` and the schema check (migrations, fingerprint upgrade) as :meth:`_connect`
        does them, for a thread that opens the store while another prepares the data."""
        con = self._open()
        try:
            if not self._schema_ok:
                self._check_schema(con)
        except duckdb.Error as exc:
            con.close()
            raise ScreenlabError(f"store {self.path}: {exc}") from exc
        except BaseException:
            con.close()
            raise
        return con

    # -- schema --------------------------------------------------------------------------------

    @staticmethod
    def migrations() -> list[tuple[int, str, str]]:
        """The shipped migrations as ``(version, name, sql)``, in order."""
        out = []
        for entry in resources.files("screenlab.store").joinpath("migrations").iterdir():
            m = re.match(r"^(\d+)_(.+)\.sql$", entry.name)
            if m:
                out.append((int(m.group(1)), m.group(2), entry.read_text(encoding="utf-8")))
        return sorted(out)

    @staticmethod
    def _statements(sql: str) -> list[str]:
        lines = [ln.split("--", 1)[0] for ln in sql.splitlines()]
        return [s.strip() for s in "\n".join(lines).split(";") if s.strip()]

    def _check_schema(self, con) -> None:
        shipped = self.migrations()
        latest = shipped[-1][0]
        has = con.execute(Q.HAS_MIGRATIONS_TABLE).fetchall()[0][0]
        applied = {r[0] for r in con.execute(Q.APPLIED_VERSIONS).fetchall()} if has else set()
        if applied and max(applied) > latest:
            raise ScreenlabError(f"store {self.path} has schema version {max(applied)}, newer than this "
                                 f"screenlab understands ({latest}); upgrade screenlab")
        pending = [m for m in shipped if m[0] not in applied]
        if pending and self.read_only:
            raise ScreenlabError(f"store {self.path} needs a schema upgrade (to version {latest}); "
                                 f"open it once for writing (e.g. screenlab ingest) first")
        for version, name, sql in pending:
            con.begin()
            try:
                con.execute(Q.CREATE_MIGRATIONS)
                for stmt in self._statements(sql):
                    con.execute(stmt)
                con.execute(Q.RECORD_MIGRATION, [version, name])
                lib = con.execute(Q.LIBRARY_VERSION).fetchall()[0][0]
                storage = con.execute(Q.STORAGE_VERSION).fetchall()[0][0]
                from screenlab import __version__

                meta = {"schema_version": str(version), "duckdb_version": str(lib), "storage_version": str(storage),
                        "screenlab_version": __version__,
                        "storage_note": f"written by DuckDB {lib} (storage {storage}); open it with "
                                        f"DuckDB 2.0 or newer; copy the .duckdb and .wal files together"}
                if not applied and not self.read_only:  # a new store: no plate has a fingerprint of an older kind
                    meta["fingerprint_version"] = FINGERPRINT_VERSION
                con.execute(Q.UPSERT_META_MANY, [list(meta), list(meta.values())])
                con.commit()
            except BaseException:
                con.rollback()
                raise
        if not self.read_only:
            self._refresh_fingerprints(con)
        self._schema_ok = True

    @staticmethod
    def _refresh_fingerprints(con) -> None:
        """Bring the plates' fingerprints to :data:`FINGERPRINT_VERSION` (one transaction).

        A store written by an older screenlab holds fingerprints of another definition; comparing
        them with new ones would call every re-imported plate "changed". They are recomputed from
        the stored rows (which are the stored form the fingerprints are defined on), for every
        plate version, current and superseded. Only the derived ``fingerprint`` column changes.
        """
        rows = con.execute(Q.GET_META, ["fingerprint_version"]).fetchall()
        if rows and rows[0][0] == FINGERPRINT_VERSION:
            return
        con.begin()
        try:
            plates = con.execute(Q.ALL_PLATE_VERSIONS).df()
            if len(plates):
                frames = [plates] + [con.execute(q).df() for q in (Q.ALL_WELL_VERSIONS, Q.ALL_FACTOR_VERSIONS,
                                                                      Q.ALL_READING_VERSIONS)]
                keyed = []
                for frame, cols in zip(frames, (PLATE_COLS, WELL_COLS, None, READING_COLS)):
                    key = (frame["campaign"].astype("string") + "\x1f" + frame["plate"].astype("string") + "\x1f"
                           + frame["import_id"].astype("int64").astype("string"))
                    body = frame.drop(columns=["campaign", "plate", "import_id"])
                    if cols is None:  # well factors: all text
                        body = body.apply(_text)
                    else:
                        body = _prepared(body, {c: k for c, k in cols.items() if c != "plate"})
                    keyed.append(body.assign(plate=key.to_numpy()))
                fps = plate_fingerprints(*keyed)
                out = pd.DataFrame({"campaign": plates["campaign"].astype("string"),
                                    "plate": plates["plate"].astype("string"),
                                    "import_id": plates["import_id"].astype("int64"),
                                    "fingerprint": pd.array([_fp_text(r) for r in fps.itertuples()], dtype="string")})
                con.register("incoming_fingerprints", out)
                try:
                    con.execute(Q.UPDATE_FINGERPRINTS)
                finally:
                    con.unregister("incoming_fingerprints")
            con.execute(Q.UPSERT_META, ["fingerprint_version", FINGERPRINT_VERSION])
            con.commit()
        except BaseException:
            con.rollback()
            raise

    # -- small reads ---------------------------------------------------------------------------

    def metadata(self) -> dict[str, str]:
        """The metadata table (schema_version, duckdb_version, storage_version, generation, ...)."""
        with self._connect() as con:
            return dict(con.execute(Q.ALL_META).fetchall())

    def schema_versions(self) -> list[int]:
        with self._connect() as con:
            return [r[0] for r in con.execute(Q.APPLIED_VERSIONS).fetchall()]

    def loaded_extensions(self) -> list[str]:
        """Extensions loaded in a store connection (should be built-ins only)."""
        with self._connect() as con:
            return [r[0] for r in con.execute(Q.LOADED_EXTENSIONS).fetchall()]

    def data_version(self) -> str:
        """A token that changes on every write (for caches): the store's write generation."""
        if not self.path.exists():
            return "empty"
        with self._connect() as con:
            rows = con.execute(Q.GET_META, ["generation"]).fetchall()
        return f"g{rows[0][0] if rows else 0}"

    def campaign_names(self) -> list[str]:
        if self.read_only and not self.path.exists():
            return []
        with self._connect() as con:
            return [r[0] for r in con.execute(Q.CAMPAIGN_NAMES).fetchall()]

    def campaigns(self) -> pd.DataFrame:
        """One row per campaign (current data only): ``campaign, description, readout_kind, parent,
        parent_decision, plates, wells, readings, catalysts, analytes, imported_at, updated_at, imports``
        (times UTC; ``parent`` / ``parent_decision``: the round link of the manifest, else missing)."""
        with self._connect() as con:
            frame = con.execute(Q.CAMPAIGNS_SUMMARY).df()
        for c in ("plates", "wells", "readings", "catalysts", "analytes", "imports"):
            frame[c] = frame[c].astype("int64")
        frame["parent_decision"] = frame["parent_decision"].astype("Int64")
        return frame

    def imports(self, campaign: str | None = None) -> pd.DataFrame:
        """The import history: ``import_id, campaign, imported_at, source, status, plates_added,
        plates_replaced, plates_unchanged, catalysts_added, catalysts_replaced, manifest_replaced,
        n_wells, n_readings, files, message`` (list columns joined with ", "; imported_at UTC)."""
        with self._connect() as con:
            frame = con.execute(Q.IMPORTS_ALL, [campaign, campaign]).df()
        for c in ("plates_added", "plates_replaced", "plates_unchanged", "catalysts_added", "catalysts_replaced"):
            frame[c] = frame[c].map(lambda v: ", ".join(v) if v is not None and len(v) else "").astype("str")
        return frame

    def import_files(self, campaign: str | None = None) -> pd.DataFrame:
        """Files behind each import: ``import_id, campaign, name, sha256, n_rows``."""
        with self._connect() as con:
            return con.execute(Q.IMPORT_FILES, [campaign, campaign]).df()

    def table_counts(self) -> dict[str, int]:
        """Row counts of every data table, current and superseded (diagnostics, tests)."""
        names = ("campaigns", "catalysts", "plates", "wells", "well_factors", "readings", "imports", "import_files",
                 "decisions", "decision_catalysts")
        with self._connect() as con:
            return dict(zip(names, (int(v) for v in con.execute(Q.TABLE_COUNTS).fetchall()[0])))

    # -- load ----------------------------------------------------------------------------------

    def load_campaign(self, name: str) -> CampaignData:
        """The current data of one campaign, with the columns and dtypes it was imported with."""
        with self._connect() as con:
            head = con.execute(Q.CURRENT_HEADER, [name]).df()
            if head.empty:
                known = [r[0] for r in con.execute(Q.CAMPAIGN_NAMES).fetchall()]
                hint = f"; stored campaigns: {_names(known)}" if known else "; the store is empty"
                raise NotFoundError(f"no campaign {name!r} in store {self.path}{hint}")
            catalysts = con.execute(Q.CURRENT_CATALYSTS, [name]).df()
            plates = con.execute(Q.CURRENT_PLATES, [name]).df()
            wells = con.execute(Q.CURRENT_WELLS, [name]).df()
            factors = con.execute(Q.CURRENT_FACTORS, [name]).df()
            readings = con.execute(Q.CURRENT_READINGS, [name]).df()
        h = head.iloc[0]
        schema = json.loads(h["frame_schema_json"])
        manifest = _manifest_from_json(h["manifest_json"])
        factor_names = tuple(h["factor_names"]) if h["factor_names"] is not None else ()
        if not factors.empty:
            wide = factors.pivot(index=["import_id", "seq"], columns="factor", values="value").reset_index()
            wide.columns.name = None
            wells = wells.merge(wide, on=["import_id", "seq"], how="left", sort=False)
        wells = wells.drop(columns=["import_id", "seq"])
        return CampaignData(
            manifest=manifest,
            catalysts=_restore(catalysts, schema["catalysts"]),
            plates=_restore(plates, schema["plates"]),
            wells=_restore(wells, schema["wells"]),
            readings=_restore(readings, schema["readings"]),
            factor_names=factor_names,
        )

    # -- import --------------------------------------------------------------------------------

    def import_campaign(self, result_or_data, files=(), *, replace: bool = False, dry_run: bool = False,
                        source: str | None = None) -> ImportReport:
        """Import one campaign, all or nothing (see the module docstring for the rules).

        ``result_or_data`` is a reader result (with ``.data``, ``.files``, ``.source``) or a
        :class:`CampaignData`. Raises :class:`ImportRefusedError` when stored plates, catalysts or
        the manifest would change and ``replace`` is false (also on a dry run), and
        :class:`~screenlab.errors.ValidationError` for frames that break the contract.
        """
        if isinstance(result_or_data, CampaignData):
            data = result_or_data
        elif hasattr(result_or_data, "data") and isinstance(result_or_data.data, CampaignData):
            data = result_or_data.data
            files = files or tuple(getattr(result_or_data, "files", ()) or ())
            source = source if source is not None else str(getattr(result_or_data, "source", "") or "")
        else:
            raise TypeError("import_campaign expects a CampaignData or a reader result with .data")
        if self.read_only:
            raise ScreenlabError(f"store {self.path} is open read-only; cannot import")
        _validate(data)  # frames that break the contract are refused before the store is touched
        name = data.manifest.name
        # Work that overlaps (DuckDB runs without the GIL): a worker opens the store (schema check)
        # while this thread puts the data in storage form; then a worker computes the fingerprints
        # while this thread writes, for a campaign with nothing stored yet (its plates are all new,
        # whatever their fingerprints), the wells and readings. This thread hands DuckDB only
        # Arrow tables made before the fingerprint worker starts, which alone reads the prepared
        # frames meanwhile.
        with ThreadPoolExecutor(max_workers=2, thread_name_prefix="screenlab-import") as pool:
            opened = pool.submit(self._open_checked)
            try:
                prep = _prepare(data, fingerprints=False, validated=True)
                whole = {"wells": _arrow(prep.wells), "well_factors": _arrow(prep.factors),
                         "readings": _arrow(prep.readings)}
                plate_names = prep.plates["plate"].tolist()
            except BaseException:
                if opened.exception() is None:
                    opened.result().close()
                raise
            pending = pool.submit(plate_fingerprints, prep.plates, prep.wells, prep.factors, prep.readings)
            try:
                report = self._import_connected(data, prep, files, replace=replace, dry_run=dry_run, source=source,
                                                pending=pending, whole=whole, plate_names=plate_names,
                                                opened=opened)
            except BaseException:  # e.g. interrupted while waiting for the store: close it (closing twice is harmless)
                if opened.exception() is None:
                    opened.result().close()
                raise
        assert report.campaign == name and report.status in _STATUSES
        return report

    def _import_connected(self, data: CampaignData, prep: _Prepared, files, *, replace: bool, dry_run: bool,
                          source: str | None, pending: Future, whole: dict[str, pa.Table],
                          plate_names: list, opened: Future) -> ImportReport:
        with self._connect(opened) as con:
            con.begin()
            large = False
            try:
                report = self._import(con, data, prep, files, replace=replace, dry_run=dry_run,
                                      source=source or "", pending=pending, whole=whole, plate_names=plate_names)
                if report.import_id is None:
                    con.rollback()
                else:
                    # a large import commits straight into the file (one checkpoint at commit), not
                    # into the WAL first and the file at a later CHECKPOINT
                    large = report.n_readings >= CHECKPOINT_READINGS
                    if large:
                        con.execute(Q.COMMIT_INTO_FILE)
                    con.commit()
            except BaseException:
                con.rollback()
                raise
            finally:
                if large:
                    try:
                        con.execute(Q.DEFAULT_CHECKPOINT_THRESHOLD)
                    except duckdb.Error:  # pragma: no cover - a setting of this connection only
                        pass
            if large:
                try:  # merge anything left in the WAL; only an optimisation, the import is committed
                    con.execute(Q.CHECKPOINT)
                except duckdb.Error:
                    pass
        return report

    def _import(self, con, data: CampaignData, prep: _Prepared, files, *, replace: bool, dry_run: bool,
                source: str, pending: Future | None = None, whole: dict[str, pa.Table] | None = None,
                plate_names: list | None = None) -> ImportReport:
        """The import in the open transaction. ``pending`` (fingerprints being computed elsewhere,
        else ``prep.fingerprints``) is waited for only when needed: at once when the campaign has
        stored plates, else after the wells and readings are written. ``whole`` holds the
        prepared wells, factors and readings as Arrow tables, written when every plate is."""
        name = data.manifest.name
        from screenlab.store.decisions import check_round_link

        check_round_link(con, data.manifest)  # a [campaign] decision the store holds for another campaign
        head = con.execute(Q.CURRENT_HEADER, [name]).df()
        new_campaign = head.empty
        manifest_fp = _manifest_fingerprint(data.manifest)
        plate_names = prep.plates["plate"].tolist() if plate_names is None else plate_names

        def fingerprints() -> pd.DataFrame:
            fp = prep.fingerprints if pending is None else pending.result()
            return fp.assign(fp=[_fp_text(r) for r in fp.itertuples()])  # one per plate

        # ---- campaign header: manifest, catalysts, factor names, frame schema ----
        manifest_changed = False
        cats_added: list[str] = []
        cats_changed: list[str] = []
        if new_campaign:
            catalysts = prep.catalysts
            factor_names = tuple(data.factor_names)
            schema = prep.schema
            header_needed = True
        else:
            h = head.iloc[0]
            manifest_changed = h["fingerprint"] != manifest_fp
            stored = _prepared(con.execute(Q.CURRENT_CATALYSTS, [name]).df(), CATALYST_COLS)
            inc = prep.catalysts
            is_new = ~inc["catalyst"].isin(stored["catalyst"]).to_numpy(dtype=bool)
            cats_added = _plain_list(inc.loc[is_new, "catalyst"])
            both = inc.loc[~is_new].merge(stored, on="catalyst", how="left", suffixes=("", "_old"))
            same = np.ones(len(both), dtype=bool)
            for c in CATALYST_COLS:
                if c != "catalyst":
                    same &= _equal_cells(both[c], both[c + "_old"])
            cats_changed = _plain_list(both.loc[~same, "catalyst"])
            # merged catalyst set: stored order (changed rows take the new values), then additions
            merged = stored.drop(columns=["seq"], errors="ignore")
            if replace and cats_changed:
                upd = inc.set_index("catalyst").loc[cats_changed]
                merged = merged.set_index("catalyst")
                merged.loc[cats_changed, upd.columns.drop("seq", errors="ignore")] = upd.drop(
                    columns=["seq"], errors="ignore")
                merged = merged.reset_index()
            catalysts = pd.concat([merged, inc.loc[is_new].drop(columns=["seq"])], ignore_index=True)
            catalysts = _prepared(catalysts, CATALYST_COLS)
            catalysts["seq"] = np.arange(len(catalysts), dtype=np.int64)
            old_factors = tuple(h["factor_names"]) if h["factor_names"] is not None else ()
            factor_names = old_factors + tuple(f for f in data.factor_names if f not in old_factors)
            old_schema = json.loads(h["frame_schema_json"])
            schema = {}
            for frame_name, cols in old_schema.items():
                have = {c for c, _ in cols}
                schema[frame_name] = cols + [c for c in prep.schema[frame_name] if c[0] not in have]
            header_needed = (manifest_changed and replace) or bool(cats_added) or (bool(cats_changed) and replace) \
                or factor_names != old_factors or schema != old_schema

        # ---- plates ----
        stored_fp = con.execute(Q.CURRENT_PLATE_FINGERPRINTS, [name]).df()
        stored_map = dict(zip(stored_fp["plate"], stored_fp["fingerprint"]))
        added, changed, unchanged, what = [], [], [], {}
        # with nothing stored for the campaign every plate is added, whatever its fingerprint
        fps = fingerprints() if stored_map else None
        for row in (fps.itertuples() if fps is not None else ()):  # one per plate
            old = stored_map.get(row.plate)
            if old is None:
                added.append(row.plate)
            elif old == row.fp:
                unchanged.append(row.plate)
            else:
                changed.append(row.plate)
                parts = old.split(":")
                what[row.plate] = [label for label, a, b in zip(("plate row", "layout", "readings"), parts,
                                                                 (row.fp_plate, row.fp_layout, row.fp_readings))
                                   if a != b]
        if fps is None:
            added = list(plate_names)
        kept = sorted(set(stored_map) - set(plate_names))

        if not replace and (changed or manifest_changed or cats_changed):
            bits = []
            if changed:
                detail = "; ".join(f"{p} ({', '.join(what[p])})" for p in changed[:12])
                more = f"; and {len(changed) - 12} more" if len(changed) > 12 else ""
                bits.append(f"plate{'s' if len(changed) > 1 else ''} {detail}{more} differ from the stored data")
            if cats_changed:
                bits.append(f"catalyst{'s' if len(cats_changed) > 1 else ''} {_names(cats_changed)} differ")
            if manifest_changed:
                bits.append("the manifest (campaign.toml) differs")
            raise ImportRefusedError(
                f"campaign {name!r}: {'; '.join(bits)}. Nothing was written. To store the new data as the "
                f"current version (the old version is kept as history), import again with replace "
                f"(screenlab ingest --replace).",
                campaign=name, plates=tuple(changed), catalysts=tuple(cats_changed), manifest=manifest_changed)

        write_plates = added + changed
        # rows of the plates being written (every row when no plate is unchanged: the validation
        # has made sure that each row's plate is in the plates table)
        write_set = set(write_plates)

        def rows(frame: pd.DataFrame) -> pd.DataFrame:
            return frame if not unchanged else frame.loc[_rows_in(frame["plate"], write_set)]

        if whole is None or unchanged:
            out = {"wells": _arrow(rows(prep.wells)), "well_factors": _arrow(rows(prep.factors)),
                   "readings": _arrow(rows(prep.readings))}
        else:
            out = whole
        n_wells, n_readings = out["wells"].num_rows, out["readings"].num_rows

        if new_campaign:
            status = "imported"
        elif not write_plates and not header_needed:
            status = "unchanged"
        elif changed or (manifest_changed and replace) or cats_changed:
            status = "replaced"
        else:
            status = "added_plates"

        message = self._message(name, status, added, changed, unchanged, kept, cats_added, cats_changed,
                                manifest_changed and replace, n_wells, n_readings, dry_run)
        common = dict(campaign=name, plates_added=tuple(added), plates_replaced=tuple(changed),
                      plates_unchanged=tuple(unchanged), n_wells=n_wells, n_readings=n_readings,
                      catalysts_added=tuple(cats_added), catalysts_replaced=tuple(cats_changed),
                      manifest_replaced=bool(manifest_changed and replace), plates_kept=tuple(kept))
        if dry_run:
            return ImportReport(status="dry_run", message=message, import_id=None, **common)
        if status == "unchanged":
            return ImportReport(status=status, message=message, import_id=None, **common)

        import_id = int(con.execute(Q.NEXT_IMPORT_ID).fetchall()[0][0])
        now = datetime.now(timezone.utc).replace(tzinfo=None)
        tag = {"campaign": name, "import_id": import_id}

        if header_needed:
            m = data.manifest
            con.execute(Q.SUPERSEDE_HEADER, [import_id, name])
            con.execute(Q.INSERT_HEADER, [
                name, import_id, manifest_fp, m.description, m.reaction, m.readout_kind, m.readout_scale,
                m.product_per_substrate, m.epsilon_M_cm, m.path_length_cm, m.time_unit, m.concentration_unit,
                m.volume_unit, m.analyte_main, list(m.byproducts), None if m.enantiomers is None else list(m.enantiomers),
                json.dumps(m.analysis, default=str), json.dumps(_manifest_dict(m)), m.source_toml,
                list(factor_names), json.dumps(schema)])
            _bulk_insert(con, "catalysts", _Tagged(_arrow(catalysts), **tag))
        if changed:
            names = pd.DataFrame({"plate": pd.array(changed, dtype="string")})
            con.register("incoming_plate_names", names)
            try:
                con.execute(Q.SUPERSEDE_PLATES, [import_id, name])
            finally:
                con.unregister("incoming_plate_names")
        for table in ("wells", "well_factors", "readings"):
            _bulk_insert(con, table, _Tagged(out[table], **tag))
        fps = fingerprints() if fps is None else fps
        plates = rows(prep.plates).merge(fps[["plate", "fp"]], on="plate", how="left").rename(
            columns={"fp": "fingerprint"})
        _bulk_insert(con, "plates", _Tagged(_arrow(plates), **tag))
        from screenlab import __version__

        lib = con.execute(Q.LIBRARY_VERSION).fetchall()[0][0]
        con.execute(Q.INSERT_IMPORT, [
            import_id, name, now, source, status, added, changed, unchanged, cats_added, cats_changed,
            bool(manifest_changed and replace), n_wells, n_readings, message, __version__, str(lib)])
        _bulk_insert(con, "import_files", _files_frame(files, import_id))
        con.execute(Q.BUMP_GENERATION_WRITTEN_BY, [f"DuckDB {lib}, screenlab {__version__}"])
        return ImportReport(status=status, message=message, import_id=import_id, **common)

    @staticmethod
    def _message(name, status, added, changed, unchanged, kept, cats_added, cats_changed, manifest_replaced,
                 n_wells, n_readings, dry_run) -> str:
        def plates(ps):
            return f"{len(ps)} plate{'s' if len(ps) != 1 else ''} ({_names(ps)})"

        counts = f"{n_wells:,} wells, {n_readings:,} readings"
        if status == "unchanged":
            text = f"{name}: unchanged, nothing to import ({plates(unchanged)} already stored)"
        else:
            parts = []
            if status == "imported":
                parts.append(f"new campaign with {plates(added)}")
            else:
                if added:
                    parts.append(f"added {plates(added)}")
                if changed:
                    parts.append(f"replaced {plates(changed)} (old version kept as history)")
                if unchanged:
                    parts.append(f"{len(unchanged)} unchanged")
            if cats_added and status != "imported":
                parts.append(f"added catalyst{'s' if len(cats_added) != 1 else ''} {_names(cats_added)}")
            if cats_changed:
                parts.append(f"replaced catalyst{'s' if len(cats_changed) != 1 else ''} {_names(cats_changed)}")
            if manifest_replaced:
                parts.append("replaced the manifest")
            text = f"{name}: " + "; ".join(parts) + f" [{counts}]"
        if kept:
            text += f"; {len(kept)} stored plate{'s' if len(kept) != 1 else ''} not in this import left as they are"
        if dry_run:
            text = "dry run, nothing written: " + text.replace(f"{name}: ", f"{name}: would be ", 1) \
                if status != "unchanged" else "dry run: " + text
        return text


def _arrow(frame: pd.DataFrame) -> pa.Table:
    """The frame as an Arrow table, as ``pa.Table.from_pandas(frame, preserve_index=False)`` makes it
    (missing float values as nulls), built column by column without its thread pool and schema
    metadata: Arrow-backed columns as they are, numeric numpy columns wrapped (no copy)."""
    cols = {}
    for c in frame.columns:  # columns, not rows
        s = frame[c]
        if isinstance(s.dtype, np.dtype):
            if s.dtype.kind not in "fiub":
                return pa.Table.from_pandas(frame, preserve_index=False)  # e.g. object: pandas' own inference
            cols[str(c)] = pa.array(s.to_numpy(), from_pandas=True)
        else:
            cols[str(c)] = pa.array(s.array)  # Arrow text, nullable integers: their own __arrow_array__
    return pa.table(cols) if cols else pa.Table.from_pandas(frame, preserve_index=False)


@dataclass(frozen=True)
class _Tagged:
    """The rows of one table of an import and the campaign and import id they are stored under:
    one value each for every row, given to the INSERT as parameters (no per-row column is built)."""

    rows: pa.Table
    campaign: str
    import_id: int


def _bulk_insert(con, table: str, rows: pa.Table | pd.DataFrame | _Tagged) -> None:
    """INSERT ... SELECT from the rows as one Arrow table of one record batch (one statement per
    table, never row by row); :class:`_Tagged` rows give the statement its ``$campaign`` and
    ``$import_id`` parameters.

    Arrow lets DuckDB scan the columns zero-copy; scanning pandas text columns directly costs
    several times more at campaign scale."""
    params = None
    if isinstance(rows, _Tagged):
        params = {"campaign": rows.campaign, "import_id": rows.import_id}
        rows = rows.rows
    data = rows if isinstance(rows, pa.Table) else pa.Table.from_pandas(rows, preserve_index=False)
    if data.num_rows == 0:
        return
    # one record batch: DuckDB inserts a table of several batches (columns in chunks, e.g. straight
    # from the CSV reader) batch by batch and merges the row groups, much slower than one scan
    data = data.combine_chunks()
    view = f"incoming_{table}"
    con.register(view, data)
    try:
        con.execute(Q.BULK_INSERT[table], params)
    finally:
        con.unregister(view)
