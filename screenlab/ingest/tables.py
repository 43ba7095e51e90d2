"""Turn the bytes of one CSV or XLSX file into a frame of stripped text cells.

Every cell is kept as text here; numbers are parsed (and reported) by :mod:`.validate`, so a bad
cell never stops the reading of the others. Accepted spreadsheet quirks:

* UTF-8 with or without a byte-order mark; UTF-16 with its byte-order mark (Excel's "Unicode
  text"); cp1252 (Windows "ANSI") when the bytes are not UTF-8, with a note saying so;
* Excel's first line ``sep=;`` (its delimiter hint): read as the delimiter and not counted as a
  row, as Excel shows the file;
* comma, semicolon or tab as delimiter (the one that occurs most often in the header line wins);
  with semicolon or tab, a comma inside a number is a decimal comma;
* CRLF line ends, padded cells and headers, header names in any case (``Substrate Conc`` is
  ``substrate_conc``), blank rows anywhere, trailing delimiters and empty trailing columns;
* XLSX: first sheet, read with ``pandas.read_excel(engine="calamine")`` as text; date cells become
  ISO dates; a cell holding a spreadsheet error (``#DIV/0!``, ``#N/A``), which the reader gives as
  empty, is given its error text back (:func:`xlsx_error_cells`), so it is reported as what it is.

Row numbers follow the spreadsheet: the header is row 1, the first data row is row 2.
"""
from __future__ import annotations

import io
import re
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv

from screenlab.errors import Problem

_WS = re.compile(r"\s+")
_PARSER_SAW = re.compile(r"Expected (\d+) fields in line (\d+), saw (\d+)")
_PARSER_EOF = re.compile(r"EOF inside string starting at row (\d+)")


@dataclass(frozen=True)
class Origin:
    """Where the cells of a reshaped table came from (readings given as plate grids or by sample
    code, turned into the long readings table before they are checked).

    ``files`` holds each row's file label (for a grid, the file and sheet); ``cells`` maps a
    column of the reshaped table to, per row, the spreadsheet row (0: none) and the column label
    of the cell that column's value was read from. A column not in ``cells`` is reported with the
    row's own spreadsheet row and its own name.
    """

    files: np.ndarray
    cells: dict[str, tuple[np.ndarray, np.ndarray]] = field(default_factory=dict)

    def locate(self, column: str | None, idx: np.ndarray, rows: np.ndarray
               ) -> tuple[np.ndarray, np.ndarray, list]:
        """(file labels, spreadsheet rows, column labels) of the rows ``idx`` for ``column``."""
        files = self.files[idx]
        if column in self.cells:
            r, c = self.cells[column]
            return files, r[idx], list(c[idx])
        return files, rows[idx], [column] * len(idx)


@dataclass
class RawTable:
    """One table as text.

    ``frame`` has one column per (normalised) header name, all cells stripped strings ('' when
    blank); ``rows`` holds each frame row's spreadsheet row number (header = 1). ``origin`` is
    set for a table reshaped from another form (see :class:`Origin`): problems are then reported
    where the cell came from.
    """

    name: str
    frame: pd.DataFrame
    rows: np.ndarray
    decimal_comma: bool = False
    notes: list[str] = field(default_factory=list)
    origin: Origin | None = None

    @property
    def n_rows(self) -> int:
        return len(self.frame)

    def has(self, column: str) -> bool:
        return column in self.frame.columns


_GUARD = r"^'([=+\-@])"  # no look-ahead: pyarrow (RE2) runs it natively, about 8x faster
_GUARD_KEEP = r"\1"
_STR = pd.StringDtype("pyarrow", na_value=np.nan)  # pandas' default text dtype ("str"), as read_csv gives


def normalise_header(name: str) -> str:
    """Lower-case, strip, runs of white space to one underscore (``' Substrate Conc '`` -> ``substrate_conc``)."""
    return _WS.sub("_", str(name).replace("\ufeff", "").strip().lower())


def decode_text(name: str, data: bytes, notes: list[str]) -> str:
    """UTF-16 with its byte-order mark (Excel's "Unicode text"), UTF-8 (BOM or not), else cp1252
    with a note; never raises."""
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        try:
            text = data.decode("utf-16")
            notes.append(f"{name}: read as UTF-16 (its byte-order mark says so).")
            return text
        except UnicodeDecodeError:
            pass
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        try:
            text = data.decode("cp1252")
        except UnicodeDecodeError:
            text = data.decode("latin-1")
        notes.append(f"{name}: not UTF-8; read as Windows-1252 (cp1252). Save as UTF-8 to be sure of "
                     "non-ASCII characters.")
    return text


#: the first line ``sep=;`` that Excel writes and reads as the delimiter of the lines after it
SEP_HINT = re.compile(r"\s*\"?sep=([,;\t|])\"?[,;\t|]*\s*", re.IGNORECASE)


def sep_hint(text: str) -> re.Match | None:
    """Excel's delimiter line, when it is the first line of ``text`` (its delimiter: ``group(1)``)."""
    return SEP_HINT.fullmatch(re.match(r"[^\r\n]*", text).group(0))      # the first line, not a copy of the rest


def _pick_delimiter(header_line: str) -> str:
    counts = {d: header_line.count(d) for d in (",", ";", "\t")}
    best = max(counts, key=lambda d: (counts[d], d == ","))
    return best if counts[best] > 0 else ","


def _arrow_cells(body: str | bytes, delim: str, n_cols: int, checked: bool = False
                 ) -> tuple[pd.DataFrame, np.ndarray, np.ndarray | None] | None:
    """Fast path: ``body`` (lines joined by newline) read by pyarrow.csv as text cells, already
    stripped and formula-guard cleaned; returns (cells, record index of each cells row, all-True
    non-blank mask when no row can be blank else None) or None.

    Taken only when the result is the same as the pandas path's: ASCII text without the unit
    separator 0x1f (so ASCII white space stripping equals ``str.strip``), no quote character (so
    records are lines) and every non-blank
    line with the header's number of fields (pyarrow refuses ragged rows; the pandas path widens).
    Blank lines are skipped by pyarrow; their record numbers are recovered from the newline offsets.
    """
    if isinstance(body, str):
        if '"' in body or not body.isascii():
            return None
        raw = body.encode("ascii")
    else:
        raw = body
        if not checked and (b'"' in raw or not raw.isascii()):  # ``checked``: the caller has
            return None
    if b"\x1f" in raw:  # US: white space to str.strip, not to Arrow's ASCII trim (FS, GS, RS break lines)
        return None
    try:
        table = pacsv.read_csv(
            pa.BufferReader(pa.py_buffer(raw)),  # read by Arrow in place (not through a Python file)
            read_options=pacsv.ReadOptions(autogenerate_column_names=True, use_threads=True),
            parse_options=pacsv.ParseOptions(delimiter=delim, quote_char=False, double_quote=False,
                                             escape_char=False, newlines_in_values=False,
                                             ignore_empty_lines=True),
            convert_options=pacsv.ConvertOptions(
                column_types={f"f{i}": pa.large_string() for i in range(n_cols)}, strings_can_be_null=False,
                quoted_strings_can_be_null=False, null_values=[], true_values=[], false_values=[]))
    except (pa.ArrowInvalid, pa.ArrowException):
        return None
    if table.num_columns != n_cols:
        return None
    # record index of every non-empty line: lines are separated by single newlines (no quotes)
    buf = np.frombuffer(raw, dtype=np.uint8)
    if int(np.count_nonzero(buf == 10)) + 1 == table.num_rows:
        records = np.arange(table.num_rows)  # as many records as lines: no line is empty
    else:
        nl = np.flatnonzero(buf == 10)
        starts = np.concatenate(([0], nl + 1))
        ends = np.concatenate((nl, [len(buf)]))
        records = np.flatnonzero(ends > starts)
    if len(records) != table.num_rows:
        return None
    # trimming and the guard run only when the file holds a character they act on: the lines hold
    # no CR, LF, VT or FF (line breaks), so a space or tab (ASCII white space) and an apostrophe
    trim = b" " in raw or b"\t" in raw
    guard = b"'" in raw
    cols = {}
    for j, c in enumerate(table.columns):
        if trim:
            c = pc.ascii_trim_whitespace(c)
        if guard:
            c = pc.replace_substring_regex(c, pattern=_GUARD, replacement=_GUARD_KEEP)
        cols[j] = pd.Series(pd.array(c, dtype=_STR), copy=False)
    # a blank row has every cell empty, so its first one; when no first cell is, no row is blank
    first = cols[0].array._pa_array if cols else None
    maybe_blank = first is None or (len(first) > 0 and pc.min(pc.binary_length(first)).as_py() == 0)
    nonblank = None if maybe_blank else np.ones(table.num_rows, dtype=bool)
    return pd.DataFrame(cols), records, nonblank


#: ASCII characters that ``str.splitlines`` takes as line breaks besides CR and LF
_OTHER_BREAKS = (b"\x0b", b"\x0c", b"\x1c", b"\x1d", b"\x1e")
#: ASCII white space of ``str.strip`` once those are excluded (LF, CR are line ends here)
_BLANK = b" \t\x1f"


def _read_plain_csv(data: bytes) -> tuple[pd.DataFrame, int, str, np.ndarray, np.ndarray | None] | None:
    """The fast path straight from the file's bytes, skipping the decode / splitlines / join /
    encode of :func:`_read_csv_cells` (which it equals): taken for ASCII files without a quote and
    without the rarer line-break characters (VT, FF, FS, GS, RS), else None. Returns what
    ``_read_csv_cells`` returns.

    For such bytes, ``str.splitlines`` breaks lines at LF, CR LF and CR only, so normalising CR LF
    and CR to LF and splitting at LF gives the same lines, and a line is blank for ``str.strip``
    when it holds only space, tab and US (0x1f)."""
    if not data.isascii() or b'"' in data or any(b in data for b in _OTHER_BREAKS):
        return None
    if b"\r" in data:
        data = data.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
    lead, start = 0, 0
    while True:  # leading blank lines (a handful)
        end = data.find(b"\n", start)
        line = data[start:] if end < 0 else data[start:end]
        if line.strip(_BLANK):
            break
        if end < 0:
            return None  # no header at all: the text path says so
        lead, start = lead + 1, end + 1
    header = line.decode("ascii")
    delim = _pick_delimiter(header)
    body = data[start:]
    if body.endswith(b"\n"):  # as "\n".join(text.splitlines()) has it: no final line end
        body = body[:-1]
    fast = _arrow_cells(body, delim, header.count(delim) + 1, checked=True)
    if fast is None:
        return None
    return fast[0], lead, delim, fast[1], fast[2]


def _read_csv_cells(name: str, text: str, problems: list[Problem]
                    ) -> tuple[pd.DataFrame, int, str, np.ndarray | None, np.ndarray | None] | None:
    """Text -> (cells frame with header row first, row offset, delimiter, record index of each
    cells row or None when every record is a row, non-blank row mask when known) or None when
    unreadable.

    The frame from the Arrow fast path is already stripped and guard-cleaned (record index given);
    the pandas path returns raw cells (record index None)."""
    lines = text.splitlines()
    hint = sep_hint(text)
    if hint:                      # Excel's delimiter line: not a row (Excel does not show it either)
        lines = lines[1:]
    lead = 0
    while lead < len(lines) and not lines[lead].strip():
        lead += 1
    if lead == len(lines):
        problems.append(Problem(name, None, None, None, "the file is empty"))
        return None
    body = "\n".join(lines[lead:])
    delim = hint.group(1) if hint else _pick_delimiter(lines[lead])
    fast = _arrow_cells(body, delim, lines[lead].count(delim) + 1)
    if fast is not None:
        return fast[0], lead, delim, fast[1], fast[2]
    kwargs = dict(sep=delim, header=None, dtype=str, keep_default_na=False, na_filter=False,
                  skip_blank_lines=False, engine="c", quotechar='"')
    names = None
    for _attempt in range(8):  # widen the frame when later rows carry trailing delimiters
        try:
            if names is None:
                cells = pd.read_csv(io.StringIO(body), **kwargs)
            else:
                cells = pd.read_csv(io.StringIO(body), names=list(range(names)), **kwargs)
            break
        except pd.errors.ParserError as exc:
            m = _PARSER_SAW.search(str(exc))
            if not m:
                eof = _PARSER_EOF.search(str(exc))
                if eof:  # pandas counts records from 0; the spreadsheet from 1
                    problems.append(Problem(name, int(eof.group(1)) + 1 + lead, None, None,
                                            'a quote (") opened on this row is never closed, so the rest of '
                                            "the file cannot be read"))
                else:
                    problems.append(Problem(name, None, None, None, f"cannot be read as a table: {exc}"))
                return None
            names = max(names or 0, int(m.group(3)), int(m.group(1)))
        except (ValueError, MemoryError) as exc:  # pragma: no cover - defensive
            problems.append(Problem(name, None, None, None, f"cannot be read as a table: {exc}"))
            return None
    else:  # pragma: no cover - eight widenings without success
        problems.append(Problem(name, None, None, None, "cannot be read as a table: rows of very different lengths"))
        return None
    return cells.fillna(""), lead, delim, None, None


_SHEET_TAG = re.compile(rb"<(?:\w+:)?sheet\b[^>]*>")
_REL_TAG = re.compile(rb"<(?:\w+:)?Relationship\b[^>]*>")
_CELL = re.compile(rb"<(?:\w+:)?c\b([^>]*?)(?:/>|>(.*?)</(?:\w+:)?c>)", re.S)
_VALUE = re.compile(rb"<(?:\w+:)?v\b[^>]*>([^<]*)</(?:\w+:)?v>")
_ANY_ERROR = re.compile(rb"""\st\s*=\s*["']e["']""")


def _attr(tag: bytes, name: bytes) -> str | None:
    """An XML attribute's value in a tag (either quote; a namespace prefix allowed, ``r:id``)."""
    m = re.search(rb"(?:^|\s)" + re.escape(name) + rb"""\s*=\s*(["'])(.*?)\1""", tag, re.S)
    return m.group(2).decode("utf-8", "replace") if m else None


def xlsx_error_cells(data: bytes) -> dict[str, dict[tuple[int, int], str]]:
    """Per worksheet name: the cells holding a spreadsheet error (``#DIV/0!``, ``#N/A``, ...) as
    {(row, column) 0-based from A1: its text}. The workbook reader gives such cells as empty; put
    back, they are reported as what they are. {} when the file is no workbook."""
    import zipfile

    try:
        with zipfile.ZipFile(io.BytesIO(data)) as z:
            names = set(z.namelist())
            rels = {}
            for tag in _REL_TAG.findall(z.read("xl/_rels/workbook.xml.rels")):
                rid, target = _attr(tag, b"Id"), _attr(tag, b"Target")
                if rid and target:
                    rels[rid] = target
            out = {}
            for tag in _SHEET_TAG.findall(z.read("xl/workbook.xml")):
                name, rid = _attr(tag, b"name"), _attr(tag, b"r:id")
                target = rels.get(rid or "", "")
                member = target.lstrip("/") if target.startswith("/") else "xl/" + target
                if name is None or "worksheets/" not in member or member not in names:
                    continue                                  # a chartsheet or a dangling entry
                raw = z.read(member)
                found = {}
                if _ANY_ERROR.search(raw):                     # most sheets have none: no cell-by-cell pass
                    for attrs, body in _CELL.findall(raw):
                        if _attr(attrs, b"t") != "e":
                            continue
                        ref, v = _attr(attrs, b"r"), _VALUE.search(body or b"")
                        m = re.fullmatch(r"([A-Z]+)([0-9]+)", ref or "")
                        if not m or not v:
                            continue
                        c = 0
                        for ch in m.group(1):
                            c = c * 26 + ord(ch) - 64
                        found[(int(m.group(2)) - 1, c - 1)] = v.group(1).decode("utf-8", "replace")
                if found:
                    out[name] = found
            return out
    except (zipfile.BadZipFile, KeyError, OSError, ValueError):
        return {}


def with_error_cells(cells: pd.DataFrame, errors: dict[tuple[int, int], str]) -> pd.DataFrame:
    """``cells`` (0-based from A1) with the spreadsheet errors written into their empty cells."""
    for (r, c), text in errors.items():            # a loop over error cells (a handful)
        if r < cells.shape[0] and c < cells.shape[1] and (pd.isna(cells.iat[r, c]) or cells.iat[r, c] == ""):
            cells.iat[r, c] = text
    return cells


def _read_xlsx_cells(name: str, data: bytes, problems: list[Problem]) -> pd.DataFrame | None:
    try:
        with pd.ExcelFile(io.BytesIO(data), engine="calamine") as book:     # opened once: sheet 0 and its name
            first = book.sheet_names[0]
            cells = pd.read_excel(book, sheet_name=first, header=None, dtype=str)
    except Exception as exc:  # the parser raises many types; any of them means "not a readable workbook"
        problems.append(Problem(name, None, None, None, f"cannot be read as an Excel workbook: {exc}"))
        return None
    cells = cells.fillna("").astype(str)
    errors = xlsx_error_cells(data).get(first)
    if errors:
        cells = with_error_cells(cells, errors)
    # date cells arrive as 'YYYY-MM-DD 00:00:00'; keep the ISO date
    for c in cells.columns:
        cells[c] = cells[c].str.replace(r"^(\d{4}-\d{2}-\d{2})[ T]00:00:00$", r"\1", regex=True)
    return cells


def _nonblank(cells: pd.DataFrame) -> np.ndarray:
    """Rows with at least one non-empty cell; from the Arrow string lengths when every column is
    an Arrow text column without nulls (as the CSV paths give), else by comparing cells with ''."""
    total = np.zeros(len(cells), dtype=np.int64)
    for j in range(cells.shape[1]):  # columns, not rows
        arr = getattr(cells.iloc[:, j].array, "_pa_array", None)
        if arr is None or arr.null_count or not pa.types.is_string(arr.type) and not pa.types.is_large_string(arr.type):
            return (cells != "").any(axis=1).to_numpy()
        total += pc.binary_length(arr).to_numpy()
    return total > 0


def read_table(name: str, data: bytes, problems: list[Problem]) -> RawTable | None:
    """Read one CSV/XLSX file into a :class:`RawTable`; problems are appended, never raised.

    Returns None when the file has no usable header (the problem is recorded).
    """
    notes: list[str] = []
    decimal_comma = False
    offset = 0
    records = nonblank = None
    if name.lower().endswith(".xlsx"):
        cells = _read_xlsx_cells(name, data, problems)
        if cells is None:
            return None
    else:
        # the fast path takes no delimiter line (a quoted one it refuses anyway, for its quote)
        got = _read_plain_csv(data) if b"sep=" not in data[:16].lower() else None
        if got is None:
            text = decode_text(name, data, notes)
            got = _read_csv_cells(name, text, problems)
            hint = sep_hint(text)
            if got is not None and hint:
                notes.append(f"{name}: its first line {hint.group(0).strip()!r} (Excel's delimiter line) "
                             "names the delimiter; rows are counted from the header, as Excel shows them.")
        if got is None:
            return None
        cells, offset, delim, records, nonblank = got
        decimal_comma = delim in (";", "\t")
    # strip padding; a leading apostrophe before = + - @ is the formula guard our own exports add
    # (screenlab.export.safe), so such cells read back as the text that was exported
    if records is None and len(cells.columns):
        cells = cells.apply(lambda s: s.str.strip().str.replace(_GUARD, _GUARD_KEEP, regex=True))
    if cells.empty:
        problems.append(Problem(name, None, None, None, "the file is empty"))
        return None
    # drop blank rows but keep the spreadsheet row numbers of the others
    rownum = (np.arange(len(cells), dtype=np.int64) if records is None else records.astype(np.int64)) + 1 + offset
    nonblank = _nonblank(cells) if nonblank is None else nonblank
    first = int(np.argmax(nonblank)) if nonblank.any() else -1
    if first < 0:
        problems.append(Problem(name, None, None, None, "the file is empty"))
        return None
    header = [normalise_header(v) for v in cells.iloc[first].tolist()]
    body = cells.iloc[first + 1:]
    body_rows = rownum[first + 1:]
    keep = nonblank[first + 1:]
    body = body.loc[keep]
    body_rows = body_rows[keep]
    ok = True
    columns: list[str] = []
    used: dict[str, int] = {}
    keep_cols = []
    for j, h in enumerate(header):
        col = body.iloc[:, j]
        if h == "":
            filled = col != ""
            if filled.any():
                r = int(body_rows[filled.to_numpy()][0])
                problems.append(Problem(name, r, None, col[filled].iloc[0],
                                        f"column {j + 1} has values but no header name"))
                ok = False
            continue  # empty trailing (or padding) column
        if h in used:
            problems.append(Problem(name, 1 + offset, h, None,
                                    f"duplicate header name: columns {used[h] + 1} and {j + 1} are both '{h}'"))
            ok = False
            continue
        used[h] = j
        columns.append(h)
        keep_cols.append(j)
    if not ok:
        return None
    frame = body.iloc[:, keep_cols].copy()
    frame.columns = columns
    frame = frame.reset_index(drop=True)
    return RawTable(name=name, frame=frame, rows=np.asarray(body_rows, dtype=np.int64),
                    decimal_comma=decimal_comma, notes=notes)
