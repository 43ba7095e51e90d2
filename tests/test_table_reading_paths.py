"""Every reading path of ``tables.read_table`` gives the cells, row numbers, problems and notes of
the pandas C reader (``pandas.read_csv``, the reference; its quirks are pinned in
test_ingest_reader.py): the byte path (``_read_plain_csv``: no decode / splitlines / join), the
Arrow path (``pyarrow.csv``, ``_arrow_cells``) and the pandas path itself, on random files with CR,
CR LF and LF line ends, blank and white-space-only lines, lines of delimiters, padding, tabs,
formula guards, byte-order marks and the characters that send a file down the text or pandas path
(non-ASCII, quotes, VT, FF, FS, GS, RS, ragged rows).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from screenlab.ingest import tables


def _read(data: bytes, monkeypatch, *, plain: bool = True, arrow: bool = True, name: str = "t.csv"):
    """read_table with the byte path (``plain``) and the Arrow path (``arrow``) on or off."""
    problems = []
    with monkeypatch.context() as m:
        if not plain:
            m.setattr(tables, "_read_plain_csv", lambda *a, **k: None)
        if not arrow:
            m.setattr(tables, "_arrow_cells", lambda *a, **k: None)
        raw = tables.read_table(name, data, problems)
    return raw, problems


def _random_csv(rng) -> bytes:
    delim = rng.choice([",", ";", "\t"])
    n_cols = int(rng.integers(1, 6))
    header = [rng.choice(["plate", " Well ", "time", "Value", "analyte X"]) + str(j) for j in range(n_cols)]
    if rng.random() < 0.3:
        header.append("")  # trailing empty column
    words = ["P01", " a01 ", "1,5", "2.25", "", "  ", "'=SUM(A1)", "'-3", "na", "x y", "'@z", "'abc"]
    lines = [""] * int(rng.integers(0, 3)) + [delim.join(header)]
    for _ in range(int(rng.integers(0, 40))):
        r = rng.random()
        if r < 0.1:
            lines.append("")
        elif r < 0.15:
            lines.append(delim * (len(header) - 1))
        else:
            lines.append(delim.join(str(rng.choice(words)) for _ in header))
    end = str(rng.choice(["\n", "\r\n"]))
    text = end.join(lines) + (end if rng.random() < 0.5 else "") + end * int(rng.integers(0, 3))
    bom = b"\xef\xbb\xbf" if rng.random() < 0.3 else b""
    return bom + text.encode("utf-8")


def _same(a, b):
    ra, pa_ = a
    rb, pb = b
    assert pa_ == pb
    if ra is None or rb is None:
        assert ra is None and rb is None
        return
    assert list(ra.frame.columns) == list(rb.frame.columns)
    pd.testing.assert_frame_equal(ra.frame, rb.frame)
    np.testing.assert_array_equal(ra.rows, rb.rows)
    assert ra.decimal_comma == rb.decimal_comma and ra.notes == rb.notes


def test_arrow_path_gives_the_pandas_cells_on_random_tables(monkeypatch):
    rng = np.random.default_rng(20261201)
    taken = 0
    for _ in range(150):
        data = _random_csv(rng)
        body = data.decode("utf-8-sig")
        fast = _read(data, monkeypatch)
        slow = _read(data, monkeypatch, plain=False, arrow=False)
        _same(fast, slow)
        lines = body.splitlines()
        lead = next((i for i, l in enumerate(lines) if l.strip()), None)
        if lead is not None:
            joined = "\n".join(lines[lead:])
            delim = tables._pick_delimiter(lines[lead])
            taken += tables._arrow_cells(joined, delim, lines[lead].count(delim) + 1) is not None
    assert taken > 50  # the fast path really ran on most cases


@pytest.mark.parametrize("data", [
    b'plate,well\nP1,"A1"\n',                 # quotes: pandas path
    b"plate,well\nP1,A1,\nP2,A2\n",           # ragged: pandas path widens
    "plate,well\nP1,\u00e9\n".encode(),       # non-ASCII: pandas path
    b"plate,well\n   \nP1,A1\n",              # white-space-only line
    b"plate,well\r\nP1, A1 \r\n\r\n\r\nP2,'=B2\r\n",
])
def test_arrow_fallback_and_edge_cases_agree(data, monkeypatch):
    _same(_read(data, monkeypatch), _read(data, monkeypatch, plain=False, arrow=False))


WORDS = ["P01", " a01 ", "1,5", "2.25", "", "  ", "\t", "'=SUM(A1)", "'-3", "'abc", "na", "x y"]
RARE = ["é", '"q"', "\x0b", "\x0c", "\x1c", "\x1e", "\x1f", "a\x1f"]


def _random_file(rng) -> bytes:
    delim = str(rng.choice([",", ";", "\t"]))
    n_cols = int(rng.integers(1, 5))
    header = [str(rng.choice(["plate", " Well ", "time", "Value X"])) + str(j) for j in range(n_cols)]
    lead = [str(rng.choice(["", "  ", "\t", "", " \x1f "])) for _ in range(int(rng.integers(0, 3)))]
    lines = lead + [delim.join(header)]
    words = [w for w in WORDS if delim not in w] + (RARE if rng.random() < 0.15 else [])
    ragged = rng.random() < 0.15
    for _ in range(int(rng.integers(0, 30))):
        r = rng.random()
        if r < 0.08:
            lines.append("")
        elif r < 0.14:  # (a white-space-only line is ragged for Arrow: those files take the pandas path)
            lines.append(str(rng.choice(["  ", "\t"] if ragged else [delim * (n_cols - 1), " " + delim * (n_cols - 1)])))
        else:
            lines.append(delim.join(str(rng.choice(words)) for _ in header))
    ends = [str(rng.choice(["\n", "\r\n", "\r"])) for _ in lines]
    if rng.random() < 0.7:  # one kind of line end per file, as most writers do
        ends = [ends[0]] * len(lines)
    text = "".join(line + end for line, end in zip(lines, ends))
    if rng.random() < 0.3:
        text = text[:-len(ends[-1])]  # no final line end
    bom = b"\xef\xbb\xbf" if rng.random() < 0.1 else b""
    return bom + text.encode("utf-8")


def test_byte_path_gives_the_text_and_pandas_cells_on_random_files(monkeypatch):
    rng = np.random.default_rng(20261202)
    taken = 0
    for _ in range(300):
        data = _random_file(rng)
        fast = _read(data, monkeypatch, plain=True, arrow=True)
        text = _read(data, monkeypatch, plain=False, arrow=True)
        slow = _read(data, monkeypatch, plain=False, arrow=False)
        _same(fast, text)
        _same(fast, slow)
        taken += tables._read_plain_csv(data) is not None
    assert taken > 150  # the byte path really ran on most files


@pytest.mark.parametrize("data", [
    b"plate,well\r\nP1,A1\r\n",                  # CR LF
    b"plate,well\rP1,A1\rP2,A2",                 # CR only
    b"plate,well\n,\n \n\nP1,A1\n",              # delimiter-only, blank and space lines
    b"\n \t\n\x1f\nplate,well\nP1,A1\n",         # leading blank lines, US counts as white space
    b"plate\twell\nP1\t A1 \n",                  # tab delimiter, padding
    b"plate,well\nP1,'=A1\n",                    # formula guard
    b"plate,well\nP1,\x0bA1\n",                  # VT: the text path (splitlines breaks there)
    b"\xef\xbb\xbfplate,well\nP1,A1\n",          # BOM: the text path
])
def test_byte_path_edge_cases_agree(data, monkeypatch):
    fast = _read(data, monkeypatch, plain=True, arrow=True)
    _same(fast, _read(data, monkeypatch, plain=False, arrow=True))
    _same(fast, _read(data, monkeypatch, plain=False, arrow=False))
