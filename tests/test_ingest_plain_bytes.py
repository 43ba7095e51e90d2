"""The byte-level CSV fast path (``_read_plain_csv``: no decode / splitlines / join) against the
text path it skips and the plain pandas path: the same cells, row numbers, problems and notes on
random files with CR, CR LF and LF line ends, blank and white-space-only lines, lines of
delimiters, padding, tabs, formula guards and the characters that send a file down the text path
(non-ASCII, quotes, VT, FF, FS, GS, RS, a byte-order mark).
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screenlab.ingest import tables

sys.path.insert(0, str(Path(__file__).parent))
from test_ingest_fastpath import _same  # noqa: E402  (same comparison of two read_table results)


def _read(data: bytes, monkeypatch, *, plain: bool, arrow: bool):
    problems = []
    with monkeypatch.context() as m:
        if not plain:
            m.setattr(tables, "_read_plain_csv", lambda *a, **k: None)
        if not arrow:
            m.setattr(tables, "_arrow_cells", lambda *a, **k: None)
        raw = tables.read_table("t.csv", data, problems)
    return raw, problems


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


def test_byte_path_matches_the_text_and_pandas_paths(monkeypatch):
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
def test_edge_cases_agree(data, monkeypatch):
    fast = _read(data, monkeypatch, plain=True, arrow=True)
    _same(fast, _read(data, monkeypatch, plain=False, arrow=True))
    _same(fast, _read(data, monkeypatch, plain=False, arrow=False))
