"""Readings as instruments write them: plate grids and sample-named tables.

Both forms are reshaped into the long readings table of text cells (``plate, well, time, value[,
analyte]``) that :func:`screenlab.ingest.validate.check_readings` then checks exactly as it checks
a long ``readings.csv``: the same number parsing, ranges, layout cross-checks, duplicate test and
sort. That is what makes every form give the same stored readings. The reshaped table carries an
:class:`~screenlab.ingest.tables.Origin`, so a problem those checks find names the file (and
sheet), row and column of the cell the value came from.

Plate grids (docs/campaign-format.md, "Other forms of readings")
----------------------------------------------------------------
One file per plate (``<plate>.csv`` / ``<plate>.xlsx``, first sheet) or one workbook with one sheet
per plate (sheet name = plate id). Each holds one block per time point (and analyte):

* a label row: first cell ``time``, second cell the time in the manifest's time unit, optionally
  ``analyte`` and the analyte's name in the next two cells;
* the header row: an empty first cell, then the column numbers 1..C of the plate's format;
* one row per plate row: its letter (A.., any case) first, then one value per column. An empty
  cell (or ``NA``, ``n/a``, ``null``, ``none``) is no reading.

Blank rows may separate blocks (and rows of a block). Lines above the first label row (an
instrument's own header) are skipped and reported in a note. A plate reader reads every position:
values on positions that layout.csv marks ``empty`` or does not list are not imported and are
reported in a note (and as "extra" in the app's preview). Every other irregularity is a problem
naming file (and sheet), row and column: a missing or repeated row letter, a letter outside the
format, a column number missing, repeated or out of range, a value beside the header, text in a
value cell, a block without a time, two blocks for the same time (and analyte), a file for an
unknown plate. For a grid, the column of a problem is the grid's column number (``time`` or
``analyte`` for the label row).

Sample-named readings
---------------------
A readings table with a ``sample`` column and neither ``plate`` nor ``well`` names each well by
the code of layout.csv's ``sample`` column (unique within the campaign). An unknown code is refused
with its row and value; a code read twice at one time is the long form's duplicate reading.

Which form a file is (used for campaign folders, ``screenlab add-readings`` and the app): a CSV or
XLSX whose first non-blank row (first sheet) names the columns ``time`` and ``value`` is a table
(long, or sample-named); otherwise a CSV is the grid of the plate its file name names, and an XLSX
is that plate's grid when its file name is a plate id, else a workbook with one sheet per plate.

Everything is vectorised over cells; the loops run over files, sheets and blocks.
"""
from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass, field
from pathlib import PurePosixPath

import numpy as np
import pandas as pd

from screenlab import plates as platelib
from screenlab.errors import Problem

from .tables import (Origin, RawTable, decode_text, normalise_header, read_table, sep_hint, with_error_cells,
                     xlsx_error_cells)
from .validate import NA_WORDS, READING_COLUMNS, SAMPLE_COLUMN, parse_names

#: the columns of the reshaped long table
LONG_COLUMNS = ("plate", "well", "time", "value", "analyte")
READINGS_EXTENSIONS = (".csv", ".xlsx")


@dataclass
class _Piece:
    """Part of the reshaped long table: text columns and where each cell came from."""

    frame: dict[str, np.ndarray]                         # LONG_COLUMNS as text arrays ('' when not given)
    files: np.ndarray                                    # per row: file (and sheet) label
    rows: np.ndarray                                     # per row: spreadsheet row of the value
    cells: dict[str, tuple[np.ndarray, np.ndarray]]      # column -> (rows, column labels)
    has_analyte: bool
    form: str                                            # long | sample | grid
    pos: tuple[np.ndarray, np.ndarray] | None = None     # grids: plate row and column of each cell (0-based)


@dataclass
class GatheredReadings:
    """The readings of one or more files, reshaped to the long table (not yet checked).

    ``table`` is None when nothing usable arrived (the problems say why). ``reshaped`` is True
    when ``table`` was built from grids, sample codes or several files (it then carries an
    :class:`Origin`, and the problems of its checks should be de-duplicated: one bad time cell of a
    grid is the time of every cell of its block). ``forms`` names the forms that arrived,
    ``records`` the files read as ``(label, n_rows)``, ``outside`` the grid values left out
    because the layout leaves their position empty (``plate, well, n``).
    """

    table: RawTable | None
    reshaped: bool
    forms: tuple[str, ...]
    records: list[tuple[str, int]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    outside: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(
        {"plate": pd.Series(dtype="str"), "well": pd.Series(dtype="str"), "n": pd.Series(dtype="int64")}))


# ----------------------------------------------------------------------------------- helpers

def _text(values) -> pd.Series:
    return pd.Series(np.asarray(values, dtype=object), dtype="str")


def _repeat(value, n: int) -> np.ndarray:
    one = np.empty(1, dtype=object)
    one[0] = value
    return np.repeat(one, n)


def is_sample_table(t: RawTable) -> bool:
    """A readings table naming wells by sample code: a ``sample`` column, no ``plate``, no ``well``."""
    return t.has(SAMPLE_COLUMN) and not t.has("plate") and not t.has("well")


def _plate_for(name: str, plate_ids: list[str]) -> str | None:
    """The plate id a file or sheet name stands for: exact, else the one id equal ignoring case."""
    if name in plate_ids:
        return name
    low = [p for p in plate_ids if p.lower() == name.lower()]
    return low[0] if len(low) == 1 else None


_LABEL = re.compile(r"^[ \t]*[\"']?time[\"']?[ \t]*([,;\t])", re.IGNORECASE | re.MULTILINE)


def _grid_delimiter_text(text: str) -> str | None:
    """The delimiter of a grid file: the character after the first label row's ``time`` (the lines
    above it are an instrument's own and may hold no delimiter, or another one)."""
    m = _LABEL.search(text)
    return m.group(1) if m else None


def _decimal_point(s: pd.Series | np.ndarray, decimal_comma: bool):
    if not decimal_comma:
        return s
    return pd.Series(np.asarray(s, dtype=object), dtype="str").str.replace(",", ".", regex=False).to_numpy(dtype=object)


# ----------------------------------------------------------------------------------- long and sample tables

def _require(t: RawTable, required, problems: list[Problem]) -> bool:
    missing = [c for c in required if not t.has(c)]
    if missing:
        found = ", ".join(t.frame.columns) or "none"
        problems.append(Problem(t.name, 1, ", ".join(missing), None,
                                f"missing required column{'s' if len(missing) > 1 else ''}: "
                                f"{', '.join(missing)} (found: {found})"))
    return not missing


def _unused_note(t: RawTable, known) -> list[str]:
    extra = [c for c in t.frame.columns if c not in known]
    if extra:
        return [f"{t.name}: column{'s' if len(extra) > 1 else ''} {', '.join(extra)} not used"]
    return []


def _table_piece(t: RawTable, problems: list[Problem], notes: list[str]) -> _Piece | None:
    """A long readings table as a piece (for combining it with other files)."""
    if not _require(t, ["plate", "well", "time", "value"], problems):
        return None
    notes.extend(_unused_note(t, READING_COLUMNS))
    n = len(t.frame)
    frame = {c: (t.frame[c].to_numpy(dtype=object) if t.has(c) else _repeat("", n)) for c in LONG_COLUMNS}
    for c in ("time", "value"):
        frame[c] = np.asarray(_decimal_point(frame[c], t.decimal_comma), dtype=object)
    files = _repeat(t.name, n)
    cells = {c: (t.rows, _repeat(c, n)) for c in LONG_COLUMNS}
    return _Piece(frame, files, t.rows, cells, t.has("analyte"), "long")


def _sample_piece(t: RawTable, wells: pd.DataFrame | None, problems: list[Problem],
                  notes: list[str]) -> _Piece | None:
    """A sample-named readings table (``sample, time, value[, analyte]``) as a long piece: each
    code looked up in the layout's sample column; unknown or blank codes are problems (their rows
    are left out)."""
    if not _require(t, [SAMPLE_COLUMN, "time", "value"], problems):
        return None
    notes.extend(_unused_note(t, (SAMPLE_COLUMN, "time", "value", "analyte")))
    if wells is None:  # the layout could not be read: its problems say so
        return None
    if SAMPLE_COLUMN not in wells.columns:
        problems.append(Problem(t.name, 1, SAMPLE_COLUMN, None,
                                "the readings name their wells by sample code, but layout.csv has no 'sample' "
                                "column; add one (a code unique within the campaign for each well read)"))
        return None
    code = t.frame[SAMPLE_COLUMN]
    known = wells[wells[SAMPLE_COLUMN].notna()]
    known = known[~known[SAMPLE_COLUMN].duplicated(keep="first")]  # a repeated code is the layout's problem
    index = pd.Index(known[SAMPLE_COLUMN].astype(str).to_numpy())
    codes, uniques = pd.factorize(code, use_na_sentinel=True)
    pos_u = index.get_indexer(pd.Index(np.asarray(uniques, dtype=object)))  # once per distinct code
    pos = np.append(pos_u, -1)[codes]
    blank = (code == "").to_numpy(dtype=bool)
    unknown = ~blank & (pos < 0)
    rows = t.rows
    for mask, message in ((blank, "a sample code is required"),
                          (unknown, "unknown sample code (not in the 'sample' column of layout.csv)")):
        for i in np.flatnonzero(mask):  # the failing rows only
            problems.append(Problem(t.name, int(rows[i]), SAMPLE_COLUMN, None if blank[i] else str(code.iloc[i]),
                                    message))
    keep = pos >= 0
    idx = np.flatnonzero(keep)
    hit = pos[keep]
    n = len(idx)
    def taken(column: pd.Series, at: np.ndarray, point: bool = False):
        """Cells ``at`` of a text column, kept as (Arrow) text: no per-cell Python objects."""
        out = pd.Series(column.astype("str").array.take(at), copy=False)
        return (out.str.replace(",", ".", regex=False) if point else out).array

    frame = {
        "plate": taken(known["plate"], hit), "well": taken(known["well"], hit),
        "time": taken(t.frame["time"], idx, t.decimal_comma), "value": taken(t.frame["value"], idx, t.decimal_comma),
        "analyte": taken(t.frame["analyte"], idx) if t.has("analyte") else _repeat("", n),
    }
    r = rows[idx]
    # plate and well came from the sample code: report them at the code's cell
    cells = {c: (r, _repeat(SAMPLE_COLUMN if c in ("plate", "well") else c, n)) for c in LONG_COLUMNS}
    return _Piece(frame, _repeat(t.name, n), r, cells, t.has("analyte"), "sample")


# ----------------------------------------------------------------------------------- grids

@dataclass
class _Sheet:
    """One grid file or sheet as a rectangle of stripped text cells (numpy), with the spreadsheet
    row of each row and which rows hold anything."""

    label: str              # file (and sheet) for problems
    name: str               # the plate id it should stand for (file stem or sheet name)
    cells: np.ndarray       # 2-D numpy str array, at least 4 columns
    rows: np.ndarray        # int64, 1-based
    nonblank: np.ndarray    # bool
    decimal_comma: bool = False


def _sheet(label: str, name: str, cells: np.ndarray, decimal_comma: bool = False) -> _Sheet:
    """Cells (any 2-D array of text, '' or NaN for blank) as a :class:`_Sheet`: stripped, padded."""
    raw = np.asarray(cells, dtype=object)
    if raw.ndim != 2:
        raw = raw.reshape(len(raw), -1)
    blank = pd.isna(raw)
    text = np.where(blank, "", raw).astype(str)
    text = np.strings.strip(text)
    if text.shape[1] < 4:
        text = np.concatenate([text, np.full((text.shape[0], 4 - text.shape[1]), "", dtype=text.dtype)], axis=1)
    nonblank = (np.strings.str_len(text) > 0).any(axis=1) if text.size else np.zeros(len(text), dtype=bool)
    return _Sheet(label, name, text, np.arange(1, len(text) + 1, dtype=np.int64), nonblank, decimal_comma)


def _csv_records(text: str, delimiter: str) -> list[list[str]]:
    """The records of a CSV text (csv module; quotes honoured), blank lines kept as empty records."""
    return list(csv.reader(io.StringIO(text), delimiter=delimiter))


def _rectangle(records: list[list[str]]) -> np.ndarray:
    width = max([len(r) for r in records] + [1])
    pad = [""] * width
    return np.array([r + pad[len(r):] for r in records], dtype=object)  # one list per line, not per cell


def _first_record(text: str) -> list[str] | None:
    """The first non-blank line of a CSV text as cells (delimiter picked as for a table, or named
    by Excel's first line ``sep=;``, which is not a record)."""
    lines = text.splitlines()
    hint = sep_hint(text)
    for line in lines[1:] if hint else lines:
        if line.strip():
            delim = hint.group(1) if hint else max((",", ";", "\t"), key=lambda d: (line.count(d), d == ","))
            return next(csv.reader([line], delimiter=delim if line.count(delim) else ","), [])
    return None


def _names_table(cells) -> bool:
    names = {normalise_header(v) for v in cells}
    return "time" in names and "value" in names


def _grid_piece(s: _Sheet, plate: str, fmt: int, problems: list[Problem], notes: list[str]) -> _Piece | None:
    """The blocks of one grid file or sheet as a long piece (see the module docstring).

    Whole-sheet work (lower / upper case, the missing-value words, the numbers of every cell, the
    row letters) is done once per sheet on numpy arrays; the loop runs over the blocks and only
    slices them. The long rows are built at the end from index arrays, vectorised."""
    n_rows, n_cols = platelib.FORMATS[fmt]
    letters_ok = platelib.ROW_LETTERS[:n_rows]
    last = letters_ok[-1]
    F, rows, nonblank, label = s.cells, s.rows, s.nonblank, s.label
    first_cell = np.strings.lower(F[:, 0])
    labels = np.flatnonzero(nonblank & (first_cell == "time"))
    n0 = len(problems)

    def bad(row, column, value, message):
        problems.append(Problem(label, None if row is None else int(row), column,
                                None if value is None else str(value), message))

    if not len(labels):
        bad(None, None, None, "no block found: each block starts with a row whose first cell is 'time' and whose "
                              "second cell is the time; then the header row (empty first cell, column numbers "
                              f"1..{n_cols}) and one row per plate row A-{last}")
        return None
    skipped = np.flatnonzero(nonblank[:labels[0]])
    if len(skipped):
        notes.append(f"{label}: skipped {len(skipped)} line{'s' if len(skipped) != 1 else ''} above the first "
                     f"block (rows {rows[skipped[0]]}-{rows[skipped[-1]]}, an instrument header)")
    empty = np.strings.str_len(F) == 0
    no_value = np.isin(np.strings.lower(F), NA_WORDS)
    upper = np.strings.upper(F[:, 0])
    ridx = np.full(len(F), -1, dtype=np.int64)                  # row letter -> plate row (-1: not one)
    for i, letter in enumerate(letters_ok):  # at most 16 letters
        ridx[upper == letter] = i
    digits = np.strings.isdigit(F)                              # column numbers are whole numbers
    blocks = []                           # (data rows, header columns, their numbers, time text, analyte, label row)
    seen: dict[tuple, int] = {}
    for b, li in enumerate(labels):  # one pass per block (time point / analyte), not per cell
        end = labels[b + 1] if b + 1 < len(labels) else len(F)
        lrow = int(rows[li])
        t_text, a_word, a_name = str(F[li, 1]), str(F[li, 2]), str(F[li, 3])
        block_ok = True
        if a_word and a_word.lower() != "analyte":
            bad(lrow, None, a_word, "unexpected cell in the 'time' row: after the time only 'analyte' and the "
                                    "analyte's name may follow")
            block_ok = False
        elif a_word and not a_name:
            bad(lrow, "analyte", None, "'analyte' must be followed by the analyte's name")
            block_ok = False
        rest = np.flatnonzero(~empty[li, 4:])
        if len(rest):
            bad(lrow, None, F[li, 4 + rest[0]], "unexpected cell in the 'time' row: it holds 'time', the time and "
                                                "optionally 'analyte' and the analyte's name")
            block_ok = False
        if not t_text:
            bad(lrow, "time", None, "a block without a time: the 'time' row needs the time (in the manifest's time "
                                    "unit) in its second cell")
            block_ok = False
        seg = li + 1 + np.flatnonzero(nonblank[li + 1:end])
        if not len(seg) or F[seg[0], 0] != "":
            bad(rows[seg[0]] if len(seg) else lrow, None, F[seg[0], 0] if len(seg) else None,
                f"the 'time' row must be followed by the header row: an empty first cell, then the column numbers "
                f"1..{n_cols}")
            continue
        hdr, data = seg[0], seg[1:]
        hrow = int(rows[hdr])
        if len(data) and empty[data, 0].any():
            j = data[np.flatnonzero(empty[data, 0])[0]]
            bad(rows[j], None, None, "a second header row in one block: each block starts with its own 'time' row "
                                     "(a block without a time)")
            continue
        # header: the column numbers
        filled = np.flatnonzero(~empty[hdr, 1:])
        is_int = digits[hdr, 1 + filled]
        cells = F[hdr, 1 + filled]
        nums = np.where(is_int & (np.strings.str_len(cells) <= 6), cells, "999999").astype(np.int64)
        for k in np.flatnonzero(~is_int):  # the bad header cells only
            bad(hrow, None, F[hdr, 1 + filled[k]], f"not a column number (the header row holds the column numbers "
                                                   f"1..{n_cols} after an empty first cell)")
        outside = is_int & ((nums < 1) | (nums > n_cols))
        for k in np.flatnonzero(outside):
            bad(hrow, str(int(nums[k])), F[hdr, 1 + filled[k]],
                f"column number {int(nums[k])} is outside the plate's {fmt}-well format (columns 1-{n_cols})")
        good = is_int & ~outside
        counts = np.bincount(nums[good].astype(np.int64), minlength=n_cols + 1)[1:]
        for k in np.flatnonzero(counts > 1):
            bad(hrow, str(k + 1), str(k + 1), f"column number {k + 1} appears more than once in the header row")
        missing = np.flatnonzero(counts == 0) + 1
        if len(missing):
            txt = ", ".join(map(str, missing))
            bad(hrow, None, txt, f"the header row lacks column{'s' if len(missing) > 1 else ''} {txt} (a {fmt}-well "
                                 f"plate has columns 1-{n_cols})")
        header_ok = bool(is_int.all() and not outside.any() and (counts == 1).all())
        # the plate rows: their letters
        rb = ridx[data]
        for k in np.flatnonzero(rb < 0):  # the bad rows only
            bad(rows[data[k]], "row letter", F[data[k], 0],
                f"not a row letter of the plate's {fmt}-well format (A-{last}); after the header row a block holds "
                "one row per plate row, its letter first")
        per_row = np.bincount(rb[rb >= 0], minlength=n_rows)
        for i in np.flatnonzero(per_row > 1):
            at = data[rb == i]
            for j in at[1:]:
                bad(rows[j], "row letter", F[j, 0], f"row {letters_ok[i]} appears twice in this block (first on row "
                                           f"{rows[at[0]]})")
        absent = [letters_ok[i] for i in np.flatnonzero(per_row == 0)]
        if absent:
            bad(lrow, None, ", ".join(absent),
                f"the block for time {t_text or '(none)'}{f' and analyte {a_name}' if a_name else ''} has no row "
                f"{', '.join(absent)} (a {fmt}-well plate has rows A-{last}, each once)")
        # values beside the header (under an empty header cell or right of the last number)
        spare = np.ones(F.shape[1], dtype=bool)
        spare[0] = False
        spare[1 + filled] = False
        if len(data) and spare.any():
            side = ~empty[np.ix_(data, np.flatnonzero(spare))]
            for k in np.flatnonzero(side.any(axis=1)):
                j = np.flatnonzero(spare)[np.flatnonzero(side[k])[0]]
                left = filled[1 + filled < j]                   # the numbered header cells left of it
                where = f"right of {F[hdr, 1 + left[-1]]}" if len(left) else "left of the column numbers"
                bad(rows[data[k]], where, F[data[k], j], "a value in a column without a column number in the "
                                                         "header row")
        if not (block_ok and header_ok) or len(problems) > n0:
            continue  # nothing is written anyway; the other blocks are still checked
        try:
            key = (float(t_text.replace(",", ".") if s.decimal_comma else t_text), a_name)
        except ValueError:  # not a number: the readings check says so
            key = (t_text, a_name)
        if key in seen:
            bad(lrow, "time", t_text, f"a second block for time {t_text}{f' and analyte {a_name}' if a_name else ''} "
                                      f"on this plate (first on row {seen[key]})")
            continue
        seen[key] = lrow
        blocks.append((data, 1 + filled, nums.astype(np.int64), t_text, a_name, lrow))
    if len(problems) > n0:
        return None
    # the long rows of every block at once, from index arrays
    r_idx, c_idx, colno, blk = [], [], [], []
    for k, (data, cols, nums, *_ignored) in enumerate(blocks):  # blocks, not cells
        present = ~no_value[np.ix_(data, cols)]
        ri, cj = np.nonzero(present)
        r_idx.append(data[ri])
        c_idx.append(cols[cj])
        colno.append(nums[cj])
        blk.append(np.full(len(ri), k, dtype=np.int64))
    if not blocks:
        return _Piece({col: _repeat("", 0) for col in LONG_COLUMNS}, _repeat(label, 0),
                      np.zeros(0, np.int64), {}, False, "grid", (np.zeros(0, np.int64), np.zeros(0, np.int64)))
    r_idx, c_idx, colno, blk = (np.concatenate(x) for x in (r_idx, c_idx, colno, blk))
    n = len(r_idx)
    t_text = np.array([b[3] for b in blocks], dtype=object)
    if s.decimal_comma:
        t_text = np.array([t.replace(",", ".") for t in t_text], dtype=object)  # one per block
    a_text = np.array([b[4] for b in blocks], dtype=object)
    l_rows = np.array([b[5] for b in blocks], dtype=np.int64)
    letters = np.array(list(letters_ok), dtype=object)
    col_text = colno.astype(str).astype(object)
    value = F[r_idx, c_idx].astype(object)
    if s.decimal_comma:
        value = np.strings.replace(value.astype(str), ",", ".").astype(object)
    frame = {"plate": _repeat(plate, n), "well": letters[ridx[r_idx]] + col_text,
             "time": t_text[blk], "value": value, "analyte": a_text[blk]}
    where = (rows[r_idx], col_text)
    cells = {"plate": (np.zeros(n, np.int64), _repeat(None, n)), "well": where, "value": where,
             "time": (l_rows[blk], _repeat("time", n)), "analyte": (l_rows[blk], _repeat("analyte", n))}
    return _Piece(frame, _repeat(label, n), where[0], cells, bool((a_text != "").any()), "grid",
                  (ridx[r_idx], colno - 1))


def _drop_outside_layout(piece: _Piece, plate: str, used: dict[str, np.ndarray]) -> tuple[_Piece, pd.DataFrame | None]:
    """Grid values on positions the layout leaves empty (role empty, or not listed): a reader reads
    the whole plate. Returns the piece without them and their ``plate, well, n`` (None: there are
    none). ``used`` holds,
    per plate, a rows x columns array: True where the layout has a well that is not empty."""
    if plate not in used or not len(piece.rows):
        return piece, None
    r, c = piece.pos
    inside = used[plate][r, c]
    if inside.all():
        return piece, None
    out = pd.DataFrame({"plate": piece.frame["plate"][~inside], "well": piece.frame["well"][~inside]})
    extra = out.groupby(["plate", "well"], sort=False).size().rename("n").reset_index()
    keep = np.flatnonzero(inside)
    kept = _Piece({k: v[keep] for k, v in piece.frame.items()}, piece.files[keep], piece.rows[keep],
                  {k: (rr[keep], cc[keep]) for k, (rr, cc) in piece.cells.items()}, piece.has_analyte, piece.form,
                  (r[keep], c[keep]))
    return kept, extra.astype({"plate": "str", "well": "str", "n": "int64"})


def _layout_positions(plates: pd.DataFrame | None, wells: pd.DataFrame | None) -> dict[str, np.ndarray]:
    """Per plate, a rows x columns mask of the positions the layout fills (role not empty)."""
    if plates is None or wells is None:
        return {}
    out = {}
    for p in plates.itertuples():  # one per plate
        if int(p.format) in platelib.FORMATS:
            out[str(p.plate)] = np.zeros(platelib.FORMATS[int(p.format)], dtype=bool)
    w = wells[(wells["role"].astype(str) != "empty")]
    codes, uniques = pd.factorize(w["plate"].astype(str))
    r = w["row"].to_numpy(dtype=np.int64)
    c = w["col"].to_numpy(dtype=np.int64)
    for k, plate in enumerate(uniques):  # one per plate
        if plate in out:
            m = codes == k
            shape = out[plate].shape
            ok = m & (r >= 0) & (r < shape[0]) & (c >= 0) & (c < shape[1])
            out[plate][r[ok], c[ok]] = True
    return out


def _joined(parts) -> pd.Series:
    """Text column parts (numpy object arrays or pandas text arrays) as one ``str`` column."""
    if all(isinstance(x, pd.api.extensions.ExtensionArray) for x in parts):
        if len(parts) == 1:
            return pd.Series(parts[0], copy=False)
        return pd.concat([pd.Series(x, copy=False) for x in parts], ignore_index=True)
    return _text(np.concatenate([np.asarray(x, dtype=object) for x in parts]))


def _combine(pieces: list[_Piece], label: str) -> RawTable:
    """One long table (text) from the pieces, with the origin of every cell."""
    with_analyte = any(p.has_analyte for p in pieces)
    cols = list(LONG_COLUMNS if with_analyte else LONG_COLUMNS[:-1])
    frame = pd.DataFrame({c: _joined([p.frame[c] for p in pieces]) for c in cols})
    files = np.concatenate([p.files for p in pieces])
    rows = np.concatenate([p.rows for p in pieces]).astype(np.int64)
    n = len(frame)
    cells = {}
    for c in cols:
        r = [p.cells[c][0] if c in p.cells else p.rows for p in pieces]
        lab = [p.cells[c][1] if c in p.cells else _repeat(c, len(p.rows)) for p in pieces]
        cells[c] = (np.concatenate(r).astype(np.int64) if n else np.zeros(0, np.int64),
                    np.concatenate(lab) if n else _repeat(None, 0))
    return RawTable(name=label, frame=frame, rows=rows, origin=Origin(files=files, cells=cells))


# ----------------------------------------------------------------------------------- the files of one delivery

def _read_csv_grid(name: str, stem: str, text: str) -> _Sheet:
    delim = _grid_delimiter_text(text) or ","
    return _sheet(name, stem, _rectangle(_csv_records(text, delim)), decimal_comma=delim in (";", "\t"))


def _xlsx_sheets(name: str, data: bytes, problems: list[Problem]) -> dict[str, np.ndarray] | None:
    """Every sheet of a workbook as a 2-D object array of cells (NaN blank); None when unreadable."""
    try:
        book = pd.read_excel(io.BytesIO(data), engine="calamine", sheet_name=None, header=None, dtype=str)
    except Exception as exc:  # the parser raises many types; any of them means "not a readable workbook"
        problems.append(Problem(name, None, None, None, f"cannot be read as an Excel workbook: {exc}"))
        return None
    errors = xlsx_error_cells(data)
    if errors:
        book = {k: (with_error_cells(v.astype(object), errors[str(k)]) if str(k) in errors else v)
                for k, v in book.items()}
    return {str(k): v.to_numpy(dtype=object) for k, v in book.items()}


def gather_readings(files: dict[str, bytes], *, plates: pd.DataFrame | None, wells: pd.DataFrame | None,
                    problems: list[Problem], label: str = "readings") -> GatheredReadings:
    """Read the readings files of one delivery (any mix of forms) into one long table.

    ``files`` maps a label (a file name or path, e.g. ``readings/UV-25.csv``) to its bytes; each is
    classified by its content (module docstring). ``plates`` / ``wells`` are the campaign's checked
    plates and layout (None when their files could not be read: the grid and sample checks that
    need them are skipped). Problems are appended; nothing is raised. ``label`` names the whole
    delivery in problems about it.
    """
    notes: list[str] = []
    records: list[tuple[str, int]] = []
    tables: list[RawTable] = []
    grids: list[_Sheet] = []
    plate_ids = [] if plates is None else plates["plate"].astype(str).tolist()
    fmt_of = {} if plates is None else dict(zip(plates["plate"].astype(str), plates["format"].astype(int)))
    for name, data in files.items():  # a handful of files (one per plate at most)
        base = PurePosixPath(name.replace("\\", "/")).name
        stem, ext = (base.rsplit(".", 1) + [""])[:2]
        ext = "." + ext.lower()
        if ext not in READINGS_EXTENSIONS:
            problems.append(Problem(name, None, None, None, "not a readings file: expected .csv or .xlsx"))
            continue
        if ext == ".csv":
            text = decode_text(name, data, notes)
            first = _first_record(text)
            if first is None:
                problems.append(Problem(name, None, None, None, "the file is empty"))
                continue
            if _names_table(first):
                t = read_table(name, data, problems)
                if t is not None:
                    tables.append(t)
                    records.append((name, t.n_rows))
            else:
                g = _read_csv_grid(name, stem, text)
                grids.append(g)
                records.append((name, int(g.nonblank.sum())))
            continue
        sheets = _xlsx_sheets(name, data, problems)
        if sheets is None:
            continue
        first_sheet = next(iter(sheets.values()), None)
        if first_sheet is not None and len(first_sheet):
            s0 = _sheet(name, stem, first_sheet)
            head = s0.cells[int(np.argmax(s0.nonblank))] if s0.nonblank.any() else []
            if _names_table(list(head)):
                t = read_table(name, data, problems)
                if t is not None:
                    tables.append(t)
                    records.append((name, t.n_rows))
                continue
        if plates is not None and _plate_for(stem, plate_ids) is not None:  # one plate's grid: its first sheet
            if first_sheet is None or not len(first_sheet):
                problems.append(Problem(name, None, None, None, "the file is empty"))
                continue
            g = _sheet(name, stem, first_sheet)
            grids.append(g)
            records.append((name, int(g.nonblank.sum())))
            continue
        n_lines = 0
        for sheet, cells in sheets.items():  # a workbook: one sheet per plate
            g = _sheet(f"{name} [sheet {sheet}]", sheet, cells) if len(cells) else None
            if g is None or not g.nonblank.any():
                problems.append(Problem(f"{name} [sheet {sheet}]", None, None, None, "the sheet is empty"))
                continue
            grids.append(g)
            n_lines += int(g.nonblank.sum())
        records.append((name, n_lines))

    pieces: list[_Piece] = []
    forms: list[str] = []
    outside_parts = []
    single_long = len(tables) == 1 and not grids and not is_sample_table(tables[0])
    for t in tables:
        if is_sample_table(t):
            p = _sample_piece(t, wells, problems, notes)
            forms.append("sample")
        else:
            p = None if single_long else _table_piece(t, problems, notes)
            forms.append("long")
        if p is not None:
            pieces.append(p)
    used = _layout_positions(plates, wells)
    done: dict[str, str] = {}
    for g in grids:  # one per plate
        forms.append("grid")
        if plates is None:
            continue
        plate = _plate_for(g.name, plate_ids)
        if plate is None:
            where = "sheet" if "[sheet " in g.label else "file"
            problems.append(Problem(g.label, None, None, g.name,
                                    f"a grid {where} for an unknown plate: its name must be a plate id of plates.csv "
                                    f"({', '.join(plate_ids[:8])}{' ...' if len(plate_ids) > 8 else ''})"))
            continue
        if plate in done:
            problems.append(Problem(g.label, None, None, plate, f"a second grid for plate {plate} (the first is "
                                                                f"{done[plate]})"))
            continue
        done[plate] = g.label
        if fmt_of.get(plate, 0) not in platelib.FORMATS:  # its plates.csv row is wrong: reported there
            continue
        p = _grid_piece(g, plate, fmt_of[plate], problems, notes)
        if p is None:
            continue
        if wells is not None:
            p, extra = _drop_outside_layout(p, plate, used)
            if extra is not None:
                n_val = int(extra["n"].sum())
                shown = ", ".join(extra["well"].astype(str).tolist()[:12])
                more = f" and {len(extra) - 12} more" if len(extra) > 12 else ""
                notes.append(f"{g.label}: {n_val} value{'s' if n_val != 1 else ''} on {len(extra)} "
                             f"position{'s' if len(extra) != 1 else ''} that layout.csv marks empty or does not list "
                             f"{'were' if n_val != 1 else 'was'} not imported ({shown}{more})")
                outside_parts.append(extra)
        pieces.append(p)
    outside = (pd.concat(outside_parts, ignore_index=True) if outside_parts
               else GatheredReadings(None, False, ()).outside)
    if single_long:
        return GatheredReadings(tables[0], False, ("long",), records, notes, outside)
    if not pieces:
        return GatheredReadings(None, True, tuple(dict.fromkeys(forms)), records, notes, outside)
    return GatheredReadings(_combine(pieces, label), True, tuple(dict.fromkeys(forms)), records, notes, outside)


def reshape_sample_table(t: RawTable, wells: pd.DataFrame | None, problems: list[Problem],
                         notes: list[str]) -> RawTable | None:
    """A sample-named readings table as the long table (with the origin of its cells)."""
    p = _sample_piece(t, wells, problems, notes)
    return None if p is None else _combine([p], t.name)


def unique_problems(problems: list[Problem]) -> list[Problem]:
    """The problems without repeats, first occurrence first (a grid's bad time cell is reported by
    every cell of its block)."""
    return list(dict.fromkeys(problems))


# ----------------------------------------------------------------------------------- what arrived

#: statuses of a position in :func:`arrival_map`
ARRIVAL_STATUSES = {
    "read": "has readings",
    "missing": "expected (in the layout, not empty) but no reading arrived",
    "extra": "a reading arrived for a position the layout leaves empty or does not list",
    "empty": "empty in the layout, nothing arrived",
}


def arrival_map(table: RawTable | None, outside: pd.DataFrame, plates: pd.DataFrame, wells: pd.DataFrame,
                only_plates=None) -> pd.DataFrame:
    """Every position of the plates (``only_plates``: these only) with what arrived for it.

    Columns: ``plate, well, row, col, role, catalyst, n_readings, status`` (status one of
    :data:`ARRIVAL_STATUSES`). Readings come from the reshaped, not yet checked ``table`` (wells
    that do not parse are left out) and from the grid values left out (``outside``).
    """
    plates = plates if only_plates is None else plates[plates["plate"].astype(str).isin(list(only_plates))]
    grid = []
    for p in plates.itertuples():  # one per plate
        if int(p.format) not in platelib.FORMATS:
            continue
        allw = platelib.all_wells(int(p.format))
        grid.append(allw.assign(plate=str(p.plate)))
    cols = ["plate", "well", "row", "col", "role", "catalyst", "n_readings", "status"]
    if not grid:
        return pd.DataFrame(columns=cols)
    pos = pd.concat(grid, ignore_index=True)
    lay = wells[["plate", "well", "role", "catalyst"]].astype({"plate": str, "well": str})
    pos = pos.merge(lay, on=["plate", "well"], how="left")
    counts = []
    if table is not None and len(table.frame) and table.has("plate") and table.has("well"):
        parsed = parse_names(table.frame["well"])
        ok = parsed["well"].notna().to_numpy()
        got = pd.DataFrame({"plate": table.frame["plate"].astype(str).to_numpy()[ok],
                            "well": parsed["well"].astype(str).to_numpy()[ok]})
        counts.append(got.groupby(["plate", "well"]).size().rename("n").reset_index())
    if len(outside):
        counts.append(outside[["plate", "well", "n"]].astype({"plate": str, "well": str}))
    if counts:
        n = pd.concat(counts, ignore_index=True).groupby(["plate", "well"])["n"].sum().reset_index()
        pos = pos.merge(n, on=["plate", "well"], how="left")
    else:
        pos["n"] = 0
    pos["n_readings"] = pos.pop("n").fillna(0).astype("int64")
    used = pos["role"].notna() & (pos["role"].astype(str) != "empty")
    has = pos["n_readings"] > 0
    pos["status"] = np.select([used & has, used & ~has, ~used & has], ["read", "missing", "extra"], "empty")
    pos["role"] = pos["role"].astype("str")
    pos["catalyst"] = pos["catalyst"].astype("str")
    return pos[cols]
