"""Storage form: the campaign frames as the store keeps them, and back.

* **Column kinds.** The stored columns of each campaign frame and the kind each is stored as
  (``s`` text, ``f`` float, ``i`` integer) come from the frame schemas of :mod:`screenlab.schema`;
  every other wells column is a named factor, kept in long form (``well_factors``: plate, seq,
  well, factor, value as text; missing cells are not stored).
* **Storage form** (:func:`storage_form`): text as pandas ``string`` (dates as ISO text), integers
  as nullable ``Int64``, floats as float64 with -0.0 made 0.0 (equal values then fingerprint
  equally); absent optional columns as missing.
* **Dtypes back.** Each campaign records the dtypes its frames were imported with
  (``frame_schema_json``); :func:`restore` gives ``load_campaign`` the same dtypes again.
* **Arrow.** Rows go to DuckDB as Arrow tables (:func:`to_arrow`).
* **The store's own contract check** (:func:`check_campaign_frames`): a CampaignData built in code
  (not by the reader) is checked for the columns and keys the store relies on before anything is
  written.
"""
from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from screenlab import schema
from screenlab.errors import Problem, ValidationError
from screenlab.model import DEFAULT_ANALYTE, CampaignData, Manifest

_KIND = {"text": "s", "float": "f", "int": "i"}


def _kinds(frame: schema.FrameSchema) -> dict[str, str]:
    return {c.name: _KIND[c.dtype] for c in frame.columns}


#: stored columns of the campaign frames with their storage kinds, in the schemas' order (the
#: order the fingerprints combine them in)
CATALYST_COLS = _kinds(schema.CATALYSTS)
PLATE_COLS = _kinds(schema.PLATES)
WELL_COLS = _kinds(schema.WELLS)
READING_COLS = _kinds(schema.READINGS)
FRAME_COLS = {"catalysts": CATALYST_COLS, "plates": PLATE_COLS, "wells": WELL_COLS, "readings": READING_COLS}
#: the columns the store cannot do without (the others are stored as missing when absent)
REQUIRED = {"catalysts": ("catalyst",), "plates": ("plate",), "wells": ("plate", "well"),
            "readings": ("plate", "well", "time_h", "value")}


# --------------------------------------------------------------------------------------------
# dtypes: load_campaign gives back the frames with the dtypes they were imported with

def dtype_spec(dtype) -> Any:
    if isinstance(dtype, pd.StringDtype):
        return {"string": dtype.storage, "na": "nan" if dtype.na_value is np.nan else "NA"}
    return str(dtype)


def _dtype_from_spec(spec) -> Any:
    if isinstance(spec, dict) and "string" in spec:
        return pd.StringDtype(spec["string"], na_value=np.nan if spec["na"] == "nan" else pd.NA)
    return pd.api.types.pandas_dtype(spec)


def restore(frame: pd.DataFrame, spec: list[list]) -> pd.DataFrame:
    """``frame`` (as read from the store) with the columns and dtypes of ``spec``
    (``[[column, dtype spec], ...]``, as recorded at import)."""
    if not spec:
        return pd.DataFrame(index=range(len(frame)))
    frame = frame.reset_index(drop=True)    # by position: the frame's index is not carried over
    out = {}
    for col, dspec in spec:
        s = frame[col] if col in frame.columns else pd.Series([pd.NA] * len(frame), dtype=object)
        dtype = _dtype_from_spec(dspec)
        if s.dtype != dtype:                 # most columns come back from DuckDB in their dtype already
            try:
                s = s.astype(dtype)
            except (TypeError, ValueError):
                pass
        out[col] = s
    return pd.DataFrame(out, columns=[c for c, _ in spec])


# --------------------------------------------------------------------------------------------
# storage form

def text(s: pd.Series) -> pd.Series:
    """Text column as pandas ``string`` (missing = NA); non-text values become their str()."""
    if pd.api.types.is_datetime64_any_dtype(s):
        out = s.dt.strftime("%Y-%m-%d %H:%M:%S").str.replace(" 00:00:00", "", regex=False)
        return out.astype("string")
    return s.astype("string")


def storage_form(frame: pd.DataFrame, cols: dict[str, str]) -> pd.DataFrame:
    """The columns ``cols`` of ``frame`` in storage form (absent optional columns as missing)."""
    n = len(frame)
    out = {}
    for col, kind in cols.items():
        if col in frame.columns:
            s = frame[col].reset_index(drop=True)
        else:
            s = pd.Series([pd.NA] * n, dtype=object)
        if kind == "s":
            out[col] = text(s)
        elif kind == "i":
            out[col] = pd.to_numeric(s, errors="coerce").astype("Int64")
        else:
            v = pd.to_numeric(s, errors="coerce").astype("float64")
            out[col] = v + 0.0  # -0.0 -> 0.0 so equal values fingerprint equally
    return pd.DataFrame(out, index=range(n))


@dataclass(frozen=True)
class Prepared:
    """One CampaignData in storage form."""

    catalysts: pd.DataFrame
    plates: pd.DataFrame
    wells: pd.DataFrame
    factors: pd.DataFrame      # long: plate, seq, well, factor, value (non-missing values only)
    readings: pd.DataFrame
    factor_columns: tuple[str, ...]
    schema: dict               # frame -> [[column, dtype spec], ...]


def _long_factors(data: CampaignData, wel: pd.DataFrame, labels: list) -> pd.DataFrame:
    """The named factor columns of ``data.wells`` in long form, each keeping its non-missing cells
    in well order."""
    parts = []
    for c in labels:  # a few named factors
        value = text(data.wells[c].reset_index(drop=True))
        seq = np.flatnonzero(value.notna().to_numpy(dtype=bool))
        parts.append(pd.DataFrame({
            "plate": wel["plate"].array.take(seq), "seq": seq.astype(np.int64), "well": wel["well"].array.take(seq),
            "factor": pd.array([str(c)], dtype="string").take(np.zeros(len(seq), dtype=np.intp)),
            "value": value.array.take(seq)}))
    if parts:
        return pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
    return pd.DataFrame({"plate": pd.array([], dtype="string"), "seq": np.array([], dtype=np.int64),
                         "well": pd.array([], dtype="string"), "factor": pd.array([], dtype="string"),
                         "value": pd.array([], dtype="string")})


def prepare(data: CampaignData, validated: bool = False) -> Prepared:
    """``data`` in storage form (checked first by :func:`check_campaign_frames` unless ``validated``)."""
    if not validated:
        check_campaign_frames(data)
    cat = storage_form(data.catalysts, CATALYST_COLS)
    pla = storage_form(data.plates, PLATE_COLS)
    wel = storage_form(data.wells, WELL_COLS)
    rea = storage_form(data.readings, READING_COLS)
    if "analyte" not in data.readings.columns:
        rea["analyte"] = pd.array([DEFAULT_ANALYTE] * len(rea), dtype="string")
    for frame in (cat, pla, wel, rea):
        frame["seq"] = np.arange(len(frame), dtype=np.int64)
    # every wells column that is not a stored column is a named factor, kept in long form
    labels = [c for c in data.wells.columns if c not in WELL_COLS]
    factors = _long_factors(data, wel, labels)
    dtypes = {name: [[str(c), dtype_spec(frame[c].dtype)] for c in frame.columns]
              for name, frame in (("catalysts", data.catalysts), ("plates", data.plates),
                                  ("wells", data.wells), ("readings", data.readings))}
    return Prepared(cat, pla, wel, factors, rea, tuple(str(c) for c in labels), dtypes)


def rows_in(values: pd.Series, names) -> np.ndarray:
    """Per row: is the cell, as text, one of ``names`` (missing: no)? Judged once per distinct value."""
    codes, uniques = pd.factorize(values, use_na_sentinel=True)
    as_text = pd.Series(uniques).astype("string").tolist()
    hit = np.array([t is not pd.NA and t in names for t in as_text] + [False], dtype=bool)  # last: missing
    return hit[np.asarray(codes, dtype=np.intp)]


# --------------------------------------------------------------------------------------------
# the store's check of frames built in code

def check_campaign_frames(data: CampaignData) -> None:
    """Refuse (ValidationError) frames the store cannot keep: not tables, without a column of
    :data:`REQUIRED`, with a column the store does not know (catalysts, plates, readings; extra
    wells columns are factors), an empty campaign name, missing or repeated keys, rows of a plate
    the plates table does not have. At most 20 rows are named per kind of problem; rows are
    1-based with the header as row 1."""
    problems: list[Problem] = []
    frames = {"catalysts": data.catalysts, "plates": data.plates, "wells": data.wells, "readings": data.readings}
    for name, frame in frames.items():
        if not isinstance(frame, pd.DataFrame):
            problems.append(Problem(name, None, None, None, "is not a table (pandas DataFrame)"))
            continue
        for col in REQUIRED[name]:
            if col not in frame.columns:
                problems.append(Problem(name, None, col, None, "required column is missing"))
        if name in ("catalysts", "plates", "readings"):
            for c in (c for c in frame.columns if c not in FRAME_COLS[name]):
                problems.append(Problem(name, None, str(c), None,
                                        f"column the store does not know; expected only {', '.join(FRAME_COLS[name])}"))
    if not str(data.manifest.name or "").strip():
        problems.append(Problem("campaign.toml", None, "name", None, "campaign name is empty"))
    if problems:
        raise ValidationError(problems, source=f"campaign {data.manifest.name!r}")

    def keys_bad(frame, keys, name):
        # missing or repeated keys, judged on per-column factor codes (the same equality as
        # DataFrame.duplicated, which factorises the key columns too)
        key = np.zeros(len(frame), dtype=np.int64)
        missing = np.zeros(len(frame), dtype=bool)
        for k in keys:  # one or two key columns
            codes, uniques = pd.factorize(frame[k], use_na_sentinel=True)
            missing |= codes < 0
            key = key * (len(uniques) + 1) + (codes + 1)
        bad = missing | pd.Index(key).duplicated(keep="first")
        for pos in np.flatnonzero(bad)[:20]:
            vals = ", ".join(str(frame[k].iloc[pos]) for k in keys)
            problems.append(Problem(name, int(pos) + 2, keys[-1], vals, f"{'/'.join(keys)} missing or not unique"))

    keys_bad(data.catalysts, ["catalyst"], "catalysts")
    keys_bad(data.plates, ["plate"], "plates")
    keys_bad(data.wells, ["plate", "well"], "wells")
    known = set(data.plates["plate"].dropna().astype(str))
    for name in ("wells", "readings"):
        frame = getattr(data, name)
        bad = ~rows_in(frame["plate"], known)
        for pos in np.flatnonzero(bad)[:20]:
            problems.append(Problem(name, int(pos) + 2, "plate", str(frame["plate"].iloc[pos]),
                                    "plate is not in the plates table"))
    if problems:
        raise ValidationError(problems, source=f"campaign {data.manifest.name!r}")


# --------------------------------------------------------------------------------------------
# the manifest as stored

#: Manifest fields added after stores were first written: left out of the stored dict (and so of
#: the fingerprint) while they hold their default None, so an unchanged campaign stays unchanged
LATER_MANIFEST_FIELDS = ("linear_range_max", "parent", "decision")


def manifest_dict(m: Manifest) -> dict:
    d = dataclasses.asdict(m)
    for key in LATER_MANIFEST_FIELDS:
        if d.get(key) is None:
            d.pop(key, None)
    return json.loads(json.dumps(d, default=str))


def manifest_from_json(stored: str) -> Manifest:
    d = json.loads(stored)
    known = {f.name for f in dataclasses.fields(Manifest)}
    d = {k: v for k, v in d.items() if k in known}
    if "byproducts" in d:
        d["byproducts"] = tuple(d["byproducts"] or ())
    if d.get("enantiomers") is not None:
        d["enantiomers"] = tuple(d["enantiomers"])
    return Manifest(**d)


# --------------------------------------------------------------------------------------------
# Arrow and the import's file list

def to_arrow(frame: pd.DataFrame) -> pa.Table:
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


def files_frame(files, import_id: int) -> pd.DataFrame:
    """The import's files (FileRecords, dicts or ``(name, sha256, n_rows)`` tuples) as rows of
    ``import_files``."""
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
