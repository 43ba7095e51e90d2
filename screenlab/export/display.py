"""How values are written for people: bounds as bounds, never as a point with an interval.

A rate the kinetics could not measure is *censored* (the rates table's ``censored`` column, see
DEVELOPERS.md): ``lower`` when the catalyst had finished before the first reading (the value is only
known to exceed a bound), ``upper`` when it is not distinguishable from the blank (the value is at
most a bound). Every table meant for reading (the CLI's table output, the shortlist exports, the
app's pages) writes such a value as ``>= 1,500 h-1`` or ``<= 0.4 h-1`` with the reason, and leaves
its interval columns empty. Machine formats keep the number (the bound) beside ``censored``.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

LOWER, UPPER = "lower", "upper"


def censored_values(frame: pd.DataFrame, col: str = "censored") -> np.ndarray:
    """'' / 'lower' / 'upper' per row ('' everywhere when the column is missing)."""
    if col not in frame:
        return np.full(len(frame), "", dtype=object)
    c = frame[col].astype(object).where(frame[col].notna(), "").astype(str).str.strip().str.lower()
    return c.to_numpy(dtype=object)


def number_text(value, digits: int = 4) -> str:
    """A number to ``digits`` significant figures with thousands separators ('' when missing)."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return ""
    if not math.isfinite(v):
        return "" if v != v else ("inf" if v > 0 else "-inf")
    if v == 0:
        return "0"
    mag = math.floor(math.log10(abs(v)))
    if mag >= digits - 1:                            # whole numbers: 1,500 not 1.5e+03
        return f"{round(v, -(mag - digits + 1)):,.0f}"
    return f"{v:.{digits}g}"


def bound_text(value, censored: str, unit: str = "") -> str:
    """``>= 1,500 h-1`` (lower bound) or ``<= 0.4 h-1`` (upper bound); '' when not censored."""
    sign = {LOWER: ">=", UPPER: "<="}.get(str(censored or "").lower())
    if sign is None or number_text(value) == "":
        return ""
    return f"{sign} {number_text(value)}" + (f" {unit}" if unit else "")


def value_text(value, low, high, censored: str = "", unit: str = "") -> str:
    """``13.65 (11.49 to 16.22) h-1`` for a measured value, the bound text for a censored one."""
    b = bound_text(value, censored, unit)
    if b or str(censored or ""):
        return b
    v = number_text(value)
    if not v:
        return ""
    lo, hi = number_text(low), number_text(high)
    iv = f" ({lo} to {hi})" if lo and hi else ""
    return v + iv + (f" {unit}" if unit else "")


def show_bounds(frame: pd.DataFrame, value: str, low: str | None = None, high: str | None = None, *,
                unit: str = "", censored: str = "censored", text: str | None = None,
                text_only: bool = False) -> pd.DataFrame:
    """A copy for reading: censored rows lose their interval (``low``/``high`` emptied) and a text
    column ``text`` (default ``<value>_shown``) holds every row's value as :func:`value_text` writes
    it. ``text_only``: ``value``, ``low`` and ``high`` themselves become text (bounds as ``>= x``,
    intervals blank on censored rows), for fixed-width tables."""
    out = frame.copy()
    if value not in out:
        return out
    cens = censored_values(out, censored)
    is_c = cens != ""
    vals = out[value].to_numpy(dtype=object)
    los = out[low].to_numpy(dtype=object) if low and low in out else np.full(len(out), np.nan, dtype=object)
    his = out[high].to_numpy(dtype=object) if high and high in out else np.full(len(out), np.nan, dtype=object)
    for c in (low, high):
        if c and c in out and is_c.any():
            out[c] = pd.to_numeric(out[c], errors="coerce").astype(float)
            out.loc[is_c, c] = np.nan
    if text_only:
        out[value] = [bound_text(v, c, unit) if c else number_text(v) for v, c in zip(vals, cens)]
        for c, src in ((low, los), (high, his)):
            if c and c in out:
                out[c] = ["" if cc else number_text(v) for v, cc in zip(src, cens)]
        return out
    name = text or f"{value}_shown"
    shown = [value_text(v, lo, hi, c, unit) for v, lo, hi, c in zip(vals, los, his, cens)]
    pos = out.columns.get_loc(value) + 1
    if name in out:
        out[name] = shown
    else:
        out.insert(pos, name, shown)
    return out


__all__ = ["LOWER", "UPPER", "censored_values", "number_text", "bound_text", "value_text", "show_bounds"]
