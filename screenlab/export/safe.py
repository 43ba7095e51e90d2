"""Spreadsheet-safe text: neutralise cells a spreadsheet would run as a formula.

A text cell that begins with ``=``, ``+``, ``-`` or ``@`` (or a tab / carriage return, which some
programs strip before the check) is prefixed with a single quote, unless it is a plain number
such as ``-1.5`` or ``+3``. This follows the OWASP "CSV Injection" guidance (common practice).
"""
from __future__ import annotations

import re

import pandas as pd

_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")
_TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def neutralise(text):
    """Return ``text`` made safe for a spreadsheet cell (non-strings are returned unchanged)."""
    if not isinstance(text, str) or not text or not text.startswith(_TRIGGERS):
        return text
    if text[0] in "+-" and _NUMBER.match(text.strip()):
        return text
    return "'" + text


def neutralise_frame(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` whose text cells (and column names) are neutralised."""
    out = frame.copy()
    for col in out.columns:
        s = out[col]
        if s.dtype == object or pd.api.types.is_string_dtype(s):
            mask = s.notna()
            if mask.any():
                out.loc[mask, col] = s[mask].map(neutralise)
    out.columns = [neutralise(str(c)) for c in out.columns]
    return out
