"""Uncertainty-aware ranking of candidates and Pareto sets over several metrics.

Every candidate's metric is an estimate with a sampling distribution. The ranking draws from
each distribution (a draws x candidates matrix), ranks every draw once (one sort per draw), and
reports how often each candidate comes first (``p_best``), lands in the top k (``p_top``) and
the 2.5 / 97.5 % points of its rank over the draws (``rank_low``, ``rank_high``; the
``(1 - confidence) / 2`` quantiles in general).

Sampling distributions (chosen per metric in :data:`METRICS`):

* TOF, enhancement, TON are positive ratios whose error grows with their size, so they are drawn
  **log-normally**: ``ln X = ln x + s * T_df`` with ``T_df`` Student t and ``s`` the SE on the log
  scale (``se / x`` by the delta method, or the log-scale SE the source gives, e.g. the Arrhenius
  prediction's ``ln_tof_se``). Ranking two candidates then compares ratios, as a chemist does
  ("twice as active"), and no draw goes negative.
* Ea is a difference-like quantity from a straight-line fit, drawn from a **t** distribution:
  ``Ea + se * T_df`` with the fit's residual df.

Draws of different candidates are independent (each candidate's wells are its own); metrics of
one candidate (TOF and Ea come from the same wells) are drawn independently in :func:`pareto`,
which ignores their correlation.

Selectivity and ee (campaigns with an [analytes] table) are drawn from t distributions on the
percent scale. The rates table's ee is signed (positive: the first enantiomer named in
[analytes].enantiomers in excess). Ranked by ee, candidates are ordered by the magnitude of the
excess of either enantiomer (draws folded: |ee + se T|), with the favoured one in ``favours``; with
``enantiomer=`` by the signed excess of that enantiomer.

Ea is ranked lower first (the lower apparent barrier); candidates flagged ``low_ea`` (likely
transport-controlled, whose low apparent Ea says nothing about the catalyst's own barrier) are
listed after the others unless ``include_transport_limited``. Requirements on the rates table
(``require``, :mod:`screenlab.stats.constraints`) remove the candidates clearly outside them from the
draws. A censored rate (the rates table's ``censored``: ``lower`` / ``upper`` bounds) is reported as
its bound, never drawn. The number of draws adapts to what the numbers need
(:mod:`screenlab.stats.montecarlo`); ``draws=N`` fixes it.

How to add a metric: add a :class:`Metric` to :data:`METRICS` naming its
source frame (``rates`` for per-temperature group rows, ``arrhenius`` for per-catalyst fits), the
estimate column, its SE column (or its CI columns, from which the SE is backed out), the df
column, the direction and whether it is log-normal. For example a selectivity in percent from
the rates table would be ``Metric("selectivity", "selectivity", "%", "selectivity_pct", "rates",
"selectivity_pct", se="selectivity_se_pct", df="tof_df", higher_is_better=True,
lognormal=False)``; then test its direction and its rank probabilities against a closed form.
"""
from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np
import pandas as pd

from screenlab.errors import UsageError
from screenlab.uncertainty import quantiles as _st  # t.ppf / norm.ppf without loading scipy.stats

#: Flag codes set by this module (code -> one plain sentence).
FLAGS: dict[str, str] = {
    "predicted_from_arrhenius": "Not measured at the ranking temperature: the TOF is the catalyst's Arrhenius "
                                "prediction there, with its prediction interval.",
    "extrapolated": "The ranking temperature lies outside the temperatures this catalyst was measured at.",
    "on_failed_plate": "Some of this catalyst's wells sit on a plate that failed its quality check.",
    "on_unchecked_plate": "Some of this catalyst's wells sit on a plate without a benchmark (status unchecked): its "
                          "quality rests on the blanks, replicates, edge test and separation from the blanks.",
    "ee_sign_uncertain": "The ee interval includes 0: which enantiomer this catalyst favours is not established.",
    "constraint_uncertain": "The interval of a required column straddles the threshold (--require): the candidate "
                            "may or may not meet it, so it is kept.",
    "reference": "This is the benchmark (reference) catalyst, ranked alongside the candidates for comparison.",
}
UNCATALYSED = "(uncatalysed)"
#: tolerance when matching a measured temperature to the ranking temperature, degC
T_MATCH_C = 0.05


@dataclass(frozen=True)
class Metric:
    """One entry of the metric table (see the module docstring, "How to add a metric")."""

    name: str
    label: str
    unit: str                      # display unit ('' when dimensionless)
    column: str                    # export column name of the estimate (unit in the name)
    source: str                    # 'rates' (per temperature) | 'arrhenius' (per catalyst)
    estimate: str
    se: str | None = None          # SE on the estimate's own scale
    ci: tuple[str, str] | None = None   # interval columns to back the SE out of when se is None
    df: str | None = None          # degrees of freedom column (NaN / absent -> normal draws)
    higher_is_better: bool = True
    lognormal: bool = True
    predict: bool = False          # fall back to the Arrhenius prediction at unmeasured T (TOF)
    censorable: bool = False       # the rates table's ``censored`` bound applies (rate-derived metrics)

    def ci_column(self, side: str) -> str:
        """Export name of the interval column: tof_per_h -> tof_ci_low_per_h."""
        return self.column.replace(self.name, f"{self.name}_ci_{side}", 1)


METRICS: dict[str, Metric] = {
    "tof": Metric("tof", "TOF", "h-1", "tof_per_h", "rates", "tof_per_h", se="tof_se_per_h", df="tof_df",
                  higher_is_better=True, lognormal=True, predict=True, censorable=True),
    # the rates table gives the enhancement's interval on the log scale, not its SE: backed out
    # with the TOF's df (the enhancement's own Welch df is not stored; the interval is kept exactly)
    "enhancement": Metric("enhancement", "rate enhancement over the blank", "", "enhancement", "rates",
                          "enhancement", ci=("enhancement_ci_low", "enhancement_ci_high"), df="tof_df",
                          higher_is_better=True, lognormal=True, censorable=True),
    "ton": Metric("ton", "TON", "", "ton", "rates", "ton", se="ton_se", df="tof_df",
                  higher_is_better=True, lognormal=True),
    "ea": Metric("ea", "apparent Ea", "kJ/mol", "ea_kj_mol", "arrhenius", "ea_kj_mol", se="ea_se", df="fit_df",
                 higher_is_better=False, lognormal=False),
    # bounded percentages near their middle range: t draws on the percent scale
    "selectivity": Metric("selectivity", "selectivity to the main product", "%", "selectivity_pct", "rates",
                          "selectivity_pct", se="selectivity_se", df="selectivity_df", higher_is_better=True,
                          lognormal=False),
    # signed ee: positive = the first enantiomer named in [analytes].enantiomers, taken as the wanted one
    "ee": Metric("ee", "enantiomeric excess", "%", "ee_pct", "rates", "ee_pct", se="ee_se", df="ee_df",
                 higher_is_better=True, lognormal=False),
}

RANK_COLUMNS = ["rank", "catalyst", "role", "family", "metric", "estimate", "ci_low", "ci_high", "censored", "unit",
                "favours", "rank_low", "rank_high", "p_top", "p_best", "p_beats_reference", "n", "temperature_c",
                "basis", "flags", "reason"]


def _metric(name: str) -> Metric:
    if name not in METRICS:
        raise UsageError(f"unknown metric {name!r}; choose one of {', '.join(METRICS)}")
    return METRICS[name]


def _num(frame: pd.DataFrame, col: str | None) -> np.ndarray:
    if col is None or col not in frame:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=float)


def _tq(confidence: float, df) -> np.ndarray:
    df = np.asarray(df, dtype=float)
    q = _st.t.ppf(0.5 + confidence / 2, np.where(np.isfinite(df) & (df > 0), df, 1.0))
    return np.where(np.isfinite(df), np.where(df > 0, q, np.nan), _st.norm.ppf(0.5 + confidence / 2))


def _merge_codes(*cols) -> list[str]:
    """Element-wise union of ';'-joined flag strings, order kept, no repeats.

    Columns are turned into Python lists once (iterating Arrow-backed text element by element is
    slow); a row with one non-empty part that holds one code is that code, without splitting."""
    lists = [c.tolist() if hasattr(c, "tolist") else list(c) for c in cols]
    out = []
    for parts in zip(*lists):
        filled = [p for p in parts if isinstance(p, str) and p]
        if not filled:
            out.append("")
        elif len(filled) == 1 and ";" not in filled[0]:
            out.append(filled[0])
        else:
            codes = []
            for p in filled:
                codes.extend(c for c in p.split(";") if c)
            out.append(";".join(dict.fromkeys(codes)))
    return out


def _roles(kin) -> pd.Series:
    """catalyst -> role ('reference' wins over 'sample' when a catalyst is both)."""
    frames = [f[["catalyst", "role"]] for f in (kin.rates, kin.wells) if f is not None and len(f) and "role" in f]
    both = pd.concat(frames) if frames else pd.DataFrame(columns=["catalyst", "role"])
    both = both[both["role"].astype(str).isin(["sample", "reference"]) & both["catalyst"].notna()]
    both = both.assign(catalyst=both["catalyst"].astype(str), _r=(both["role"].astype(str) == "reference"))
    return both.groupby("catalyst")["_r"].any().map({True: "reference", False: "sample"})


def _plate_info(kin, quality, plates_used: pd.Series | None = None) -> pd.DataFrame:
    """Per catalyst: all plates failed?, any failed?, any unchecked?, plate-quality flags of its plates.

    ``plates_used`` maps catalyst -> ';'-joined plates behind its estimate (the rates row's
    ``plates``); catalysts not in it use every plate they have wells on (Arrhenius-based metrics).
    ``plate_flags`` is the union of the plates' flags (``failed`` and ``no_benchmark`` left out: the
    candidate's ``on_failed_plate`` / ``on_unchecked_plate`` say them) in the order of the catalyst's
    plates, each code once.
    """
    w = kin.wells[["catalyst", "plate", "role"]]    # the columns first: filtering every column is slow
    role = w["role"].astype(str)
    w = w[w["catalyst"].notna() & ((role == "sample") | (role == "reference"))]
    cp = w[["catalyst", "plate"]].astype(str).drop_duplicates()
    if plates_used is not None and len(plates_used):
        used = plates_used.dropna().astype(str).str.split(";").explode().rename("plate").reset_index()
        used.columns = ["catalyst", "plate"]
        not_used = pd.Index(used["catalyst"].unique()).get_indexer(cp["catalyst"]) < 0   # (isin is slower)
        cp = pd.concat([cp[not_used], used], ignore_index=True)
    if quality is None or quality.empty:
        return pd.DataFrame({"catalyst": cp["catalyst"].unique(), "all_failed": False, "any_failed": False,
                             "any_unchecked": False, "plate_flags": ""})
    q = quality.assign(plate=quality["plate"].astype(str)).drop_duplicates("plate").set_index("plate")
    # each plate's flags without the status ones (said by on_failed_plate / on_unchecked_plate), once per plate
    pf = (q["flags"].fillna("").astype(str).str.replace(r"(^|;)(?:failed|no_benchmark)(?=;|$)", r"\1", regex=True)
          .str.replace(r";{2,}", ";", regex=True).str.strip(";"))
    cp = cp.reset_index(drop=True)
    status = cp["plate"].map(q["status"])
    cp = cp.assign(failed=status.eq("failed").to_numpy(), unchecked=status.eq("unchecked").to_numpy(),
                   pf=cp["plate"].map(pf).fillna("").astype(str).to_numpy())
    agg = cp.groupby("catalyst").agg(all_failed=("failed", "all"), any_failed=("failed", "any"),
                                     any_unchecked=("unchecked", "any"))
    # flags: only the (few) rows that carry any, split into codes, first occurrence per catalyst
    codes = cp.loc[cp["pf"] != "", ["catalyst", "pf"]]
    codes = codes.assign(pf=codes["pf"].str.split(";")).explode("pf")
    codes = codes[codes["pf"].notna() & (codes["pf"] != "")].drop_duplicates()
    joined = codes.groupby("catalyst", sort=False)["pf"].agg(";".join)
    agg["plate_flags"] = joined.reindex(agg.index).fillna("").astype(str)
    return agg.reset_index()


def _censored(frame: pd.DataFrame) -> np.ndarray:
    """The rates table's ``censored`` column as text ('' measured, 'lower', 'upper'); all '' when absent."""
    if "censored" not in frame:
        return np.full(len(frame), "", dtype=object)
    c = frame["censored"].astype(object).where(frame["censored"].notna(), "").astype(str).str.strip().str.lower()
    return c.to_numpy(dtype=object)


def _standard_temperatures(kin) -> pd.Series:
    """catalyst -> number of distinct temperatures with a standard-condition rates row."""
    r = kin.rates
    if r is None or r.empty:
        return pd.Series(dtype=float)
    if "is_standard" in r:
        r = r[r["is_standard"].fillna(False).astype(bool)]
    t = pd.DataFrame({"catalyst": r["catalyst"].astype(str).to_numpy(),
                      "t": np.round(_num(r, "temperature_c"), 1)}).dropna()
    return t.drop_duplicates().groupby("catalyst")["t"].count()


def _count_words(n) -> str:
    n = int(n)
    return {0: "no", 1: "one", 2: "two", 3: "three"}.get(n, str(n))


def _fit_reasons(names: np.ndarray, arr: pd.DataFrame, measured_t: pd.Series, *, purpose: str) -> np.ndarray:
    """Why a catalyst has no usable Arrhenius result, in words: how many temperatures it was measured
    at and how many showed activity. ``purpose`` ends the sentence ("no Ea", "no Arrhenius line to
    predict from"). '' where the fit exists with an uncertainty. Vectorised (texts per distinct count)."""
    a = arr[arr["catalyst"].astype(str) != UNCATALYSED] if len(arr) else arr
    info = pd.DataFrame({"catalyst": a["catalyst"].astype(str).to_numpy() if len(a) else [],
                         "n_fit": _num(a, "n_temperatures"), "ea": _num(a, "ea_kj_mol"), "se": _num(a, "ea_se"),
                         "flags": a["flags"].fillna("").astype(str).to_numpy() if len(a) else []}
                        ).drop_duplicates("catalyst").set_index("catalyst")
    names = np.asarray(names, dtype=object)
    idx = info.index.get_indexer(pd.Index(names.astype(str))) if len(info) else np.full(len(names), -1)
    has = idx >= 0
    j = np.maximum(idx, 0)

    def col(c, fill):
        v = info[c].to_numpy()[j] if len(info) else np.full(len(names), fill)
        return np.where(has, v, fill)

    n_fit = np.nan_to_num(col("n_fit", 0.0).astype(float)).astype(int)
    ea_ok = np.isfinite(col("ea", np.nan).astype(float))
    se_ok = np.isfinite(col("se", np.nan).astype(float))
    inactive_some = pd.Series(col("flags", ""), dtype=object).astype(str).str.contains(
        r"(?:^|;)no_activity(?:;|$)", regex=True).to_numpy(bool)
    n_meas = measured_t.reindex(pd.Index(names.astype(str))).fillna(0).to_numpy(int) if len(measured_t) \
        else np.zeros(len(names), int)
    meas_txt = pd.Series(n_meas).map(
        lambda n: f"measured at {_count_words(n)} temperature{'s' if n != 1 else ''}: {purpose}" if n else
        f"no rates at its standard condition: {purpose}").to_numpy(dtype=object)
    of_txt = pd.Series(n_meas).map(lambda n: f"of {n}").to_numpy(dtype=object)
    one = np.where(inactive_some & (n_meas > 1), "active over the blank at one " + of_txt + " temperatures",
                   "measured at one temperature only") + f": {purpose}"
    two = np.where(inactive_some & (n_meas > 2), "active over the blank at two " + of_txt + " temperatures",
                   "measured at two temperatures only") + ": the Arrhenius line has no uncertainty (needs three)"
    out = np.select([~has, n_fit == 0, (n_fit == 1) | ~ea_ok, (n_fit == 2) | ~se_ok],
                    [meas_txt, "no activity over the blank at any temperature", one, two], default="")
    return np.asarray(out, dtype=object)


#: reason of a lower-censored candidate (the catalyst had finished before the first reading)
TOO_FAST = "faster than the first reading allows: rerun at lower loading or temperature"
#: reason of an upper-censored candidate (not distinguishable from the blank)
NOT_SHOWN_ACTIVE = "not shown to be active: not distinguishable from the blank (only an upper bound)"


def _enantiomer_sign(metric: Metric, enantiomers, enantiomer: str | None) -> tuple[float, bool]:
    """(sign applied to the signed ee, rank by magnitude?) for the ee metric."""
    if metric.name != "ee":
        if enantiomer is not None:
            raise UsageError("--enantiomer applies to the ee metric only (use --metric ee)")
        return 1.0, False
    if enantiomer is None:
        return 1.0, True
    names = [str(e) for e in (enantiomers or ())]
    if not names:
        raise UsageError(f"enantiomer {enantiomer!r}: this campaign names no enantiomers in its [analytes] table")
    if enantiomer not in names:
        raise UsageError(f"unknown enantiomer {enantiomer!r}; this campaign's [analytes] enantiomers are "
                         + ", ".join(names))
    return (1.0 if enantiomer == names[0] else -1.0), False


def candidate_table(kin, quality=None, *, metric: str = "tof", at_temperature_c: float | None = None,
                    confidence: float = 0.95, catalysts: pd.DataFrame | None = None, enantiomers=None,
                    enantiomer: str | None = None, include_transport_limited: bool = False) -> pd.DataFrame:
    """Each candidate's estimate and sampling distribution for one metric (the ranking's input).

    Columns: ``catalyst, role, family, estimate, ci_low, ci_high, censored, favours, mu, sigma, df,
    absolute, n, temperature_c, basis, flags, reason, order``. ``mu, sigma`` are the centre and scale
    of the draws (log scale when the metric is log-normal; for ee by magnitude the signed ee, whose
    draws are folded: ``absolute`` True); ``reason`` is non-empty for candidates that cannot be
    ranked and ``order`` says where they are listed (0 ranked; 1 too fast; 3 transport-limited;
    4 other reasons). ``basis`` is ``measured``, ``arrhenius`` (TOF predicted at an unmeasured
    temperature) or ``fit`` (Ea). ``censored`` is '' (measured), ``lower`` or ``upper`` (the rates
    table's bound; see :data:`TOO_FAST`, :data:`NOT_SHOWN_ACTIVE`). ``favours`` (ee only) names the
    enantiomer in excess (from ``enantiomers``, the campaign's [analytes] pair; 'first' / 'second'
    without it). ``enantiomer`` ranks by the excess of that enantiomer instead of the magnitude.
    """
    m = _metric(metric)
    sign_ee, by_magnitude = _enantiomer_sign(m, enantiomers, enantiomer)
    settings = getattr(kin, "settings", None)
    if at_temperature_c is None:
        at_temperature_c = float(getattr(settings, "reference_temperature_c", 60.0))
    roles = _roles(kin)
    arr = kin.arrhenius if kin.arrhenius is not None else pd.DataFrame()
    names = set(roles.index.tolist())             # (tolist: iterating Arrow text is slow)
    if len(arr):
        names |= set(arr["catalyst"].astype(str).tolist()) - {UNCATALYSED}
    base = pd.DataFrame({"catalyst": sorted(names)})
    base["role"] = base["catalyst"].map(roles).fillna("sample")
    if catalysts is not None and "family" in catalysts:
        fam = catalysts.assign(catalyst=catalysts["catalyst"].astype(str)).drop_duplicates("catalyst")
        base["family"] = base["catalyst"].map(fam.set_index("catalyst")["family"])
    else:
        base["family"] = pd.NA
    measured_t = _standard_temperatures(kin)

    if m.source == "rates":
        r = kin.rates
        r = r[r["catalyst"].notna()].assign(catalyst=lambda d: d["catalyst"].astype(str))
        if "is_standard" in r:
            r = r[r["is_standard"].fillna(False).astype(bool)]
        r = r[np.abs(_num(r, "temperature_c") - at_temperature_c) <= T_MATCH_C]
        r = r.sort_values("n_wells", ascending=False).drop_duplicates("catalyst")
        src = pd.DataFrame({"catalyst": r["catalyst"].to_numpy(), "estimate": _num(r, m.estimate),
                            "se": _num(r, m.se), "lo": _num(r, m.ci[0] if m.ci else None),
                            "hi": _num(r, m.ci[1] if m.ci else None), "df": _num(r, m.df),
                            "n": _num(r, "n_wells"), "temperature_c": _num(r, "temperature_c"),
                            "flags": r["flags"].fillna("").astype(str).to_numpy() if "flags" in r else "",
                            "ln_se": np.nan, "basis": "measured",
                            "censored": _censored(r) if m.censorable else "",
                            "plates": r["plates"].to_numpy() if "plates" in r else np.nan})
        if m.predict and len(arr):
            from screenlab.kinetics.arrhenius import predict_tof

            missing = arr[arr["catalyst"].astype(str).isin(set(base["catalyst"].tolist()) - set(src["catalyst"].tolist()))]
            if len(missing):
                p = predict_tof(missing, at_temperature_c, confidence)
                mi = missing.reset_index(drop=True)
                out_of_range = (at_temperature_c < _num(mi, "t_min_c") - T_MATCH_C) | (
                    at_temperature_c > _num(mi, "t_max_c") + T_MATCH_C)
                flags = _merge_codes(mi["flags"].fillna("").astype(str), ["predicted_from_arrhenius"] * len(mi),
                                     np.where(out_of_range, "extrapolated", ""))
                n_w = kin.rates.assign(catalyst=kin.rates["catalyst"].astype(str))
                if "is_standard" in n_w:
                    n_w = n_w[n_w["is_standard"].fillna(False).astype(bool)]
                n_w = n_w.groupby("catalyst")["n_wells"].sum()
                pred = pd.DataFrame({"catalyst": mi["catalyst"].astype(str).to_numpy(),
                                     "estimate": p["tof_per_h"].to_numpy(float), "se": np.nan, "lo": np.nan,
                                     "hi": np.nan, "df": p["df"].to_numpy(float),
                                     "n": mi["catalyst"].astype(str).map(n_w).to_numpy(float),
                                     "temperature_c": at_temperature_c, "flags": flags,
                                     "ln_se": p["ln_tof_se"].to_numpy(float), "basis": "arrhenius", "censored": ""})
                src = pd.concat([src, pred], ignore_index=True)
    else:
        a = arr[arr["catalyst"].astype(str) != UNCATALYSED] if len(arr) else arr
        src = pd.DataFrame({"catalyst": a["catalyst"].astype(str).to_numpy() if len(a) else [],
                            "estimate": _num(a, m.estimate), "se": _num(a, m.se), "lo": np.nan, "hi": np.nan,
                            "df": _num(a, m.df), "n": _num(a, "n_temperatures"), "temperature_c": np.nan,
                            "flags": a["flags"].fillna("").astype(str).to_numpy() if len(a) else [],
                            "ln_se": np.nan, "basis": "fit", "censored": ""})
    t = base.merge(src, on="catalyst", how="left")
    used = src.set_index("catalyst")["plates"] if "plates" in src else None
    t = t.merge(_plate_info(kin, quality, used), on="catalyst", how="left")
    cens = t["censored"].fillna("").astype(str).to_numpy(dtype=object)

    est, se, df = t["estimate"].to_numpy(float), t["se"].to_numpy(float), t["df"].to_numpy(float)
    lo_in, hi_in = t["lo"].to_numpy(float), t["hi"].to_numpy(float)
    q = _tq(confidence, df)
    favours = np.full(len(t), "", dtype=object)
    absolute = np.zeros(len(t), bool)
    extra_flags = np.full(len(t), "", dtype=object)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):   # a bound beyond float range: inf
        if m.lognormal:
            mu = np.where(est > 0, np.log(np.where(est > 0, est, 1.0)), np.nan)
            sig = t["ln_se"].to_numpy(float)
            sig = np.where(np.isfinite(sig), sig, se / est)
            if m.ci:
                sig = np.where(np.isfinite(sig), sig, np.log(hi_in / lo_in) / (2 * q))
            ci_lo, ci_hi = np.exp(mu - q * sig), np.exp(mu + q * sig)
        else:
            mu, sig = est, se
            ci_lo, ci_hi = mu - q * sig, mu + q * sig
        if m.name == "ee":
            pair = [str(e) for e in (enantiomers or ())][:2]
            first, second = (pair + ["first", "second"][len(pair):])[:2]
            favours = np.where(est > 0, first, np.where(est < 0, second, "")).astype(object)
            straddles = np.isfinite(ci_lo) & np.isfinite(ci_hi) & (ci_lo <= 0) & (ci_hi >= 0)
            favours = np.where(straddles & (favours != ""), favours + "?", favours).astype(object)
            extra_flags = np.where(straddles, "ee_sign_uncertain", "").astype(object)
            if by_magnitude:
                absolute[:] = True
                est_show = np.abs(est)
                lo_show = np.where(straddles, 0.0, np.minimum(np.abs(ci_lo), np.abs(ci_hi)))
                hi_show = np.maximum(np.abs(ci_lo), np.abs(ci_hi))
                ci_lo, ci_hi, est = lo_show, hi_show, est_show
            else:
                mu, est = sign_ee * mu, sign_ee * est
                ci_lo, ci_hi = (ci_lo, ci_hi) if sign_ee > 0 else (-ci_hi, -ci_lo)
    t["mu"], t["sigma"], t["absolute"] = mu, sig, absolute
    t["estimate"] = est
    t["ci_low"] = np.where(np.isfinite(sig), ci_lo, np.nan)
    t["ci_high"] = np.where(np.isfinite(sig), ci_hi, np.nan)
    # a bound: the open side has no value, the bound is the estimate
    lower, upper = cens == "lower", cens == "upper"
    t.loc[lower, "ci_low"] = est[lower]
    t.loc[lower, "ci_high"] = np.nan
    t.loc[upper, "ci_high"] = est[upper]
    t.loc[upper, "ci_low"] = np.nan
    t["favours"] = favours

    # reasons, first applicable wins (vectorised with np.select)
    no_row = ~np.isfinite(est) & t["basis"].isna().to_numpy()
    names_arr = t["catalyst"].to_numpy(dtype=object)
    basis = t["basis"].fillna("").to_numpy(dtype=object)
    no_sig = ~(np.isfinite(sig) & (sig > 0) & np.isfinite(mu))
    n = t["n"].to_numpy(float)
    if m.source == "rates":
        lead = f"not measured at {at_temperature_c:g} degC"
        what = np.full(len(t), lead, dtype=object)
        fit_missing = np.zeros(len(t), bool)
        if m.predict:
            fr = _fit_reasons(names_arr, arr, measured_t, purpose="no Arrhenius line to predict from")
            what = np.where(fr != "", lead + "; " + fr, lead + " and no Arrhenius fit").astype(object)
            # an Arrhenius prediction without a usable fit: say what the fit lacks (never "no activity")
            fit_missing = (basis == "arrhenius") & (~np.isfinite(est) | no_sig)
    else:
        fr = _fit_reasons(names_arr, arr, measured_t, purpose="no Ea")
        what = np.where(fr != "", fr, "no Arrhenius fit (needs at least two temperatures)").astype(object)
        fit_missing = (basis == "fit") & (~np.isfinite(est) | no_sig | (n < 3))
    all_failed = t["all_failed"].fillna(False).to_numpy(bool)
    few = (n < 2) & (basis == "measured")
    few_txt = "too few wells (fewer than 2 at this condition)"
    inactive = ~(est > 0) if m.lognormal else ~np.isfinite(est)
    inactive_txt = "no activity over the blank" if m.name in ("tof", "ton") else "no estimate"
    lb = np.isinf(hi_in) & ~lower & ~upper if m.ci else np.zeros(len(t), bool)
    flags_in = t["flags"].fillna("").astype(str)
    low_ea = flags_in.str.split(";").map(lambda c: "low_ea" in c).to_numpy(bool) if m.name == "ea" \
        else np.zeros(len(t), bool)
    limit = float(getattr(settings, "low_ea_kj_mol", 20.0))
    transport_txt = (f"apparent Ea below {limit:g} kJ/mol: likely transport-controlled (diffusion), so the low "
                     "barrier is not the catalyst's; --include-transport-limited ranks it")
    transport = low_ea & (not include_transport_limited)
    conds = [no_row, all_failed, lower, upper, fit_missing, few, inactive, lb, no_sig, transport]
    texts = [what, "measured only on failed plates", TOO_FAST, NOT_SHOWN_ACTIVE, what, few_txt,
             inactive_txt, "only a lower bound (blank below its detection limit)", "no uncertainty estimate",
             transport_txt]
    t["reason"] = np.select(conds, texts, default="").astype(object)
    reason = t["reason"].to_numpy(dtype=object)
    t["order"] = np.where(reason == "", 0, np.where(lower & (reason == TOO_FAST), 1,
                                                    np.where(transport & (reason == transport_txt), 3, 4)))
    t.loc[no_row, ["n"]] = np.nan
    t["flags"] = _merge_codes(flags_in, t["plate_flags"].fillna("").astype(str),
                              np.where(t["any_failed"].fillna(False).to_numpy(bool), "on_failed_plate", ""),
                              np.where(t["any_unchecked"].fillna(False).to_numpy(bool), "on_unchecked_plate", ""),
                              np.where(t["role"].to_numpy() == "reference", "reference", ""), extra_flags)
    t["basis"] = basis
    t["censored"] = cens
    return t[["catalyst", "role", "family", "estimate", "ci_low", "ci_high", "censored", "favours", "mu", "sigma",
              "df", "absolute", "n", "temperature_c", "basis", "flags", "reason", "order"]]


#: elements per chunk of draws (draws x candidates); bounds the memory of every Monte Carlo step
CHUNK_CELLS = 1 << 21
#: cells of the banded rank histograms (candidates x window, int32) used for the rank intervals
WINDOW_CELLS = 1 << 24
#: histogram cells updated per bincount: bounds its temporary, and keeps it within a core's L2 cache
#: (scattered increments into a larger one miss the cache: 25 % more CPU at 11,000 candidates)
BLOCK_CELLS = 1 << 17
#: ranks kept in memory at once when a rank quantile falls outside its window (draws x candidates)
FALLBACK_CELLS = 1 << 24
#: draws whose ranks place the rank-histogram windows (kept in memory up to FALLBACK_CELLS ranks)
PILOT_DRAWS = 1000
#: names listed in ``dominated_by`` at most (``dominated_by_count`` has the full number)
MAX_DOMINATORS = 10


#: above this df a Student t column is drawn as normal (t quantiles differ by < 1e-4 relative)
NORMAL_DF = 1e4


def draw_matrix(mu, sigma, df, draws: int, rng: np.random.Generator) -> np.ndarray:
    """draws x candidates float32 matrix of ``mu + sigma * T_df`` (normal where df is not finite,
    not > 0, or above :data:`NORMAL_DF`).

    T comes from Bailey's polar method (R. W. Bailey, Math. Comp. 62 (1994) 779-781): for (u, v)
    uniform in the unit disk and w = u^2 + v^2, ``u * sqrt(df (w^(-2/df) - 1) / w)`` is Student
    t(df), and with ``df -> inf`` it becomes Marsaglia's polar normal ``u * sqrt(-2 ln w / w)``. The
    point of the disk is drawn directly as w = U1 (uniform on (0, 1]) and u = sqrt(w) cos(2 pi U2),
    which gives ``T = cos(2 pi U2) sqrt(df (U1^(-2/df) - 1))`` (the Box-Muller form when normal):
    two uniforms per number, no rejection, no gamma or normal generator, everything in place.
    float32 is ample for ranking (ties between continuous draws stay improbable).
    """
    mu, sigma, df = (np.asarray(v, dtype=float).ravel() for v in (mu, sigma, df))
    k = mu.size
    w = rng.random((draws, k), dtype=np.float32)
    np.subtract(np.float32(1.0), w, out=w)           # (0, 1]: log(w) stays finite
    c = rng.random((draws, k), dtype=np.float32)
    c *= np.float32(2.0 * np.pi)
    np.cos(c, out=c)
    with np.errstate(invalid="ignore"):
        t_col = np.isfinite(df) & (df > 0) & (df <= NORMAL_DF)
    np.log(w, out=w)                                 # w <- ln U1 (<= 0)
    if t_col.any():
        dft = np.where(t_col, df, 1.0)
        e = np.where(t_col, -2.0 / dft, 1.0).astype(np.float32)
        scale = np.where(t_col, dft, 0.0).astype(np.float32)
        z = w * e                                    # -2/df ln U1
        np.exp(z, out=z)
        z -= np.float32(1.0)
        z *= scale                                   # df (U1^(-2/df) - 1); 0 in normal columns
        if not t_col.all():
            z -= np.where(t_col, np.float32(0.0), np.float32(2.0)).astype(np.float32) * w   # -2 ln U1
    else:
        z = w
        z *= np.float32(-2.0)
    np.sqrt(z, out=z)
    z *= c
    z *= sigma.astype(np.float32)
    z += mu.astype(np.float32)
    return z


def _desc_int32(x: np.ndarray, out: np.ndarray | None = None, overwrite: bool = False) -> np.ndarray:
    """float32 -> int32 whose ascending order is the descending order of ``x`` (signed zeros equal):
    the bit pattern of -x, negative values flipped (IEEE 754 floats of one sign order like their
    bits). ``out``: an int32 array (or view) to write into; ``overwrite``: ``x`` may be used as
    scratch space (its values are lost). With both, no temporary is made."""
    neg = x if overwrite else np.empty_like(x, dtype=np.float32)
    np.subtract(np.float32(0.0), x, out=neg)         # -x, and -0.0 -> +0.0
    bits = neg.view(np.int32)
    out = np.empty(x.shape, np.int32) if out is None else out
    np.right_shift(bits, 31, out=out)                # -1 for negative values, 0 otherwise
    np.bitwise_and(out, np.int32(0x7FFFFFFF), out=out)
    np.bitwise_xor(out, bits, out=out)
    return out


def _order_desc(score: np.ndarray, overwrite: bool = False) -> np.ndarray:
    """Per row of a float32 ``score`` matrix, the columns from the highest score to the lowest (ties
    by column), as ``np.argsort(-score, axis=1, kind="stable")`` gives them; int32, possibly a
    strided view. ``overwrite``: ``score`` may be used as scratch space (its values are lost).

    One sort of 64-bit keys instead of an argsort: the high word of each key is the score's bit
    pattern mapped to a signed integer of the same order as the negated score (IEEE 754 floats of
    one sign order like their bit patterns; the negative ones are flipped), the low word the column.
    Sorting plain integers uses numpy's SIMD sorts, about twice as fast as an argsort of the floats
    on the same rows, and the low words then are the order. Signed zeros are made equal first, as
    they compare equal.
    """
    d, k = score.shape
    if k >= 2 ** 31:
        return np.argsort(-score, axis=1, kind="stable")
    key = np.empty((d, k), dtype=np.int64)
    words = key.view(np.int32).reshape(d, k, 2)       # little- or big-endian: pick the words
    hi, lo = (1, 0) if np.little_endian else (0, 1)
    _desc_int32(score, out=words[:, :, hi], overwrite=overwrite)   # built in place
    words[:, :, lo] = np.arange(k, dtype=np.int32)
    key.sort(axis=1)
    return words[:, :, lo]


def _ranks_from_order(order: np.ndarray, overwrite: bool = False) -> np.ndarray:
    """Inverse of each row of ``order``: ranks[r, order[r, p]] = p + 1. ``overwrite``: ``order``
    may be used as scratch space (its values are lost)."""
    d, k = order.shape
    dtype = np.int32 if k < 2 ** 31 - 1 else np.int64
    ranks = np.empty(d * k, dtype=dtype)
    idx = np.int64 if d * k >= 2 ** 31 else dtype
    flat = order if overwrite and order.dtype == idx else order.astype(idx, copy=True)
    flat += (np.arange(d, dtype=idx) * k)[:, None]
    ranks[flat] = np.arange(1, k + 1, dtype=dtype)    # one scatter into the flat matrix
    return ranks.reshape(d, k)


def rank_draws(score: np.ndarray) -> np.ndarray:
    """Rank of each column within each row of ``score`` (1 = highest; ties by column, the first
    column first), one integer-key sort per row."""
    score = np.asarray(score)
    if score.dtype != np.float32:
        return _ranks_from_order(np.argsort(-score, axis=1, kind="stable"))
    return _ranks_from_order(_order_desc(score))


def _order_stat_index(n: int, q: float) -> int:
    """0-based index of the ``q`` quantile of n sorted values, exactly as numpy's ``inverted_cdf``."""
    return int(np.quantile(np.arange(n), q, method="inverted_cdf"))


def _chunks(draws: int, k: int, seed, per_cell: int = 1) -> list[tuple[int, np.random.SeedSequence]]:
    """Chunk sizes of draws (each at most CHUNK_CELLS / (k x per_cell) rows) and one seed per chunk.

    Each chunk has its own child seed, so a chunk can be drawn again (same numbers) in a second pass.
    """
    c = max(1, CHUNK_CELLS // max(1, k * per_cell))
    sizes = [min(c, draws - s) for s in range(0, draws, c)]
    return list(zip(sizes, np.random.SeedSequence(seed).spawn(len(sizes))))


def _n_workers(n_tasks: int) -> int:
    """Worker threads for ``n_tasks`` independent chunks: at most the usable CPUs, at most 4."""
    try:
        cpus = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cpus = os.cpu_count() or 1
    return max(1, min(n_tasks, cpus, 4))


class _Deferred:
    """A future run in the calling thread when its result is first asked for."""

    def __init__(self, fn, args):
        self._fn, self._args, self._done, self._value = fn, args, False, None

    def result(self):
        if not self._done:
            self._value, self._done = self._fn(*self._args), True
            self._fn = self._args = None
        return self._value


class _Inline:
    """The part of a thread pool's interface used here, run in the calling thread (one task or one
    CPU): ``submit`` is deferred until its result is asked for, so tasks run in the order their
    results are read, as a pool's workers would let them finish."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    @staticmethod
    def submit(fn, *args):
        return _Deferred(fn, args)


def _executor(n_tasks: int):
    n = _n_workers(n_tasks)
    return ThreadPoolExecutor(max_workers=n) if n > 1 else _Inline()


def rank_summary(mu, sigma, df, draws: int, seed=0, *, top_k: int = 5, confidence: float = 0.95,
                 reference: int | None = None, absolute: bool = False, plan=None,
                 ci_z: float | None = None, pilot_draws: int = PILOT_DRAWS,
                 kth: bool = False) -> dict[str, np.ndarray]:
    """Monte Carlo rank statistics of candidates with ``mu + sigma * T_df`` scores (higher is better).

    The draws are made in chunks of at most :data:`CHUNK_CELLS` numbers; each chunk is ranked
    (one integer-key sort per draw, :func:`_order_desc`) and folded into running counts, so memory
    does not grow with ``draws``:

    * ``p_top`` = P(rank <= top_k), ``p_best`` = P(rank 1), ``p_beats`` = P(score > the score of
      column ``reference``) (NaN without a reference);
    * ``rank_low`` / ``rank_high``: the ``(1 -/+ confidence) / 2`` quantiles of each candidate's rank
      over the draws, the same order statistics as ``np.quantile(ranks, q, axis=0,
      method="inverted_cdf")`` on the full draws x k rank matrix. They come from a banded rank
      histogram per candidate (a window of ranks per side placed around the quantile seen in the first
      :data:`PILOT_DRAWS` draws); a candidate whose quantile falls outside its window is resolved
      exactly by drawing the chunks again (each chunk has its own seed) and keeping only that
      candidate's ranks.

    Columns are handled in point-estimate order (best first). Same ``seed`` -> same output.

    ``absolute``: the scores are ``|mu + sigma * T_df|`` (ee by magnitude; point-estimate order by
    ``|mu|``). ``plan``: called once with the pilot's ranks (a k x n_pilot array, each row sorted)
    and n_pilot, returns how many draws to make in all (at most ``draws``; whole chunks, so the
    number made, ``out["draws"]``, can be a little more than asked). ``ci_z``: also read each rank
    quantile's distribution-free confidence interval, the ranks at the order statistics
    ``n q -/+ ci_z sqrt(n q (1 - q))`` (``out["rank_low_ci"]``, ``out["rank_high_ci"]``: pairs of
    arrays). ``pilot_draws``: draws that place the windows (and feed the plan). ``kth``: also
    return the top_k-th best score of every draw (``out["kth_score"]``, float32).
    """
    mu, sigma, df = (np.asarray(v, dtype=float).ravel() for v in (mu, sigma, df))
    k = mu.size
    out = {"rank_low": np.ones(k, np.int64), "rank_high": np.ones(k, np.int64), "p_top": np.zeros(k),
           "p_best": np.zeros(k), "p_beats": np.full(k, np.nan), "draws": draws}
    if ci_z is not None:
        out["rank_low_ci"] = (np.ones(k, np.int64), np.ones(k, np.int64))
        out["rank_high_ci"] = (np.ones(k, np.int64), np.ones(k, np.int64))
    if k == 0:
        return out
    perm = np.argsort(-(np.abs(mu) if absolute else mu), kind="stable")   # column p: the p-th by estimate
    mu_s, sig_s, df_s = mu[perm], sigma[perm], df[perm]
    ref_pos = None if reference is None else int(np.flatnonzero(perm == reference)[0])
    alpha = (1 - confidence) / 2
    chunks = _chunks(draws, k, seed)
    n_used = [len(chunks)]                           # chunks counted (set from the plan after the pilot)

    def drawn(d, ss):
        score = draw_matrix(mu_s, sig_s, df_s, d, np.random.default_rng(ss))
        if absolute:
            np.abs(score, out=score)
        return score
    top = np.zeros(k, np.int64)
    best = np.zeros(k, np.int64)
    beats = np.zeros(k, np.int64)
    win = hist = None                                # placed from the pilot draws

    pilot_rows = min(draws, max(int(pilot_draws), 1), max(1, FALLBACK_CELLS // k))

    def place_windows(pilot: list[np.ndarray]):
        """One banded rank histogram per candidate holding both rank windows.

        Each side (low, high quantile) gets a window of ranks [start, start + w) around the pilot's
        quantile. A candidate's cells are [below window 1, window 1, between, window 2, above]; the
        cell of a rank r is ``clip(r, lo1, hi1) + clip(r, lo2, hi2) + key0``, a sum of two clipped
        ramps that is strictly increasing over those classes, so one bincount counts both sides.
        When the two windows overlap they are merged into one (window 2 empty: lo2 = hi2), which
        both sides then read.
        """
        nonlocal win, hist
        n_pilot = sum(len(r) for r in pilot)
        spread = 4 * np.sqrt(alpha * (1 - alpha) / n_pilot)
        by_col = np.concatenate([r.T for r in pilot], axis=1)     # each candidate's pilot ranks
        by_col.sort(axis=1)
        if plan is not None:                          # how many draws in all, from the pilot
            want = max(n_pilot, min(draws, int(plan(by_col, n_pilot))))
            ends = np.cumsum([c[0] for c in chunks])
            n_used[0] = int(np.searchsorted(ends, want, side="left")) + 1
        first, wid = {}, {}
        for side, q in (("low", alpha), ("high", 1 - alpha)):
            # np.quantile(ranks, q -/+ spread, axis=0, method="inverted_cdf"), read off the sorted ranks
            lo_q = by_col[:, _order_stat_index(n_pilot, max(0.0, q - spread))].astype(np.int64)
            hi_q = by_col[:, _order_stat_index(n_pilot, min(1.0, q + spread))].astype(np.int64)
            margin = 8 + (hi_q - lo_q) // 4
            first[side] = np.clip(lo_q - margin, 1, k)
            wid[side] = np.minimum(hi_q + margin, k) - first[side] + 1
        total = wid["low"].sum() + wid["high"].sum()
        if total > WINDOW_CELLS:                      # keep the histogram bounded; misses go to the fallback
            for side in wid:
                wid[side] = np.maximum(1, (wid[side] * (WINDOW_CELLS / total)).astype(np.int64))
        s1, e1 = first["low"], first["low"] + wid["low"]
        s2, e2 = first["high"], first["high"] + wid["high"]
        apart = s2 >= e1                              # window 2 starts after window 1 ends
        u0, u1 = np.where(apart, s1, np.minimum(s1, s2)), np.where(apart, e1, np.maximum(e1, e2))
        w1 = u1 - u0
        lo1, hi1 = u0 - 1, u1                         # clip(r, lo1, hi1) - lo1: 0 below, 1..w1, w1 + 1 above
        lo2 = np.where(apart, s2 - 1, 0)
        hi2 = np.where(apart, e2, 0)                  # merged: clip(r, 0, 0) = 0, no cells of its own
        size = (w1 + 2) + (hi2 - lo2)
        base = np.concatenate([[0], np.cumsum(size)[:-1]])
        hist = np.zeros(int(size.sum()), np.int32)    # counts <= draws
        ends = np.searchsorted(np.cumsum(size), np.arange(1, 1 + hist.size // BLOCK_CELLS) * BLOCK_CELLS)
        cuts = np.unique(np.concatenate([[0], np.minimum(ends + 1, k), [k]]))
        del by_col
        dt = pilot[0].dtype
        win = {"base": base, "size": size, "blocks": list(zip(cuts[:-1].tolist(), cuts[1:].tolist())),
               "lo1": lo1.astype(dt), "hi1": hi1.astype(dt), "lo2": lo2.astype(dt), "hi2": hi2.astype(dt),
               "key0": (base - lo1 - lo2).astype(dt),
               # per side: first rank of its window, its width and its first cell in the segment
               "start": {"low": u0, "high": np.where(apart, s2, u0)},
               "wid": {"low": w1, "high": np.where(apart, e2 - s2, w1)},
               "off": {"low": np.ones(k, np.int64), "high": np.where(apart, w1 + 2, 1)},
               "flush": -(-hist.size // k)}        # draws per count: at least the histogram's cells

    lock = threading.Lock()
    pending: list[np.ndarray] = []                   # ranked chunks waiting to be counted

    def count(batch: list[np.ndarray]):
        """Fold ranked chunks into the shared histogram, one block of columns at a time (the
        bincounts run unlocked; candidate c's cells are hist[base[c]:base[c] + size[c]], so a block
        of columns has its own slice and the bincount temporary stays a block's size)."""
        base, size = win["base"], win["size"]
        for c0, c1 in win["blocks"]:
            h0, h1 = int(base[c0]), int(base[c1 - 1] + size[c1 - 1])
            cols = batch[0][:, c0:c1] if len(batch) == 1 else np.concatenate([r[:, c0:c1] for r in batch])
            key = np.clip(cols, win["lo1"][c0:c1], win["hi1"][c0:c1])
            key += np.clip(cols, win["lo2"][c0:c1], win["hi2"][c0:c1])
            key += win["key0"][c0:c1] - h0
            add = np.bincount(key.ravel(), minlength=h1 - h0)
            with lock:
                hist[h0:h1] += add

    def fold(ranks: np.ndarray):
        """Queue a ranked chunk; count the queue once it holds at least ``win["flush"]`` draws.

        Adding a bincount into the histogram touches every cell of it, so the draws are counted in
        batches at least as large as the histogram: that work then grows with the draws x
        candidates, not with the chunks x histogram (which grows as candidates^3)."""
        with lock:
            pending.append(ranks)
            if sum(len(r) for r in pending) < win["flush"]:
                return
            batch = pending[:]
            pending.clear()
        count(batch)

    def ranked_chunk(chunk):
        d, ss = chunk
        score = drawn(d, ss)
        beats_c = (np.count_nonzero(score > score[:, [ref_pos]], axis=0) if ref_pos is not None
                   else np.zeros(k, np.int64))
        order = _order_desc(score, overwrite=not kth)  # equal scores: the earlier column first
        kth_c = score[np.arange(d), order[:, min(top_k, k) - 1]] if kth else None
        del score
        top_c = np.bincount(order[:, :top_k].ravel(), minlength=k)
        best_c = np.bincount(order[:, 0], minlength=k)
        ranks = _ranks_from_order(order, overwrite=True)
        return ranks, top_c, best_c, beats_c, kth_c

    windows_ready = threading.Event()

    def task(chunk, pilot: bool, i: int):
        """Draw, rank and count one chunk; a pilot chunk hands its ranks back for the windows, any
        other waits until the windows are placed and folds its ranks into the histograms (when the
        plan keeps it)."""
        ranks, t_c, b_c, r_c, k_c = ranked_chunk(chunk)
        if not pilot:
            windows_ready.wait()
            if win is not None and i < n_used[0]:    # None: placing the windows failed (raised)
                fold(ranks)
            ranks = None
        return ranks, t_c, b_c, r_c, k_c

    # the first chunks (at least pilot_rows draws) place the rank windows. Every chunk is a task of
    # the worker threads (numpy's generators, sorts and ufuncs release the GIL), taken in order, so
    # the workers draw and rank the next chunks while this thread places the windows and counts
    # the pilot; each chunk has its own seed, so the result does not depend on the threads
    n_first = 0
    while n_first < len(chunks) and sum(c[0] for c in chunks[:n_first]) < pilot_rows:
        n_first += 1
    with _executor(len(chunks)) as pool:
        futures = [pool.submit(task, c, i < n_first, i) for i, c in enumerate(chunks)]
        try:
            firsts = [f.result() for f in futures[:n_first]]
            place_windows([f[0] for f in firsts])
        finally:
            windows_ready.set()                      # never leave a worker waiting
        for f in futures[n_used[0]:]:                # beyond the plan: those not started are dropped
            if hasattr(f, "cancel"):
                f.cancel()
        count([f[0] for f in firsts])
        kths = []
        for f in firsts + [f.result() for f in futures[n_first:n_used[0]]]:
            top += f[1]
            best += f[2]
            beats += f[3]
            kths.append(f[4])
        if kth:
            out["kth_score"] = np.concatenate(kths)
        del firsts, futures
    chunks = chunks[:n_used[0]]
    draws = int(sum(c[0] for c in chunks))
    out["draws"] = draws
    need = {"low": _order_stat_index(draws, alpha) + 1, "high": _order_stat_index(draws, 1 - alpha) + 1}
    levels = {"low": alpha, "high": 1 - alpha}
    extra = {}
    if ci_z is not None:                             # order statistics of the quantiles' confidence intervals
        for side, q in levels.items():
            h = ci_z * np.sqrt(q * (1 - q) / draws)
            extra[side] = [_order_stat_index(draws, float(np.clip(q - h, 0, 1))) + 1,
                           _order_stat_index(draws, float(np.clip(q + h, 0, 1))) + 1]
    if pending:                                      # the last, partial batch
        count(pending)
        pending.clear()

    # read-out: within a candidate's segment the cumulative counts rise, so the window ranks still
    # below the order statistic are a prefix of the window, found by one binary search in the
    # cumulative counts of the whole histogram
    unresolved = np.zeros(k, bool)
    # all cells hold k x draws counts in all; int32 when that fits (add.accumulate: np.cumsum with
    # a dtype takes a far slower path)
    cs = np.add.accumulate(hist, dtype=np.int32) if k * draws < 2 ** 31 else np.cumsum(hist.astype(np.int64))
    seg0 = win["base"]
    before = cs[seg0] - hist[seg0]                   # draws counted in all earlier segments
    def read(side: str, count: int) -> tuple[np.ndarray, np.ndarray]:
        """The rank at order statistic ``count`` from the window of ``side``, and whether it lies there."""
        first_cell = seg0 + win["off"][side]
        w = win["wid"][side]
        below = cs[first_cell - 1] - before          # draws ranked before the window
        reach = np.searchsorted(cs, before + count, side="left")   # first cell reaching the count
        short = np.clip(reach - first_cell, 0, w)    # window ranks still below the order statistic
        ok = (below < count) & (short < w)
        return np.where(ok, win["start"][side] + short, 0), ok

    for side in ("low", "high"):
        value, ok = read(side, need[side])
        out[f"rank_{side}"][perm] = value
        unresolved |= ~ok
        if side in extra:
            pair = []
            for count in extra[side]:
                v, ok_e = read(side, count)
                unresolved |= ~ok_e
                arr_e = np.empty(k, np.int64)
                arr_e[perm] = v
                pair.append(arr_e)
            out[f"rank_{side}_ci"] = tuple(pair)
    if unresolved.any():                             # exact fallback: ranks of those columns only
        todo = np.flatnonzero(unresolved)
        group = max(1, FALLBACK_CELLS // max(1, draws))
        for g0 in range(0, todo.size, group):
            sel = todo[g0:g0 + group]
            kept = np.empty((draws, sel.size), dtype=np.int32)
            row = 0
            for d, ss in chunks:
                score = drawn(d, ss)
                kept[row:row + d] = _ranks_from_order(_order_desc(score))[:, sel]
                row += d
            srt = np.sort(kept, axis=0) if extra else None
            for side, q in levels.items():
                out[f"rank_{side}"][perm[sel]] = np.quantile(kept, q, axis=0, method="inverted_cdf")
                for j, count in enumerate(extra.get(side, [])):
                    out[f"rank_{side}_ci"][j][perm[sel]] = srt[count - 1]
    out["p_top"][perm] = top / draws
    out["p_best"][perm] = best / draws
    if ref_pos is not None:
        out["p_beats"][perm] = beats / draws
    return out


def _requirements(require, rates: pd.DataFrame):
    """Requirement objects from strings (or Requirement objects), checked against the rates table."""
    from screenlab.stats.constraints import Requirement, parse_requirements

    items = list(require or ())
    texts = [x for x in items if not isinstance(x, Requirement)]
    return [x for x in items if isinstance(x, Requirement)] + parse_requirements(texts, rates)


def _apply_requirements(t: pd.DataFrame, kin, reqs, at_temperature_c: float, confidence: float) -> pd.DataFrame:
    """Candidates clearly outside a requirement (or without its column) get that reason (order 2);
    those whose interval straddles a threshold are flagged ``constraint_uncertain``."""
    if not reqs:
        return t
    from screenlab.stats.constraints import check_candidates

    chk = check_candidates(kin, t["catalyst"], reqs, at_temperature_c=at_temperature_c, confidence=confidence,
                           t_match_c=T_MATCH_C)
    status = chk["constraint"].to_numpy(dtype=object)
    free = (t["reason"] == "").to_numpy()
    out_ = free & np.isin(status, ["outside", "missing"])
    t = t.copy()
    t.loc[out_, "reason"] = chk["constraint_reason"].to_numpy(dtype=object)[out_]
    t.loc[out_, "order"] = 2
    unsure = free & (status == "uncertain")
    t["flags"] = _merge_codes(t["flags"], np.where(unsure, "constraint_uncertain", ""))
    return t


#: what "best" means for each metric, in words (the ranking's ``direction`` attribute)
DIRECTION = {
    "tof": "higher TOF first",
    "enhancement": "higher rate enhancement over the blank first",
    "ton": "higher TON first",
    "ea": "lower apparent barrier first (Ea ascending); likely transport-controlled candidates (flag low_ea) "
          "are listed after the others",
    "selectivity": "higher selectivity to the main product first",
    "ee": "larger enantiomeric excess first, either enantiomer (|ee|)",
}


def rank_candidates(kin, quality=None, *, metric: str = "tof", at_temperature_c: float | None = None,
                    top_k: int = 5, draws: int | None = None, seed: int = 0, confidence: float = 0.95,
                    catalysts: pd.DataFrame | None = None, enantiomers=None, enantiomer: str | None = None,
                    include_transport_limited: bool = False, require=(), mc_se: float | None = None) -> pd.DataFrame:
    """Rank candidates by a metric with their uncertainty.

    ``metric`` is a key of :data:`METRICS`: ``tof`` (high is good; TOF at ``at_temperature_c``,
    default the settings' reference temperature: the measured standard-condition group when that
    temperature was measured, else the Arrhenius prediction with its interval), ``enhancement``
    (high), ``ea`` (low is good: the lower apparent barrier first; candidates flagged ``low_ea``,
    likely transport-controlled, are listed after the others unless ``include_transport_limited``),
    ``ton`` (high), ``selectivity`` (high), ``ee`` (by magnitude, either enantiomer, with the
    favoured one in ``favours``; with ``enantiomer`` one of ``enantiomers``, the campaign's
    [analytes] pair, by the excess of that enantiomer). ``quality`` (from :func:`plate_quality`)
    adds plate flags and marks candidates measured only on failed plates unrankable.
    ``catalysts`` (CampaignData.catalysts) supplies the family column. ``require``: expressions
    ``column>=value`` / ``column<=value`` on the rates table (:mod:`screenlab.stats.constraints`);
    candidates clearly outside one are listed after the ranked ones with the reason, those that may
    or may not meet it are ranked and flagged ``constraint_uncertain``; every probability is over
    the candidates that remain.

    ``draws`` None (default): as many draws as the numbers need (:mod:`screenlab.stats.montecarlo`:
    every reported probability to a Monte Carlo SE below ``mc_se``, default 0.005, and stable rank
    bounds); a number: exactly that many draws, every candidate ranked in each.

    Columns: ``rank`` (1 = best by point estimate; NA for unrankable), ``catalyst, role, family,
    metric, estimate, ci_low, ci_high`` (``confidence`` interval of the sampling distribution),
    ``censored`` ('' measured; ``lower`` / ``upper``: the estimate is a bound, the open side of the
    interval empty), ``unit, favours`` (ee: the enantiomer in excess, '?' appended when its interval
    includes 0), ``rank_low, rank_high`` (rank interval over the draws), ``p_top`` (P(rank <=
    top_k)), ``p_best`` (P(rank 1); sums to 1 over the ranked rows), ``p_beats_reference``
    (P(better than the benchmark); NaN for the benchmark and when it is unranked), ``n`` (wells, or
    temperatures for Ea), ``temperature_c, basis, flags, reason``. Ranked rows first, then the
    unrankable ones with their reason: too fast to measure (lower bounds, largest first), outside a
    requirement, transport-limited (Ea), then the others by name. The benchmark is ranked like any
    candidate and carries the flag ``reference``. ``attrs``: ``direction`` (what comes first, in
    words), ``requirements`` (their texts) and ``monte_carlo`` (``draws``, ``draws_ranked``,
    ``mc_se`` (the largest Monte Carlo SE of a reported probability), ``mc_se_target``,
    ``rank_bound_halfwidth``, ``rank_bound_stable_share``, ``n_contenders``). Reproducible for a
    given ``seed``.
    """
    from screenlab.stats.montecarlo import MC_SE, adaptive_rank_summary, share_se

    m = _metric(metric)
    if draws is not None and draws < 1:
        raise UsageError("draws must be at least 1")
    if top_k < 1:
        raise UsageError("top must be at least 1")
    mc_se = MC_SE if mc_se is None else float(mc_se)
    settings = getattr(kin, "settings", None)
    t_rank = float(at_temperature_c if at_temperature_c is not None else
                   getattr(settings, "reference_temperature_c", 60.0))
    reqs = _requirements(require, kin.rates)
    t = candidate_table(kin, quality, metric=metric, at_temperature_c=at_temperature_c, confidence=confidence,
                        catalysts=catalysts, enantiomers=enantiomers, enantiomer=enantiomer,
                        include_transport_limited=include_transport_limited)
    t = _apply_requirements(t, kin, reqs, t_rank, confidence)
    ok = (t["reason"] == "").to_numpy()
    r = t[ok].reset_index(drop=True)
    u = t[~ok].copy()
    u["_key"] = np.where(u["order"].to_numpy() == 1, -u["estimate"].to_numpy(float), 0.0)
    u = u.sort_values(["order", "_key", "catalyst"], kind="stable").drop(columns="_key").reset_index(drop=True)
    k = len(r)
    sign = 1.0 if m.higher_is_better else -1.0
    absolute = bool(r["absolute"].any()) if k else False
    r["metric"], u["metric"] = m.name, m.name
    r["unit"], u["unit"] = m.unit, m.unit
    mc = {"draws": 0, "draws_ranked": 0, "mc_se": 0.0, "mc_se_target": mc_se if draws is None else None,
          "rank_bound_halfwidth": 0.0, "rank_bound_stable_share": 1.0, "n_contenders": 0}
    if k:
        mu = sign * r["mu"].to_numpy(float)
        key = np.abs(mu) if absolute else mu
        ref = np.flatnonzero(r["role"].to_numpy() == "reference")
        j = int(ref[np.argmax(key[ref])]) if ref.size else None        # the best-placed benchmark
        sig, dfs = r["sigma"].to_numpy(float), r["df"].to_numpy(float)
        if draws is None:
            summ = adaptive_rank_summary(mu, sig, dfs, seed, top_k=top_k, confidence=confidence, reference=j,
                                         absolute=absolute, mc_se=mc_se)
            mc.update(draws=int(summ["draws"]), draws_ranked=int(summ["draws_ranked"]), mc_se=float(summ["mc_se"]),
                      rank_bound_halfwidth=float(summ["rank_bound_halfwidth"]),
                      rank_bound_stable_share=float(summ["rank_bound_stable_share"]),
                      n_contenders=int(summ["n_contenders"]))
        else:
            summ = rank_summary(mu, sig, dfs, draws, seed, top_k=top_k, confidence=confidence, reference=j,
                                absolute=absolute)
            probs = [summ["p_top"], summ["p_best"]] + ([np.delete(summ["p_beats"], j)] if j is not None else [])
            worst = max(float(np.max(share_se(np.rint(p * draws), draws))) for p in probs if p.size)
            mc.update(draws=int(draws), draws_ranked=int(draws), mc_se=worst, n_contenders=k)
        r["rank_low"] = summ["rank_low"].astype(int)
        r["rank_high"] = summ["rank_high"].astype(int)
        r["p_top"] = summ["p_top"]
        r["p_best"] = summ["p_best"]
        pb = np.asarray(summ["p_beats"], float).copy()
        if ref.size:
            pb[ref] = np.nan
        r["p_beats_reference"] = pb
        point = np.argsort(-key, kind="stable")
        rank = np.empty(k, dtype=np.int64)
        rank[point] = np.arange(1, k + 1)
        r["rank"] = rank
        r = r.sort_values("rank").reset_index(drop=True)
    out = pd.concat([r, u], ignore_index=True) if len(u) else r
    for c in ("rank_low", "rank_high", "p_top", "p_best", "p_beats_reference", "rank"):
        if c not in out:
            out[c] = np.nan
    out["rank"] = out["rank"].astype("Int64")
    out["rank_low"] = out["rank_low"].astype("Int64")
    out["rank_high"] = out["rank_high"].astype("Int64")
    out = out[RANK_COLUMNS].reset_index(drop=True)
    direction = DIRECTION.get(m.name, "higher first" if m.higher_is_better else "lower first")
    if m.name == "ee" and enantiomer is not None:
        direction = f"larger excess of {enantiomer} first (signed: the other enantiomer in excess counts negative)"
    if m.name == "ea" and include_transport_limited:
        direction = "lower apparent barrier first (Ea ascending), likely transport-controlled candidates included"
    out.attrs = {"metric": m.name, "direction": direction, "requirements": [q.text for q in reqs],
                 "monte_carlo": mc, "top_k": int(top_k), "temperature_c": t_rank if m.source == "rates" else None}
    return out


def pareto(kin, quality=None, metrics=("tof", "enhancement", "ea"), *, at_temperature_c: float | None = None,
           draws: int = 0, seed: int = 0, confidence: float = 0.95,
           catalysts: pd.DataFrame | None = None, require=(), enantiomers=None,
           include_transport_limited: bool = False) -> pd.DataFrame:
    """Pareto set over 2-3 metrics, each with its direction (TOF and enhancement high, Ea low,
    ee by magnitude).

    A candidate dominates another when it is at least as good on every metric and better on one
    (point estimates). Columns: ``catalyst, role, family``, one estimate column per metric (its
    export name, e.g. ``tof_per_h, enhancement, ea_kj_mol``), ``on_front`` (bool),
    ``dominated_by_count``, ``dominated_by`` (';'-joined names of the first :data:`MAX_DOMINATORS`
    dominating candidates in name order; the count has them all), ``p_front`` (with ``draws`` > 0:
    the share of joint draws in which the candidate is on the front; metrics drawn
    independently), ``flags, reason`` (candidates missing any metric, or clearly outside a
    requirement of ``require`` (as in :func:`rank_candidates`), are listed, not compared).
    Sorted: front first, then by dominated_by_count.
    """
    metrics = tuple(metrics)
    if not 2 <= len(metrics) <= 3 or len(set(metrics)) != len(metrics):
        raise UsageError("pareto needs two or three different metrics")
    specs = [_metric(x) for x in metrics]
    reqs = _requirements(require, kin.rates)
    settings = getattr(kin, "settings", None)
    t_rank = float(at_temperature_c if at_temperature_c is not None else
                   getattr(settings, "reference_temperature_c", 60.0))
    tabs = [_apply_requirements(candidate_table(kin, quality, metric=x, at_temperature_c=at_temperature_c,
                                                confidence=confidence, catalysts=catalysts, enantiomers=enantiomers,
                                                include_transport_limited=include_transport_limited),
                                kin, reqs, t_rank, confidence).set_index("catalyst") for x in metrics]
    base = tabs[0][["role", "family"]].copy()
    reasons = pd.concat([tb["reason"].rename(s.name) for tb, s in zip(tabs, specs)], axis=1)
    req_reason = tabs[0]["order"].eq(2) & (tabs[0]["reason"] != "")
    base["reason"] = [";".join(f"{k}: {v}" for k, v in row.items() if v) for row in reasons.to_dict("records")]
    if reqs:                                         # a requirement's reason once, not per metric
        base.loc[req_reason, "reason"] = tabs[0].loc[req_reason, "reason"]
    base["flags"] = _merge_codes(*[tb["flags"].reindex(base.index).fillna("") for tb in tabs])
    for tb, s in zip(tabs, specs):
        base[s.column] = tb["estimate"].reindex(base.index)
    ok = (base["reason"] == "").to_numpy()
    names = base.index.to_numpy()[ok]
    sign = np.array([1.0 if s.higher_is_better else -1.0 for s in specs])
    absolute = [bool(tb["absolute"].reindex(base.index).fillna(False).to_numpy(bool)[ok].any()) for tb in tabs]
    mus = [tb["mu"].reindex(base.index).to_numpy(float)[ok] for tb in tabs]
    pts = np.column_stack([np.abs(x) if a else x for x, a in zip(mus, absolute)]) * sign
    cnt = np.zeros(len(base), dtype=np.int64)
    by = np.full(len(base), "", dtype=object)
    cnt[ok], by[ok] = _point_dominance(pts, names, MAX_DOMINATORS)
    base["on_front"] = False
    base.loc[ok, "on_front"] = cnt[ok] == 0
    base["dominated_by_count"] = pd.array(np.where(ok, cnt, 0), dtype="Int64")
    base.loc[~ok, "dominated_by_count"] = pd.NA
    base["dominated_by"] = by
    base["p_front"] = np.nan
    if draws > 0 and ok.sum() > 0:
        # t draws are symmetric, so sign * (mu + sigma T) is drawn as (sign * mu) + sigma T; an ee by
        # magnitude is drawn from |ee| (the fold matters only for an interval that spans 0)
        params = [(sign[i] * pts_col, tb["sigma"].reindex(names).to_numpy(float),
                   tb["df"].reindex(names).to_numpy(float))
                  for i, (tb, pts_col) in enumerate(zip(tabs, [np.abs(x) if a else x for x, a in zip(mus, absolute)]))]
        base.loc[ok, "p_front"] = front_share(params, draws, seed)
    base = base.reset_index().rename(columns={"index": "catalyst"})
    base["_o"] = np.where(ok, 0, 1)
    base = base.sort_values(["_o", "on_front", "dominated_by_count", "catalyst"],
                            ascending=[True, False, True, True]).drop(columns="_o")
    cols = ["catalyst", "role", "family", *[s.column for s in specs], "on_front", "dominated_by_count",
            "dominated_by", "p_front", "flags", "reason"]
    out = base[cols].reset_index(drop=True)
    out.attrs = {"requirements": [q.text for q in reqs]}
    return out


def _dominance(pts: np.ndarray) -> np.ndarray:
    """pts: (draws, k, m) scores, higher better. Returns (draws, k, k): [d, i, j] = i dominates j."""
    ge = gt = None
    for c in range(pts.shape[2]):                    # metric by metric: no reduction over a short last axis
        a, b = pts[:, :, None, c], pts[:, None, :, c]
        ge = (a >= b) if ge is None else (ge & (a >= b))
        gt = (a > b) if gt is None else (gt | (a > b))
    return ge & gt


def _dominator_counts(pts: np.ndarray) -> np.ndarray:
    """Per row of ``pts`` (k x m, higher better): how many rows dominate it.

    Rows are sorted lexicographically, best first: a dominator (at least as good everywhere,
    better somewhere) always sorts before the row it dominates, so the dominators of sorted row p
    are the earlier rows at least as good on the other metrics, less the earlier exact duplicates
    (equal rows are neighbours). Two or three metrics: "earlier rows at least as good on metrics
    2 (and 3)" is counted in sqrt(k) blocks of rows - against each earlier block through a
    table of counts over that block's ranks (one binary search per metric and row), pairwise
    inside a block - O(k^1.5) in all. More metrics: pairwise against the earlier rows only, in
    blocks of :data:`CHUNK_CELLS`.
    """
    k, m = pts.shape
    if k == 0:
        return np.zeros(0, np.int64)
    order = np.lexsort(tuple(-pts[:, c] for c in reversed(range(m))))
    s = pts[order]
    n = np.zeros(k, np.int64)
    if m in (2, 3):
        rest = s[:, 1:]                              # metrics 2 (and 3)
        B = max(1, int(np.sqrt(k)))
        nb = -(-k // B)
        full = np.zeros((nb, k), np.int32)           # full[t, p]: rows of block t at least as good as p
        for t in range(nb):                          # a loop over sqrt(k) blocks, not over rows
            blk = rest[t * B:(t + 1) * B]
            srt = [np.sort(blk[:, j]) for j in range(m - 1)]
            # q in the block is at least as good as p on metric j exactly when at least as many of
            # the block's values lie below q as below p (counts from the block's sorted values)
            at_p = [np.searchsorted(srt[j], rest[:, j], side="left") for j in range(m - 1)]
            if m == 2:
                full[t] = blk.shape[0] - at_p[0]
            else:
                size = blk.shape[0] + 1
                below = [np.searchsorted(srt[j], blk[:, j], side="left") for j in range(2)]
                grid = np.bincount(below[0] * size + below[1], minlength=size * size).reshape(size, size)
                grid = grid[::-1, ::-1].cumsum(axis=0).cumsum(axis=1)[::-1, ::-1]   # rows >= (i, j)
                full[t] = grid[at_p[0], at_p[1]]
        block_of = np.arange(k) // B
        before = np.cumsum(full, axis=0, dtype=np.int64)     # rows of blocks 0..t
        n += np.where(block_of > 0, before[np.maximum(block_of - 1, 0), np.arange(k)], 0)
        pad = np.full((nb * B, m - 1), -np.inf)
        pad[:k] = rest
        pad = pad.reshape(nb, B, m - 1)
        inside = np.tri(B, B, -1, dtype=bool).T[None]        # [q, p]: q before p
        for j in range(m - 1):
            inside = inside & (pad[:, :, None, j] >= pad[:, None, :, j])
        n += inside.sum(axis=1).ravel()[:k]
        # equal rows never dominate each other, but were counted as "at least as good"
        n -= np.arange(k) - _run_start((s[1:] == s[:-1]).all(axis=1)[None])[0]
    else:
        step = max(1, CHUNK_CELLS // max(1, k * m))
        for p0 in range(0, k, step):                 # blocks of rows against all rows before them
            p1 = min(k, p0 + step)
            q, p = s[:p1, None, :], s[None, p0:p1, :]
            dom = (q >= p).all(axis=2) & (q > p).any(axis=2)
            n[p0:p1] = dom.sum(axis=0)
    out = np.empty(k, np.int64)
    out[order] = n
    return out


def _point_dominance(pts: np.ndarray, names: np.ndarray, cap: int) -> tuple[np.ndarray, np.ndarray]:
    """Per candidate (rows of pts, higher better): how many candidates dominate it, and the first
    ``cap`` of their names (in the order of ``names``) joined with ';'.

    The counts come from :func:`_dominator_counts`. The names: candidates are scanned as
    dominators in row order, block by block, and a candidate leaves the scan once it has
    ``min(count, cap)`` of them, so the work falls with every block instead of being k^2.
    """
    k, m = pts.shape
    cnt = _dominator_counts(pts)
    by = np.full(k, "", dtype=object)
    want = np.minimum(cnt, cap)
    have = np.zeros(k, np.int64)
    todo = np.flatnonzero(want > 0)
    ii, jj = [], []
    j0 = 0
    while todo.size and j0 < k:
        step = max(1, CHUNK_CELLS // max(1, todo.size * m))
        blk, sub = pts[j0:j0 + step], pts[todo]
        ge = gt = None
        for c in range(m):                           # metric by metric: no reduction over a short axis
            x, y = blk[None, :, c], sub[:, None, c]
            ge = (x >= y) if ge is None else (ge & (x >= y))
            gt = (x > y) if gt is None else (gt | (x > y))
        dom = ge & gt                                # dom[t, q]: row j0 + q dominates todo[t]
        keep = dom & (np.cumsum(dom, axis=1) <= (want[todo] - have[todo])[:, None])
        t, q = np.nonzero(keep)
        ii.append(q + j0)
        jj.append(todo[t])
        have[todo] += keep.sum(axis=1)
        todo = todo[have[todo] < want[todo]]
        j0 += step
    if ii:
        i, j = np.concatenate(ii), np.concatenate(jj)
        o = np.lexsort((i, j))
        joined = pd.Series(names[i[o]]).groupby(j[o], sort=True).agg(";".join)
        by[joined.index.to_numpy()] = joined.to_numpy()
    return cnt, by


def _lex_order(p1: np.ndarray, p2: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per row of two (draws, k) score matrices: the columns sorted by p1 then p2, both highest
    first, and ``same`` (draws, k - 1): sorted neighbours equal on both.

    float32: one argsort of 64-bit keys (p1's order-preserving integer in the high word, p2's in
    the low word); otherwise two stable argsorts."""
    if p1.dtype == np.float32 and p2.dtype == np.float32:
        key = np.empty(p1.shape, np.int64)
        words = key.view(np.int32).reshape(*p1.shape, 2)
        hi, lo = (1, 0) if np.little_endian else (0, 1)
        _desc_int32(p1, out=words[..., hi])
        low = _desc_int32(p2, out=words[..., lo])
        low ^= np.int32(-2 ** 31)                    # the low word compares unsigned: shift its order
        order = np.argsort(key, axis=1)
        ks = np.take_along_axis(key, order, axis=1)
        return order, ks[:, 1:] == ks[:, :-1]
    o2 = np.argsort(-p2, axis=1, kind="stable")
    order = np.take_along_axis(o2, np.argsort(-np.take_along_axis(p1, o2, axis=1), axis=1, kind="stable"), axis=1)
    s1, s2 = np.take_along_axis(p1, order, axis=1), np.take_along_axis(p2, order, axis=1)
    return order, (s1[:, 1:] == s1[:, :-1]) & (s2[:, 1:] == s2[:, :-1])


def _run_start(same: np.ndarray) -> np.ndarray:
    """(draws, k) index of the first member of each sorted position's run of equal neighbours."""
    d, n = same.shape[0], same.shape[1] + 1
    new_run = np.ones((d, n), bool)
    new_run[:, 1:] = ~same
    return np.maximum.accumulate(np.where(new_run, np.arange(n), 0), axis=1)


def _front_2(p1: np.ndarray, p2: np.ndarray) -> np.ndarray:
    """(draws, k) on-front mask for two metrics (higher better), without pairwise comparisons.

    Sorted on metric 1 then metric 2 (best first), every dominator of a candidate comes before it,
    and so do its exact duplicates (which do not dominate it; they are its neighbours in the sort).
    A candidate is on the front exactly when everything before its run of duplicates is worse on
    metric 2: a running maximum of metric 2 along each row. Exact with ties.
    """
    order, same = _lex_order(p1, p2)
    q = np.take_along_axis(p2, order, axis=1)
    before = np.maximum.accumulate(q, axis=1)
    if same.any():                                   # duplicates: compare with what precedes their run
        start = _run_start(same)
        prev = np.take_along_axis(before, np.maximum(start - 1, 0), axis=1)
        front_sorted = (start == 0) | (prev < q)
    else:
        front_sorted = np.ones(q.shape, bool)
        front_sorted[:, 1:] = q[:, 1:] > before[:, :-1]
    out = np.zeros(q.shape, bool)
    np.put_along_axis(out, order, front_sorted, axis=1)
    return out


def _directions(m: int) -> np.ndarray:
    """A few positive weight vectors (m x n): the unit vectors and the grid {0, 1, 2}^m directions."""
    g = np.array(np.meshgrid(*[np.arange(3)] * m, indexing="ij")).reshape(m, -1).T
    g = g[g.sum(axis=1) > 0].astype(float)
    g /= np.linalg.norm(g, axis=1, keepdims=True)
    return np.unique(np.round(g, 12), axis=0).T


def _front_n(pts: np.ndarray) -> np.ndarray:
    """(draws, k) on-front mask for (draws, k, m) scores (higher better), any m.

    In each draw the maximiser of a positive-weighted sum of the (standardised) metrics is on the
    front, so a handful of weightings gives front members ("witnesses") at O(k) cost. Every
    candidate is first tested against those witnesses; the pairwise test then runs only among the
    candidates no witness dominates (a candidate dominated by anyone is dominated by a front
    member, and front members always survive the first test, so the result is exact).
    """
    d, k, m = pts.shape
    with np.errstate(invalid="ignore", over="ignore"):   # infinite scores: any witness keeps it exact
        centre = pts.mean(axis=(0, 1))
        scale = pts.std(axis=(0, 1))
        scale[~(scale > 0)] = 1.0
        wits = np.argmax(((pts - centre) / scale) @ _directions(m), axis=1)    # (d, n_dir) front members
    dominated = np.zeros((d, k), bool)
    for w in range(wits.shape[1]):                   # a loop over a few weightings, not candidates
        a = np.take_along_axis(pts, wits[:, w, None, None], axis=1)           # (d, 1, m)
        dominated |= (a >= pts).all(axis=2) & (a > pts).any(axis=2)
    alive = ~dominated
    n_alive = alive.sum(axis=1)
    out = np.zeros((d, k), bool)
    by_size = np.argsort(n_alive, kind="stable")     # draws with few survivors together: padding stays small
    budget = CHUNK_CELLS * 4
    r0 = 0
    while r0 < d:                                    # batches of draws bound d' x s x s x m
        ns = n_alive[by_size[r0:]].astype(np.int64)
        over = np.flatnonzero((np.arange(ns.size) + 1) * np.maximum(ns, 1) ** 2 * m > budget)
        r1 = r0 + (max(1, int(over[0])) if over.size else ns.size)
        rows = by_size[r0:r1]
        s = max(1, int(n_alive[rows].max()))
        al = alive[rows]
        idx = np.argsort(~al, axis=1, kind="stable")[:, :s]                  # survivors first, padded
        valid = np.arange(s)[None, :] < n_alive[rows][:, None]
        sp = np.take_along_axis(pts[rows], idx[:, :, None], axis=1)
        sp[~valid] = -np.inf                         # padding dominates nobody
        front_s = ~_dominance(sp).any(axis=1) & valid
        blk = np.zeros((rows.size, k), bool)
        np.put_along_axis(blk, idx, front_s, axis=1)
        out[rows] = blk
        r0 = r1
    return out


#: candidates per block of the three-metric front sweep (:func:`_front_3`)
FRONT_BLOCK = 64
#: draws swept together by the three-metric front (several chunks of draws)
FRONT_DRAWS = 256


def _front_3(pts: np.ndarray) -> np.ndarray:
    """(draws, k) on-front mask for (draws, k, 3) scores (higher better), exact.

    Sorted on metrics 1 then 2 (best first), every dominator of a candidate comes before it, so
    a candidate is dominated exactly when an earlier one, other than its exact duplicates (its
    neighbours in the sort, which take the status of the first of them), is at least as good on
    metrics 2 and 3. Rows where two candidates tie on metrics 1 and 2 but not 3 (where the sort
    does not settle their order) are done by the exact pairwise test (:func:`_front_n`); continuous
    draws have them with probability 0. The candidates are swept in blocks of
    :data:`FRONT_BLOCK`: each block is tested against
    the two-metric front ("staircase") of everything before it, which holds every earlier point
    that matters (one that is not on it is beaten on both metrics by one that is), and pairwise
    within itself; the staircase then becomes the two-metric front of itself and the block
    (:func:`_front_2`). The staircase stays small (tens of points), so a sweep costs about
    draws x k x (block + staircase) comparisons instead of draws x k^2.
    """
    d, k, _ = pts.shape
    order, same12 = _lex_order(pts[:, :, 0], pts[:, :, 1])
    b = np.take_along_axis(pts[:, :, 1], order, axis=1)
    c = np.take_along_axis(pts[:, :, 2], order, axis=1)
    same = same12 & (c[:, 1:] == c[:, :-1])          # exact duplicates, neighbours in the sort
    tied = np.flatnonzero((same12 & ~same).any(axis=1))  # equal on metrics 1, 2 but not 3: order unsure
    on = np.zeros((d, k), bool)
    sb = np.full((d, 0), -np.inf, dtype=b.dtype)
    sc = np.full((d, 0), -np.inf, dtype=c.dtype)
    earlier = np.tri(FRONT_BLOCK, FRONT_BLOCK, -1, dtype=bool).T      # earlier[q, i]: q before i
    for p0 in range(0, k, FRONT_BLOCK):              # a sweep over blocks of candidates
        bb, cc = b[:, p0:p0 + FRONT_BLOCK], c[:, p0:p0 + FRONT_BLOCK]
        n = bb.shape[1]
        beaten = ((sb[:, None, :] >= bb[:, :, None]) & (sc[:, None, :] >= cc[:, :, None])).any(axis=2)
        beaten |= ((bb[:, :, None] >= bb[:, None, :]) & (cc[:, :, None] >= cc[:, None, :])
                   & earlier[:n, :n]).any(axis=1)
        on[:, p0:p0 + n] = ~beaten
        ub, uc = np.concatenate([sb, bb], axis=1), np.concatenate([sc, cc], axis=1)
        keep = _front_2(ub, uc) & np.isfinite(ub)
        size = keep.sum(axis=1)
        top = max(1, int(size.max()))
        idx = np.argsort(~keep, axis=1, kind="stable")[:, :top]          # staircase members first
        pad = np.arange(top)[None, :] >= size[:, None]
        sb = np.where(pad, -np.inf, np.take_along_axis(ub, idx, axis=1))
        sc = np.where(pad, -np.inf, np.take_along_axis(uc, idx, axis=1))
    on = np.take_along_axis(on, _run_start(same), axis=1)   # a duplicate shares its first member's status
    out = np.zeros((d, k), bool)
    np.put_along_axis(out, order, on, axis=1)
    if tied.size:                                    # rare rows: the exact pairwise test
        out[tied] = _front_n(pts[tied])
    return out


def front_share(params, draws: int, seed=0) -> np.ndarray:
    """Share of joint draws in which each candidate is on the Pareto front.

    ``params`` holds one ``(mu, sigma, df)`` triple per metric (arrays over the same candidates,
    oriented so that higher is better); metrics and candidates are drawn independently. Draws are
    made in chunks (each with its own seed from ``seed``): two metrics use the sort + running
    maximum front (:func:`_front_2`), three the block sweep against a staircase (:func:`_front_3`),
    more the witness-pruned pairwise test (:func:`_front_n`). Same seed -> same output.
    """
    k, m = len(params[0][0]), len(params)
    hits = np.zeros(k, np.int64)
    chunks = _chunks(draws, k, seed, per_cell=m)

    def drawn(d, ss):
        rng = np.random.default_rng(ss)
        return [draw_matrix(mu, sig, df, d, rng) for mu, sig, df in params]

    # the three-metric sweep costs Python steps per block of candidates: its chunks are drawn as
    # always (same numbers) and swept together, a few hundred draws at a time
    group = max(1, FRONT_DRAWS // max(1, chunks[0][0])) if m == 3 and chunks else 1
    for g0 in range(0, len(chunks), group):
        cols = [c[0] if len(c) == 1 else np.concatenate(c)
                for c in zip(*(drawn(d, ss) for d, ss in chunks[g0:g0 + group]))]
        if m == 2:
            front = _front_2(cols[0], cols[1])
        else:
            cube = np.stack(cols, axis=2)
            front = _front_3(cube) if m == 3 else _front_n(cube)
        hits += front.sum(axis=0)
    return hits / draws


__all__ = ["FLAGS", "METRICS", "Metric", "candidate_table", "draw_matrix", "rank_draws", "rank_summary",
           "rank_candidates", "front_share", "pareto"]
