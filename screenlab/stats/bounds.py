"""Censored estimates: reading the ``censored`` column and writing bounds as bounds.

The per-group rates table (``KineticsResult.rates``) and the ranking may carry a column
``censored``: "" for a measured value, ``lower`` when the rate is only known to exceed a bound
(``tof_per_h`` and ``tof_ci_low`` hold the bound, ``tof_ci_high`` is NaN) and ``upper`` when it
cannot be told from the blank (``tof_per_h`` and ``tof_ci_high`` hold the bound, ``tof_ci_low``
is NaN). A frame without the column is read as all measured. A bound is written ">= x" or
"<= x", never as a point with an interval.
"""
from __future__ import annotations

import math

import numpy as np
import pandas as pd

CENSORED_VALUES = ("", "lower", "upper")


def censored_of(frame: pd.DataFrame) -> pd.Series:
    """The frame's ``censored`` column as text ("" where missing or absent), aligned to its index."""
    if "censored" not in frame:
        return pd.Series([""] * len(frame), index=frame.index, dtype=object)
    s = frame["censored"].astype(object).where(frame["censored"].notna(), "")
    return s.map(lambda v: str(v).strip().lower())


def _num(v) -> float:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return math.nan
    return f


def number_text(v, digits: int = 3) -> str:
    """A number to ``digits`` significant figures ("–" when missing)."""
    f = _num(v)
    if not math.isfinite(f):
        return "–" if not (isinstance(f, float) and math.isinf(f)) else ("∞" if f > 0 else "-∞")
    return f"{f:.{digits}g}"


def estimate_text(estimate, ci_low=None, ci_high=None, censored: str = "", digits: int = 3) -> str:
    """``x (lo–hi)`` for a measured estimate, ``>= x`` / ``<= x`` for a censored one, "–" when missing."""
    c = (censored or "").strip().lower()
    if c == "lower":
        return f">= {number_text(estimate, digits)}" if math.isfinite(_num(estimate)) else "–"
    if c == "upper":
        return f"<= {number_text(estimate, digits)}" if math.isfinite(_num(estimate)) else "–"
    if not math.isfinite(_num(estimate)):
        return "–"
    lo, hi = _num(ci_low), _num(ci_high)
    if math.isfinite(lo) or math.isfinite(hi):
        return f"{number_text(estimate, digits)} ({number_text(lo, digits)}–{number_text(hi, digits)})"
    return number_text(estimate, digits)


def estimate_texts(frame: pd.DataFrame, est: str, lo: str, hi: str, digits: int = 3) -> list[str]:
    """:func:`estimate_text` for every row of ``frame`` (the ``censored`` column read as above)."""
    cens = censored_of(frame).tolist()
    e = pd.to_numeric(frame[est], errors="coerce").to_numpy(float) if est in frame else np.full(len(frame), np.nan)
    a = pd.to_numeric(frame[lo], errors="coerce").to_numpy(float) if lo in frame else np.full(len(frame), np.nan)
    b = pd.to_numeric(frame[hi], errors="coerce").to_numpy(float) if hi in frame else np.full(len(frame), np.nan)
    return [estimate_text(x, y, z, c, digits) for x, y, z, c in zip(e, a, b, cens)]  # display rows, not wells


__all__ = ["CENSORED_VALUES", "censored_of", "estimate_text", "estimate_texts", "number_text"]
