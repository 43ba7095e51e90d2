"""A catalyst's history: its results in every campaign (round) it was screened in, on one scale.

Different rounds run on different days, blocks and plate readers, so absolute TOFs drift; every
campaign carries the same benchmark on its plates, and the activity *relative to that campaign's
benchmark* is what compares across rounds. Per campaign the history gives:

* TOF at that campaign's reference temperature (:func:`reference_tofs`): the measured
  standard-condition group when that temperature was measured (its t interval from the rates
  table; a censored bound where the rates table says so), else the Arrhenius prediction with its
  interval (as the ranking does);
* the rate enhancement over the blank of the same group, and Ea where it was measured;
* rank and P(top K) in that campaign (:func:`screenlab.stats.ranking.rank_candidates`, TOF at
  the reference temperature);
* the ratio TOF / TOF(benchmark) with an interval (:func:`benchmark_ratio`).

The ratio's interval is taken on the log scale: ln r = ln a - ln b with SE^2 = s_a^2 + s_b^2
(s = SE / TOF by the delta method for a measured group, the prediction's own log-scale SE for an
Arrhenius prediction) and Welch-Satterthwaite degrees of freedom; the two estimates are treated as
independent (their shared blank correction is ignored, a small effect next to replicate scatter).
When the catalyst's TOF is a censored bound the ratio is a bound too: a lower bound divided by the
benchmark's upper interval limit (``>=``), an upper bound divided by its lower limit (``<=``).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from screenlab.stats.bounds import censored_of

from screenlab.model import UNCATALYSED  # noqa: E402  (the one reserved name)
from screenlab.uncertainty import t_quantile  # noqa: E402
#: tolerance when matching a measured temperature to the reference temperature, degC (as the ranking)
T_MATCH_C = 0.05

REFERENCE_TOF_COLUMNS = ["catalyst", "tof_per_h", "tof_ci_low", "tof_ci_high", "censored", "basis", "ln_tof_se",
                         "df", "n_wells", "enhancement", "enhancement_ci_low", "enhancement_ci_high", "flags"]

HISTORY_COLUMNS = ["campaign", "parent", "catalyst", "role", "status", "reference_temperature_c", "tof_per_h",
                   "tof_ci_low", "tof_ci_high", "tof_censored", "tof_basis", "enhancement", "enhancement_ci_low",
                   "enhancement_ci_high", "ea_kj_mol", "ea_ci_low", "ea_ci_high", "rank", "n_ranked", "rank_low",
                   "rank_high", "top_k", "p_top", "rank_reason", "benchmark", "benchmark_tof_per_h",
                   "benchmark_censored", "vs_benchmark", "vs_benchmark_ci_low", "vs_benchmark_ci_high",
                   "vs_benchmark_censored", "decisions", "flags"]


def _num(frame: pd.DataFrame, col: str) -> np.ndarray:
    if col not in frame:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=float)


def benchmark_ratio(est_a, ln_se_a, df_a, est_b, ln_se_b, df_b, confidence: float = 0.95):
    """Ratio a / b of two independent positive estimates with a log-scale t interval.

    ``ln_se_*`` are standard errors of ln(estimate), ``df_*`` their degrees of freedom (inf for
    normal). Returns ``(ratio, ci_low, ci_high, df)`` arrays; df is Welch-Satterthwaite,
    (s_a^2 + s_b^2)^2 / (s_a^4 / df_a + s_b^4 / df_b). NaN where either estimate is not positive
    (ratio and interval) or where an SE or df is missing (interval only).
    """
    a, b = np.asarray(est_a, float), np.asarray(est_b, float)
    sa, sb = np.asarray(ln_se_a, float), np.asarray(ln_se_b, float)
    da, db = np.asarray(df_a, float), np.asarray(df_b, float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ok = (a > 0) & (b > 0)
        ln_r = np.where(ok, np.log(np.where(ok, a, 1.0)) - np.log(np.where(ok, b, 1.0)), np.nan)
        va, vb = sa ** 2, sb ** 2
        se = np.sqrt(va + vb)
        ta = np.where(np.isposinf(da), 0.0, va ** 2 / da)
        tb = np.where(np.isposinf(db), 0.0, vb ** 2 / db)
        den = ta + tb
        df = np.where(den > 0, (va + vb) ** 2 / np.where(den > 0, den, 1.0), np.inf)
        df = np.where(np.isfinite(da) | np.isposinf(da), df, np.nan)
        df = np.where(np.isfinite(db) | np.isposinf(db), df, np.nan)
        q = t_quantile(confidence, df)
        lo, hi = np.exp(ln_r - q * se), np.exp(ln_r + q * se)
        good = np.isfinite(se) & np.isfinite(q)
        return np.exp(ln_r), np.where(good, lo, np.nan), np.where(good, hi, np.nan), df


def reference_tofs(kin, temperature_c: float, confidence: float = 0.95) -> pd.DataFrame:
    """Each catalyst's TOF at ``temperature_c`` with :data:`REFERENCE_TOF_COLUMNS`.

    ``basis`` is ``measured`` (the standard-condition group measured at that temperature: the
    rates table's TOF, interval, ``censored`` and enhancement; ``ln_tof_se`` = SE / TOF, ``df`` =
    ``tof_df``) or ``arrhenius`` (not measured there: the Arrhenius prediction, its interval,
    log-scale SE and df; enhancement missing). A censored group has no log-scale SE.
    """
    r = kin.rates
    r = r[r["catalyst"].notna()].assign(catalyst=lambda d: d["catalyst"].astype(str))
    if "is_standard" in r:
        r = r[r["is_standard"].fillna(False).astype(bool)]
    r = r[np.abs(_num(r, "temperature_c") - float(temperature_c)) <= T_MATCH_C]
    r = r.sort_values("n_wells", ascending=False, kind="stable").drop_duplicates("catalyst")
    cens = censored_of(r).to_numpy(dtype=object)
    tof, se = _num(r, "tof_per_h"), _num(r, "tof_se_per_h")
    with np.errstate(divide="ignore", invalid="ignore"):
        ln_se = np.where((tof > 0) & (cens == ""), se / tof, np.nan)
    meas = pd.DataFrame({
        "catalyst": r["catalyst"].to_numpy(dtype=object), "tof_per_h": tof, "tof_ci_low": _num(r, "tof_ci_low"),
        "tof_ci_high": _num(r, "tof_ci_high"), "censored": cens, "basis": "measured", "ln_tof_se": ln_se,
        "df": _num(r, "tof_df"), "n_wells": _num(r, "n_wells"), "enhancement": _num(r, "enhancement"),
        "enhancement_ci_low": _num(r, "enhancement_ci_low"), "enhancement_ci_high": _num(r, "enhancement_ci_high"),
        "flags": r["flags"].fillna("").astype(str).to_numpy() if "flags" in r else ""})
    arr = kin.arrhenius
    parts = [meas]
    if arr is not None and len(arr):
        a = arr[(arr["catalyst"].astype(str) != UNCATALYSED) & ~arr["catalyst"].astype(str).isin(set(meas["catalyst"]))]
        a = a[np.isfinite(_num(a, "fit_slope_k"))]
        if len(a):
            from screenlab.kinetics.arrhenius import predict_tof

            p = predict_tof(a, float(temperature_c), confidence)
            parts.append(pd.DataFrame({
                "catalyst": a["catalyst"].astype(str).to_numpy(dtype=object), "tof_per_h": _num(p, "tof_per_h"),
                "tof_ci_low": _num(p, "tof_ci_low"), "tof_ci_high": _num(p, "tof_ci_high"), "censored": "",
                "basis": "arrhenius", "ln_tof_se": _num(p, "ln_tof_se"), "df": _num(p, "df"), "n_wells": np.nan,
                "enhancement": np.nan, "enhancement_ci_low": np.nan, "enhancement_ci_high": np.nan,
                "flags": a["flags"].fillna("").astype(str).to_numpy()}))
    out = pd.concat([p for p in parts if len(p)], ignore_index=True) if any(len(p) for p in parts) else meas
    return out[REFERENCE_TOF_COLUMNS].reset_index(drop=True)


def campaign_benchmark(kin) -> str | None:
    """The campaign's benchmark: the reference catalyst with the most wells (None without one)."""
    w = kin.wells
    if w is None or w.empty or "role" not in w:
        return None
    refs = w.loc[(w["role"].astype(str) == "reference") & w["catalyst"].notna(), "catalyst"].astype(str)
    return str(refs.value_counts().index[0]) if len(refs) else None


@dataclass(frozen=True)
class HistorySource:
    """One campaign holding the catalyst: its analysis (:class:`screenlab.pipeline.Analysis`) and
    the catalyst's id there. ``ranking`` (TOF at the reference temperature, ``top_k``) is
    computed when not given; ``decisions`` says in which recorded decisions it was chosen."""

    campaign: str
    catalyst: str
    analysis: Any
    parent: str | None = None
    ranking: pd.DataFrame | None = None
    decisions: str = ""


def _bound_ratio(cens: str, tof: float, b: float, b_lo: float, b_hi: float) -> tuple[float, str]:
    """The ratio bound of a censored TOF against a measured benchmark (see the module docstring)."""
    if cens == "lower" and b_hi > 0 and np.isfinite(b_hi):
        return tof / b_hi, "lower"
    if cens == "upper" and b_lo > 0 and np.isfinite(b_lo):
        return tof / b_lo, "upper"
    return np.nan, ""


def history_row(src: HistorySource, *, top_k: int = 3, draws: int = 4000, seed: int = 0) -> dict:
    """One row of :func:`catalyst_history` (:data:`HISTORY_COLUMNS`)."""
    from screenlab.stats.ranking import rank_candidates

    a = src.analysis
    kin, conf = a.kinetics, float(a.settings.confidence)
    t_ref = float(a.settings.reference_temperature_c)
    cat = str(src.catalyst)
    row = {c: np.nan for c in HISTORY_COLUMNS}
    row.update(campaign=src.campaign, parent=src.parent or "", catalyst=cat, reference_temperature_c=t_ref,
               top_k=int(top_k), decisions=src.decisions, tof_censored="", vs_benchmark_censored="",
               benchmark_censored="", tof_basis="", rank_reason="", flags="", benchmark="")
    w = kin.wells
    roles = set(w.loc[w["catalyst"].astype(str) == cat, "role"].astype(str)) if len(w) else set()
    row["role"] = "reference" if "reference" in roles else ("sample" if roles else "")
    if len(a.data.readings) == 0:
        row["status"] = "planned (no readings yet)"
        return row
    tofs = reference_tofs(kin, t_ref, conf).set_index("catalyst")
    bench = campaign_benchmark(kin)
    row["benchmark"] = bench or ""
    if cat in tofs.index:
        t = tofs.loc[cat]
        row.update(tof_per_h=t["tof_per_h"], tof_ci_low=t["tof_ci_low"], tof_ci_high=t["tof_ci_high"],
                   tof_censored=t["censored"], tof_basis=t["basis"], enhancement=t["enhancement"],
                   enhancement_ci_low=t["enhancement_ci_low"], enhancement_ci_high=t["enhancement_ci_high"],
                   flags=t["flags"])
        row["status"] = {"measured": f"measured at {t_ref:g} degC",
                         "arrhenius": f"predicted at {t_ref:g} degC from its Arrhenius fit"}[t["basis"]]
    else:
        row["status"] = f"no TOF at {t_ref:g} degC (not measured there, no Arrhenius fit)"
    arr = kin.arrhenius
    ea = arr[arr["catalyst"].astype(str) == cat] if arr is not None and len(arr) else pd.DataFrame()
    if len(ea) and np.isfinite(_num(ea, "ea_kj_mol")[0]):
        row.update(ea_kj_mol=_num(ea, "ea_kj_mol")[0], ea_ci_low=_num(ea, "ea_ci_low")[0],
                   ea_ci_high=_num(ea, "ea_ci_high")[0])
    r = src.ranking
    if r is None:
        r = rank_candidates(kin, a.quality, metric="tof", top_k=int(top_k), draws=int(draws), seed=int(seed),
                            confidence=conf, catalysts=a.data.catalysts)
    ranked = r[r["rank"].notna()]
    row["n_ranked"] = len(ranked)
    mine = r[r["catalyst"].astype(str) == cat]
    if len(mine):
        m = mine.iloc[0]
        if pd.notna(m["rank"]):
            row.update(rank=int(m["rank"]), rank_low=int(m["rank_low"]), rank_high=int(m["rank_high"]),
                       p_top=float(m["p_top"]))
        else:
            row["rank_reason"] = str(m.get("reason", "") or "")
        extra = [f for f in str(m.get("flags", "") or "").split(";") if f]
        have = [f for f in str(row["flags"] or "").split(";") if f]
        row["flags"] = ";".join(dict.fromkeys(have + extra))
    if bench and bench in tofs.index:
        b = tofs.loc[bench]
        row["benchmark_tof_per_h"] = b["tof_per_h"]
        row["benchmark_censored"] = b["censored"]
        if cat == bench:
            row["vs_benchmark"] = 1.0
        elif cat in tofs.index and b["censored"] == "":
            t = tofs.loc[cat]
            if t["censored"] == "":
                ratio, lo, hi, _ = benchmark_ratio([t["tof_per_h"]], [t["ln_tof_se"]], [t["df"]], [b["tof_per_h"]],
                                                   [b["ln_tof_se"]], [b["df"]], conf)
                row.update(vs_benchmark=ratio[0], vs_benchmark_ci_low=lo[0], vs_benchmark_ci_high=hi[0])
            else:
                bound, side = _bound_ratio(t["censored"], float(t["tof_per_h"]), float(b["tof_per_h"]),
                                           float(b["tof_ci_low"]), float(b["tof_ci_high"]))
                row.update(vs_benchmark=bound, vs_benchmark_censored=side)
    return row


def catalyst_history(sources: list[HistorySource], *, top_k: int = 3, draws: int = 4000,
                     seed: int = 0) -> pd.DataFrame:
    """One row per campaign of ``sources`` (in their order) with :data:`HISTORY_COLUMNS`.

    TOF, its interval and the benchmark ratio are at each campaign's own reference temperature
    and confidence level; ``tof_censored`` / ``vs_benchmark_censored`` ("", ``lower``,
    ``upper``) mark bounds; ``vs_benchmark`` is 1 for the benchmark itself (no interval).
    """
    rows = [history_row(s, top_k=top_k, draws=draws, seed=seed) for s in sources]  # one per campaign
    frame = pd.DataFrame(rows, columns=HISTORY_COLUMNS)
    for c in ("rank", "n_ranked", "rank_low", "rank_high", "top_k"):
        frame[c] = pd.to_numeric(frame[c], errors="coerce").astype("Int64")
    return frame


DISPLAY_COLUMNS = ["campaign", "parent", "catalyst", "tof_at_ref", "enhancement", "ea", "rank", "p_top",
                   "vs_benchmark", "benchmark", "decisions", "status"]


def display_table(hist: pd.DataFrame) -> pd.DataFrame:
    """The history as short text columns (intervals and bounds written out) for a table view."""
    from screenlab.stats.bounds import estimate_text

    rows = []
    for r in hist.to_dict(orient="records"):  # one per campaign
        tof = estimate_text(r["tof_per_h"], r["tof_ci_low"], r["tof_ci_high"], r["tof_censored"])
        if tof != "–":
            tof += f" h-1 at {r['reference_temperature_c']:g} C" + (" (Arrhenius)" if r["tof_basis"] == "arrhenius"
                                                                     else "")
        rank = "–"
        if pd.notna(r["rank"]):
            rank = f"{int(r['rank'])} of {int(r['n_ranked'])} ({int(r['rank_low'])}-{int(r['rank_high'])})"
        elif r["rank_reason"]:
            rank = f"not ranked: {r['rank_reason']}"
        if r["role"] == "reference" and r["catalyst"] == r["benchmark"]:
            ratio = "1 (the benchmark)"
        else:
            ratio = estimate_text(r["vs_benchmark"], r["vs_benchmark_ci_low"], r["vs_benchmark_ci_high"],
                                  r["vs_benchmark_censored"])
        rows.append({"campaign": r["campaign"], "parent": r["parent"], "catalyst": r["catalyst"], "tof_at_ref": tof,
                     "enhancement": estimate_text(r["enhancement"], r["enhancement_ci_low"], r["enhancement_ci_high"]),
                     "ea": estimate_text(r["ea_kj_mol"], r["ea_ci_low"], r["ea_ci_high"]),
                     "rank": rank,
                     "p_top": "–" if pd.isna(r["p_top"]) else f"{float(r['p_top']):.2f} (K={int(r['top_k'])})",
                     "vs_benchmark": ratio, "benchmark": r["benchmark"], "decisions": r["decisions"],
                     "status": r["status"]})
    return pd.DataFrame(rows, columns=DISPLAY_COLUMNS)


__all__ = ["DISPLAY_COLUMNS", "HISTORY_COLUMNS", "REFERENCE_TOF_COLUMNS", "HistorySource", "benchmark_ratio",
           "campaign_benchmark", "catalyst_history", "display_table", "history_row", "reference_tofs"]
