"""Requirements on the rates table that a candidate must meet to be ranked (``--require EXPR``).

An expression has our own simple form ``column>=value`` or ``column<=value`` (spaces allowed), with
``column`` a numeric column of the per-group rates table (``selectivity_pct``, ``ee_pct``, ``ton``,
``tof_per_h`` ...). Each candidate is judged on the interval of that column, not only its estimate,
in the rates row the ranking uses (its standard condition at the ranking temperature; when the
candidate was not measured there, its standard-condition row at the nearest measured temperature,
named in the reason):

* ``met``: the whole interval is on the right side of the threshold;
* ``uncertain``: the interval straddles the threshold: the candidate is kept and flagged
  ``constraint_uncertain``;
* ``outside``: the whole interval is on the wrong side: the candidate is listed after the ranked
  ones with the reason (e.g. "selectivity_pct 82 (76-88) is below 90");
* ``missing``: the row has no value in that column: listed after the ranked ones ("selectivity_pct
  not measured ...").

The interval of a column comes from, in this order: its ``<root>_ci_low`` / ``<root>_ci_high``
columns (``root`` = the name without its unit suffix, so ``tof_per_h`` -> ``tof_ci_low``), or its
standard error (``<col>_se``, ``<root>_se``, ``<root>_se_<unit>``) with a Student t quantile on the
row's df (``<root>_df``, else ``tof_df``, else normal); without either, the estimate alone is
judged. A censored rate (``censored`` = lower / upper, see DEVELOPERS.md) is open on one side:
a lower bound is (bound, inf), an upper bound (-inf, bound), for the rate-derived columns
(``tof_per_h``, ``tof_per_s``, ``rate_mM_per_h``, ``enhancement``).
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass

import numpy as np
import pandas as pd

from screenlab.errors import UsageError
from screenlab.uncertainty import t_quantile

_EXPR = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*)\s*(>=|<=)\s*([-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?)\s*$")
#: unit suffixes stripped to find a column's interval or SE columns
_UNIT_SUFFIXES = ("_mM_per_h", "_per_h", "_per_s", "_pct", "_kj_mol", "_mM", "_uL", "_umol")
#: columns whose value is a rate (or derived from it) and so carries the rates table's censoring
CENSORED_COLUMNS = ("tof_per_h", "tof_per_s", "rate_mM_per_h", "enhancement")
#: rates-table columns that are not measurements (never a requirement)
_NOT_MEASURED = {"temperature_c", "loading", "substrate_conc_mM", "is_standard", "n_wells", "n_plates",
                 "n_outliers"}


@dataclass(frozen=True)
class Requirement:
    """``column op value`` with ``op`` '>=' or '<='."""

    column: str
    op: str
    value: float

    @property
    def text(self) -> str:
        return f"{self.column}{self.op}{self.value:g}"


def check_syntax(expr: str) -> None:
    """UsageError unless ``expr`` has the form COLUMN>=VALUE or COLUMN<=VALUE (the column is checked
    later, against the rates table)."""
    if not _EXPR.match(str(expr)):
        raise UsageError(f"--require {expr!r}: write COLUMN>=VALUE or COLUMN<=VALUE, e.g. selectivity_pct>=90 "
                         "(only >= and <= with a number)")


def parse_requirement(expr: str, columns) -> Requirement:
    """One ``column>=value`` / ``column<=value`` expression; UsageError for anything else or a column
    that is not a numeric measurement of the rates table (``columns``: that table's columns)."""
    check_syntax(expr)
    m = _EXPR.match(str(expr))
    col, op, val = m.group(1), m.group(2), float(m.group(3))
    allowed = requirement_columns(columns)
    if col not in allowed:
        raise UsageError(f"--require {expr!r}: {col!r} is not a numeric column of the rates table; choose one of "
                         + ", ".join(allowed))
    if not math.isfinite(val):
        raise UsageError(f"--require {expr!r}: the value must be a finite number")
    return Requirement(col, op, val)


def requirement_columns(columns_or_frame) -> list[str]:
    """The rates-table columns a requirement may name: measurements with an estimate (not their
    interval, SE or df columns, not the condition columns)."""
    if isinstance(columns_or_frame, pd.DataFrame):
        frame = columns_or_frame
        cols = [c for c in frame.columns if pd.api.types.is_numeric_dtype(frame[c]) and
                not pd.api.types.is_bool_dtype(frame[c])]
    else:
        cols = list(columns_or_frame)
    out = []
    for c in cols:
        c = str(c)
        if c in _NOT_MEASURED or re.search(r"(_ci_low|_ci_high|_se|_sd|_df)(_|$)", c) or "_se_" in c or "_sd_" in c:
            continue
        out.append(c)
    return out


def parse_requirements(exprs, rates: pd.DataFrame) -> list[Requirement]:
    """Parse every expression against the rates table; a column without any value is a usage error too."""
    reqs = [parse_requirement(e, requirement_columns(rates)) for e in (exprs or [])]
    for r in reqs:
        if not pd.to_numeric(rates[r.column], errors="coerce").notna().any():
            raise UsageError(f"--require {r.text}: {r.column} has no values in this campaign "
                             f"(e.g. selectivity and ee need an [analytes] table)")
    return reqs


def _root(col: str) -> tuple[str, str]:
    for suf in _UNIT_SUFFIXES:
        if col.endswith(suf):
            return col[: -len(suf)], suf
    return col, ""


def interval(rates: pd.DataFrame, col: str, confidence: float = 0.95) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(estimate, low, high) of ``col`` per rates row (see the module docstring)."""
    def num(c):
        return pd.to_numeric(rates[c], errors="coerce").to_numpy(float) if c in rates else None

    est = num(col)
    root, unit = _root(col)
    lo, hi = num(f"{root}_ci_low"), num(f"{root}_ci_high")
    if lo is None or hi is None:
        lo, hi = num(f"{col}_ci_low"), num(f"{col}_ci_high")
    if lo is None or hi is None:
        se = next((num(c) for c in (f"{col}_se", f"{root}_se", f"{root}_se{unit}") if c in rates), None)
        df = next((num(c) for c in (f"{root}_df", "tof_df") if c in rates), None)
        if se is not None:
            d = df if df is not None else np.full(len(rates), np.inf)
            q = t_quantile(confidence, np.where(np.isfinite(d) & (d > 0), d, np.inf))   # df missing or <= 0: normal
            lo, hi = est - q * se, est + q * se
        else:
            lo, hi = np.full(len(rates), np.nan), np.full(len(rates), np.nan)
    lo, hi = lo.copy(), hi.copy()
    if col in CENSORED_COLUMNS and "censored" in rates:
        c = rates["censored"].astype(object).where(rates["censored"].notna(), "").astype(str).str.lower().to_numpy()
        lo = np.where(c == "lower", est, np.where(c == "upper", -np.inf, lo))
        hi = np.where(c == "lower", np.inf, np.where(c == "upper", est, hi))
    return est, lo, hi


def _g(x: float) -> str:
    return "inf" if x == np.inf else "-inf" if x == -np.inf else f"{x:.3g}"


def judge(req: Requirement, est, lo, hi) -> tuple[np.ndarray, np.ndarray]:
    """Per row: status (met | uncertain | outside | missing) and a plain-words text for the last two."""
    est, lo, hi = (np.asarray(v, float) for v in (est, lo, hi))
    has_iv = np.isfinite(lo) | np.isfinite(hi)
    lo = np.where(np.isnan(lo) & has_iv, -np.inf, np.where(has_iv, lo, est))
    hi = np.where(np.isnan(hi) & has_iv, np.inf, np.where(has_iv, hi, est))
    v = req.value
    if req.op == ">=":
        ok, out = lo >= v, hi < v
        word = "below"
    else:
        ok, out = hi <= v, lo > v
        word = "above"
    missing = ~np.isfinite(est) & ~has_iv
    status = np.where(missing, "missing", np.where(ok, "met", np.where(out, "outside", "uncertain")))
    text = np.full(len(est), "", dtype=object)
    for i in np.flatnonzero(status == "outside"):      # a loop over excluded candidates' texts
        iv = f" ({_g(lo[i])}-{_g(hi[i])})" if has_iv[i] else ""
        text[i] = f"{req.column} {_g(est[i])}{iv} is {word} {v:g} (--require {req.text})"
    text[status == "missing"] = f"{req.column} not measured: cannot check --require {req.text}"
    return status, text


def check_candidates(kin, names, requirements, *, at_temperature_c: float, confidence: float = 0.95,
                     t_match_c: float = 0.05) -> pd.DataFrame:
    """Judge every candidate in ``names`` on every requirement.

    Returns one row per name: ``catalyst, constraint`` (met | uncertain | outside | missing: the
    worst over the requirements, outside and missing worst), ``constraint_reason`` (the texts of the
    failed requirements, ';'-joined) and ``constraint_temperature_c`` (the temperature of the rates
    row judged).
    """
    names = pd.Index([str(n) for n in names])
    out = pd.DataFrame({"catalyst": names, "constraint": "met", "constraint_reason": "",
                        "constraint_temperature_c": np.nan})
    if not requirements:
        return out
    r = kin.rates
    r = r[r["catalyst"].notna()].assign(catalyst=lambda d: d["catalyst"].astype(str))
    if "is_standard" in r:
        r = r[r["is_standard"].fillna(False).astype(bool)]
    t = pd.to_numeric(r["temperature_c"], errors="coerce")
    r = r.assign(_dt=(t - at_temperature_c).abs(), _exact=((t - at_temperature_c).abs() <= t_match_c))
    # the row at the ranking temperature, else the nearest measured temperature (the most wells first)
    r = r.sort_values(["_dt", "n_wells"], ascending=[True, False]).drop_duplicates("catalyst").set_index("catalyst")
    row = r.reindex(names)
    rank = {"met": 0, "uncertain": 1, "missing": 2, "outside": 3}
    worst = np.zeros(len(names), int)
    texts = [[] for _ in range(len(names))]
    for req in requirements:                          # a loop over a few requirements
        est, lo, hi = interval(row, req.column, confidence)
        status, text = judge(req, est, lo, hi)
        sev = np.vectorize(rank.get, otypes=[int])(status) if len(status) else np.zeros(0, int)
        worst = np.maximum(worst, sev)
        not_exact = ~row["_exact"].fillna(False).to_numpy(bool)
        tt = pd.to_numeric(row["temperature_c"], errors="coerce").to_numpy(float)
        for i in np.flatnonzero(sev >= 2):            # a loop over excluded candidates' texts
            at = f" at {tt[i]:g} degC" if not_exact[i] and np.isfinite(tt[i]) else ""
            texts[i].append(text[i].replace(" is ", f"{at} is ", 1) if at and " is " in text[i] else text[i])
    inv = {v: k for k, v in rank.items()}
    out["constraint"] = [inv[w] for w in worst]
    out["constraint_reason"] = ["; ".join(x) for x in texts]
    out["constraint_temperature_c"] = pd.to_numeric(row["temperature_c"], errors="coerce").to_numpy(float)
    return out


__all__ = ["Requirement", "check_syntax", "parse_requirement", "parse_requirements", "requirement_columns", "interval", "judge",
           "check_candidates", "CENSORED_COLUMNS"]
