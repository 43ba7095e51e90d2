"""The pyarrow.csv fast path of read_table against the plain pandas path it replaces.

Reference: the pandas C reader path (``_arrow_cells`` disabled), which the quirk tests in
test_ingest_reader.py pin; both must give the same cells, dtypes, row numbers and problems.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from screenlab.ingest import tables


def _read(name, data, fast: bool, monkeypatch):
    problems = []
    if not fast:
        monkeypatch.setattr(tables, "_arrow_cells", lambda *a, **k: None)
    try:
        raw = tables.read_table(name, data, problems)
    finally:
        monkeypatch.undo()
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


def test_fast_path_matches_pandas_path_on_random_tables(monkeypatch):
    rng = np.random.default_rng(20261201)
    taken = 0
    for _ in range(150):
        data = _random_csv(rng)
        body = data.decode("utf-8-sig")
        fast = _read("t.csv", data, True, monkeypatch)
        slow = _read("t.csv", data, False, monkeypatch)
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
def test_fallback_and_edge_cases_agree(data, monkeypatch):
    _same(_read("t.csv", data, True, monkeypatch), _read("t.csv", data, False, monkeypatch))
