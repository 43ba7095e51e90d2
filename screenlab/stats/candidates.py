"""Candidate tables: each candidate's estimate of one metric and its sampling distribution.

The metric table (:data:`METRICS`, one :class:`Metric` each) says where a metric comes from and how
it is drawn; :func:`candidate_table` builds, for one metric, one row per candidate with its estimate,
interval, the centre and scale of its draws, its flags and, when it cannot be ranked, the reason.
:func:`requirements` / :func:`apply_requirements` bring in the rates-table requirements
(``--require``, :mod:`screenlab.stats.constraints`). The ranking
(:func:`screenlab.stats.ranking.rank_candidates`) and the Pareto set
(:func:`screenlab.stats.pareto.pareto`) start from these tables.

Sampling distributions (chosen per metric in :data:`METRICS`):

* TOF, enhancement, TON are positive ratios whose error grows with their size, so they are drawn
  **log-normally**: ``ln X = ln x + s * T_df`` with ``T_df`` Student t and ``s`` the SE on the log
  scale (``se / x`` by the delta method, or the log-scale SE the source gives, e.g. the Arrhenius
  prediction's ``ln_tof_se``). Ranking two candidates then compares ratios, as a chemist does
  ("twice as active"), and no draw goes negative.
* Ea is a difference-like quantity from a straight-line fit, drawn from a **t** distribution:
  ``Ea + se * T_df`` with the fit's residual df.
* Selectivity and ee (campaigns with an [analytes] table) are drawn from t distributions on the
  percent scale. The rates table's ee is signed (positive: the first enantiomer named in
  [analytes].enantiomers in excess). Ranked by ee, candidates are ordered by the magnitude of the
  excess of either enantiomer (draws folded: |ee + se T|), with the favoured one in ``favours``;
  with ``enantiomer=`` by the signed excess of that enantiomer.

Intervals use the one Student t quantile rule of the tree (:func:`screenlab.uncertainty.t_quantile`;
a missing df gives the normal quantile). A censored rate (the rates table's ``censored``: ``lower``
/ ``upper`` bounds) is reported as its bound, never drawn. Ea candidates flagged ``low_ea`` (likely
transport-controlled) get a reason unless ``include_transport_limited``.

How to add a metric: add a :class:`Metric` to :data:`METRICS` naming its
source frame (``rates`` for per-temperature group rows, ``arrhenius`` for per-catalyst fits), the
estimate column, its SE column (a log-normal metric may give the SE of its logarithm, ``ln_se``, or
its CI columns, from which that SE is backed out; a t-distributed metric needs ``se``), the df
column, the direction and whether it is log-normal, and its line in :data:`DIRECTION`. For example
a conversion in percent from the rates table, were it a column there with its SE and df, would be
``Metric("conversion", "conversion", "%", "conversion_pct", "rates", "conversion_pct",
se="conversion_se", df="conversion_df", higher_is_better=True, lognormal=False)``; then test its
direction and its rank probabilities against a closed form.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from screenlab import _groups as grp
from screenlab.errors import UsageError
from screenlab.model import UNCATALYSED
from screenlab.uncertainty import t_quantile, within_range

#: Flag codes set by the candidate tables (code -> one plain sentence).
FLAGS: dict[str, str] = {
    "predicted_from_arrhenius": "Not measured at the ranking temperature: the TOF is the catalyst's Arrhenius "
                                "prediction there, with the confidence interval of the fitted line.",
    "extrapolated": "The ranking temperature lies outside the temperatures this catalyst was measured at.",
    "on_failed_plate": "Some of this catalyst's wells sit on a plate that failed its quality check.",
    "on_unchecked_plate": "Some of this catalyst's wells sit on a plate without a benchmark (status unchecked): its "
                          "quality rests on the blanks, replicates, edge test and separation from the blanks.",
    "ee_sign_uncertain": "The ee interval includes 0: which enantiomer this catalyst favours is not established.",
    "constraint_uncertain": "The interval of a required column straddles the threshold (--require): the candidate "
                            "may or may not meet it, so it is kept.",
    "reference": "This is the benchmark (reference) catalyst, ranked alongside the candidates for comparison.",
}
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
    ln_se: str | None = None       # SE of the logarithm (log-normal metrics whose interval is on the log scale)
    df: str | None = None          # degrees of freedom column (NaN / absent -> normal draws)
    higher_is_better: bool = True
    lognormal: bool = True
    predict: bool = False          # fall back to the Arrhenius prediction at unmeasured T (TOF)
    censorable: bool = False       # the rates table's ``censored`` bound applies (rate-derived metrics)
    limits: tuple[float, float] | None = None   # the quantity's range: intervals are shown within it

    def ci_column(self, side: str) -> str:
        """Export name of the interval column: tof_per_h -> tof_ci_low_per_h."""
        return self.column.replace(self.name, f"{self.name}_ci_{side}", 1)


METRICS: dict[str, Metric] = {
    "tof": Metric("tof", "TOF", "h-1", "tof_per_h", "rates", "tof_per_h", se="tof_se_per_h", df="tof_df",
                  higher_is_better=True, lognormal=True, predict=True, censorable=True),
    # the enhancement's interval is on the log scale: the rates table's SE of ln(enhancement) and
    # its Welch df (a table without them, made by hand: the SE backed out of the interval at the
    # analysis's confidence, with the normal quantile, which overstates it for a table made on few df)
    "enhancement": Metric("enhancement", "rate enhancement over the blank", "", "enhancement", "rates",
                          "enhancement", ci=("enhancement_ci_low", "enhancement_ci_high"),
                          ln_se="enhancement_ln_se", df="enhancement_df",
                          higher_is_better=True, lognormal=True, censorable=True),
    # TON's SE is the replicates' SD / sqrt(n): n - 1 degrees of freedom
    "ton": Metric("ton", "TON", "", "ton", "rates", "ton", se="ton_se", df="ton_df",
                  higher_is_better=True, lognormal=True),
    "ea": Metric("ea", "apparent Ea", "kJ/mol", "ea_kj_mol", "arrhenius", "ea_kj_mol", se="ea_se", df="fit_df",
                 higher_is_better=False, lognormal=False),
    # bounded percentages near their middle range: t draws on the percent scale
    "selectivity": Metric("selectivity", "selectivity to the main product", "%", "selectivity_pct", "rates",
                          "selectivity_pct", se="selectivity_se", df="selectivity_df", higher_is_better=True,
                          lognormal=False, limits=(0.0, 100.0)),
    # signed ee: positive = the first enantiomer named in [analytes].enantiomers; ranked by magnitude
    # unless an enantiomer is chosen (candidate_table's ``enantiomer``)
    "ee": Metric("ee", "enantiomeric excess", "%", "ee_pct", "rates", "ee_pct", se="ee_se", df="ee_df",
                 higher_is_better=True, lognormal=False, limits=(-100.0, 100.0)),
}


def get_metric(name: str) -> Metric:
    """The metric table's entry of ``name`` (UsageError naming the choices otherwise)."""
    if name not in METRICS:
        raise UsageError(f"unknown metric {name!r}; choose one of {', '.join(METRICS)}")
    return METRICS[name]


def _num(frame: pd.DataFrame, col: str | None) -> np.ndarray:
    if col is None or col not in frame:
        return np.full(len(frame), np.nan)
    return pd.to_numeric(frame[col], errors="coerce").to_numpy(dtype=float)


def merge_codes(*cols) -> list[str]:
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
    """catalyst -> role ('reference' wins over 'sample' when a catalyst is both), sorted by name;
    from the sample and reference rows of the rates table and the wells (codes: no string group-by)."""
    ref: dict[str, bool] = {}
    for f in (kin.rates, kin.wells):
        if f is None or not len(f) or "role" not in f:
            continue
        rc, ru = grp.factorize(f["role"])
        words = np.array([str(x) for x in ru] + [""], dtype=object)   # a missing role: none of the two
        rc = np.where(rc >= 0, rc, len(ru))
        is_ref = (words == "reference")[rc]
        cc, cu = grp.factorize(f["catalyst"])          # a missing catalyst: -1, left out
        ok = ((words == "sample") | (words == "reference"))[rc] & (cc >= 0)
        any_ref = np.bincount(cc[ok], weights=is_ref[ok], minlength=len(cu)) > 0
        seen = np.bincount(cc[ok], minlength=len(cu)) > 0
        cu, any_ref = np.asarray(cu, dtype=object)[seen], any_ref[seen]
        for name, r in zip([str(x) for x in cu], any_ref.tolist()):   # a loop over catalysts
            ref[name] = ref.get(name, False) or r
    names = sorted(ref)
    return pd.Series(["reference" if ref[c] else "sample" for c in names],
                     index=pd.Index(names, dtype="str", name="catalyst"), name="_r", dtype="str")


def _plate_info(kin, quality, plates_used: pd.Series | None = None) -> pd.DataFrame:
    """Per catalyst: all plates failed?, any failed?, any unchecked?, plate-quality flags of its plates.

    ``plates_used`` maps catalyst -> ';'-joined plates behind its estimate (the rates row's
    ``plates``); catalysts not in it use every plate they have wells on (Arrhenius-based metrics).
    ``plate_flags`` is the union of the plates' flags (``failed`` and ``no_benchmark`` left out: the
    candidate's ``on_failed_plate`` / ``on_unchecked_plate`` say them) in the order of the catalyst's
    plates, each code once. One row per catalyst, sorted by name (one per catalyst in order of
    first appearance when there is no plate quality).
    """
    w = kin.wells[["catalyst", "plate", "role"]]    # the columns first: filtering every column is slow
    role = w["role"].astype(str)
    w = w[w["catalyst"].notna() & ((role == "sample") | (role == "reference"))]
    # each (catalyst, plate) pair once, in order of first appearance, as codes (no tuple per row)
    cat_c, cat_u = grp.factorize(w["catalyst"].astype(str))
    plate_c, plate_u = grp.factorize(w["plate"].astype(str))
    plate_c, n_plate = grp.with_missing(plate_c, plate_u)
    _, pair_cat, pair_plate = grp.pair_codes(cat_c, plate_c, max(n_plate, 1))
    plate_names = np.append(np.asarray(plate_u, dtype=object), np.nan)   # a missing plate last
    cats = np.asarray(cat_u, dtype=object)[pair_cat]
    plates = plate_names[pair_plate]
    if plates_used is not None and len(plates_used):
        used = plates_used.dropna().astype(str)
        u_cat, u_plate = [], []
        for c, text in zip(used.index.tolist(), used.tolist()):      # a loop over candidates
            for plate in text.split(";"):
                u_cat.append(c)
                u_plate.append(plate)
        not_used = pd.Index(pd.unique(np.asarray(u_cat, dtype=object))).get_indexer(cats) < 0
        cats = np.concatenate([cats[not_used], np.asarray(u_cat, dtype=object)])
        plates = np.concatenate([plates[not_used], np.asarray(u_plate, dtype=object)])
    if quality is None or quality.empty:
        return pd.DataFrame({"catalyst": pd.array(pd.unique(cats), dtype="str"), "all_failed": False, "any_failed": False,
                             "any_unchecked": False, "plate_flags": ""})
    q = quality.assign(plate=quality["plate"].astype(str)).drop_duplicates("plate")
    # each plate's flags without the status ones (said by on_failed_plate / on_unchecked_plate), once per plate
    pf = (q["flags"].fillna("").astype(str).str.replace(r"(^|;)(?:failed|no_benchmark)(?=;|$)", r"\1", regex=True)
          .str.replace(r";{2,}", ";", regex=True).str.strip(";")).to_numpy(dtype=object)
    status = q["status"].to_numpy(dtype=object)
    q_row = pd.Index(q["plate"]).get_indexer(plates)              # -1: a plate without a quality row
    has_q = q_row >= 0
    st = np.where(has_q, status[q_row], "")
    failed, unchecked = st == "failed", st == "unchecked"
    flags = np.where(has_q, pf[q_row], "")
    # per catalyst, by name as groupby sorts: all / any of its pairs
    code, names = grp.factorize(pd.Series(cats, dtype=object))
    by_name = np.argsort(np.asarray(names, dtype=object), kind="stable")
    n = len(names)
    n_pairs = grp.group_count(code, n)
    n_failed = grp.group_count(code, n, failed)
    # flags: only the (few) pairs that carry any, split into codes, first occurrence per catalyst
    joined = [dict() for _ in range(n)]
    for c, text in zip(code[flags != ""].tolist(), flags[flags != ""].tolist()):   # a loop over flagged pairs
        joined[c].update(dict.fromkeys(f for f in text.split(";") if f))
    return pd.DataFrame({
        "catalyst": pd.array(np.asarray(names, dtype=object)[by_name], dtype="str"),
        "all_failed": (n_failed == n_pairs)[by_name], "any_failed": (n_failed > 0)[by_name],
        "any_unchecked": (grp.group_count(code, n, unchecked) > 0)[by_name],
        "plate_flags": pd.array(np.array([";".join(d) for d in joined], dtype=object)[by_name], dtype="str")})


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
    at, how many the fit could use, and why the others were left out (the Arrhenius row's
    ``left_out``: no activity over the blank, faster than the first reading, irregular courses).
    ``purpose`` ends the sentence ("no Ea", "no Arrhenius line to predict from"). '' where the fit
    exists with an uncertainty. Vectorised (texts per distinct count)."""
    a = arr[arr["catalyst"].astype(str) != UNCATALYSED] if len(arr) else arr
    info = pd.DataFrame({"catalyst": a["catalyst"].astype(str).to_numpy() if len(a) else [],
                         "n_fit": _num(a, "n_temperatures"), "ea": _num(a, "ea_kj_mol"), "se": _num(a, "ea_se"),
                         "flags": a["flags"].fillna("").astype(str).to_numpy() if len(a) else [],
                         "left_out": (a["left_out"].fillna("").astype(str).to_numpy() if len(a) and "left_out" in a
                                      else np.full(len(a), "", dtype=object))}
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
    fi = grp.FlagIndex(pd.Series(col("flags", ""), dtype=object).astype(str))
    inactive = fi.has("no_activity")
    # left out for another cause too (faster than the first reading, irregular courses): not "inactive"
    other_cause = fi.has("left_out_bound") | fi.has("left_out_irregular")
    only_inactive = inactive & ~other_cause
    left_txt = np.asarray(col("left_out", ""), dtype=object).astype(str)
    n_meas = measured_t.reindex(pd.Index(names.astype(str))).fillna(0).to_numpy(int) if len(measured_t) \
        else np.zeros(len(names), int)
    n_meas = np.maximum(n_meas, n_fit)
    meas_txt = pd.Series(n_meas).map(
        lambda n: f"measured at {_count_words(n)} temperature{'s' if n != 1 else ''}: {purpose}" if n else
        f"no rates at its standard condition: {purpose}").to_numpy(dtype=object)
    of_txt = pd.Series(n_meas).map(lambda n: f"of {n}").to_numpy(dtype=object)
    why = np.where(left_txt != "", " [left out: " + left_txt + "]", "")
    some_left = n_meas > n_fit
    none = np.where(only_inactive, "no activity over the blank at any temperature",
                    "no temperature usable for a fit" + why + f": {purpose}")
    one = np.where(some_left & only_inactive, "active over the blank at one " + of_txt + " temperatures",
                   np.where(some_left, "fitted at one " + of_txt + " temperatures" + why,
                            "measured at one temperature only")) + f": {purpose}"
    two = np.where(some_left & only_inactive, "active over the blank at two " + of_txt + " temperatures",
                   np.where(some_left, "fitted at two " + of_txt + " temperatures" + why,
                            "measured at two temperatures only")) + ": the Arrhenius line has no uncertainty (needs three)"
    out = np.select([~has, n_fit == 0, (n_fit == 1) | ~ea_ok, (n_fit == 2) | ~se_ok],
                    [meas_txt, none, one, two], default="")
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


def ranking_temperature(kin, at_temperature_c: float | None) -> float:
    """The temperature compared at: ``at_temperature_c``, else the settings' reference temperature."""
    settings = getattr(kin, "settings", None)
    return float(at_temperature_c if at_temperature_c is not None else
                 getattr(settings, "reference_temperature_c", 60.0))


def _base_table(kin, arr: pd.DataFrame, catalysts: pd.DataFrame | None) -> pd.DataFrame:
    """One row per candidate (sample or reference wells, or an Arrhenius row): catalyst, role, family."""
    roles = _roles(kin)
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
    return base


def _rates_source(kin, m: Metric, arr: pd.DataFrame, base: pd.DataFrame, at_temperature_c: float,
                  confidence: float) -> pd.DataFrame:
    """Per catalyst: its standard-condition rates row at the temperature (the largest by wells), plus
    the Arrhenius prediction for the others when the metric has one (``predict``)."""
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
                        "ln_se": _num(r, m.ln_se), "basis": "measured",
                        "censored": _censored(r) if m.censorable else "",
                        "plates": r["plates"].to_numpy() if "plates" in r else np.nan})
    if m.predict and len(arr):
        missing = arr[arr["catalyst"].astype(str).isin(set(base["catalyst"].tolist()) - set(src["catalyst"].tolist()))]
        if len(missing):
            src = pd.concat([src, _predicted_source(kin, missing, at_temperature_c, confidence)], ignore_index=True)
    return src


def _predicted_source(kin, missing: pd.DataFrame, at_temperature_c: float, confidence: float) -> pd.DataFrame:
    """The Arrhenius TOF prediction at ``at_temperature_c`` for the catalysts of ``missing`` (their
    Arrhenius rows), flagged ``predicted_from_arrhenius`` (and ``extrapolated`` outside their range)."""
    from screenlab.kinetics.arrhenius import predict_tof

    p = predict_tof(missing, at_temperature_c, confidence)
    mi = missing.reset_index(drop=True)
    out_of_range = (at_temperature_c < _num(mi, "t_min_c") - T_MATCH_C) | (
        at_temperature_c > _num(mi, "t_max_c") + T_MATCH_C)
    predicted = np.isfinite(p["tof_per_h"].to_numpy(float))          # a line to predict from
    flags = merge_codes(mi["flags"].fillna("").astype(str), np.where(predicted, "predicted_from_arrhenius", ""),
                        np.where(predicted & out_of_range, "extrapolated", ""))
    n_w = kin.rates.assign(catalyst=kin.rates["catalyst"].astype(str))
    if "is_standard" in n_w:
        n_w = n_w[n_w["is_standard"].fillna(False).astype(bool)]
    n_w = n_w.groupby("catalyst")["n_wells"].sum()
    return pd.DataFrame({"catalyst": mi["catalyst"].astype(str).to_numpy(),
                         "estimate": p["tof_per_h"].to_numpy(float), "se": np.nan, "lo": np.nan,
                         "hi": np.nan, "df": p["df"].to_numpy(float),
                         "n": mi["catalyst"].astype(str).map(n_w).to_numpy(float),
                         "temperature_c": at_temperature_c, "flags": flags,
                         "ln_se": p["ln_tof_se"].to_numpy(float), "basis": "arrhenius", "censored": ""})


def _fit_source(m: Metric, arr: pd.DataFrame) -> pd.DataFrame:
    """Per catalyst: its Arrhenius row (Ea), the uncatalysed row left out."""
    a = arr[arr["catalyst"].astype(str) != UNCATALYSED] if len(arr) else arr
    return pd.DataFrame({"catalyst": a["catalyst"].astype(str).to_numpy() if len(a) else [],
                         "estimate": _num(a, m.estimate), "se": _num(a, m.se), "lo": np.nan, "hi": np.nan,
                         "df": _num(a, m.df), "n": _num(a, "n_temperatures"), "temperature_c": np.nan,
                         "flags": a["flags"].fillna("").astype(str).to_numpy() if len(a) else [],
                         "ln_se": np.nan, "basis": "fit", "censored": ""})


def _draw_parameters(t: pd.DataFrame, m: Metric, confidence: float, enantiomers, sign_ee: float,
                     by_magnitude: bool, source_confidence: float | None = None) -> dict:
    """Centre and scale of each candidate's draws and its interval on the estimate's scale.

    Log-normal metrics: ``mu = ln x`` and the log-scale SE (the source's, else se / x by the delta
    method, else backed out of the interval, which the rates table made at ``source_confidence``,
    the analysis's confidence); t metrics: the estimate and its SE. The interval is
    ``centre -/+ q scale`` with ``q`` the Student t quantile of :func:`screenlab.uncertainty.t_quantile`
    (a missing df: the normal quantile). ee: the favoured enantiomer, and by magnitude the folded
    interval (``absolute``), else the signed excess of the chosen enantiomer."""
    est, se, df = t["estimate"].to_numpy(float), t["se"].to_numpy(float), t["df"].to_numpy(float)
    lo_in, hi_in = t["lo"].to_numpy(float), t["hi"].to_numpy(float)
    q = t_quantile(confidence, np.where(np.isfinite(df), df, np.inf))     # df missing -> normal
    favours = np.full(len(t), "", dtype=object)
    absolute = np.zeros(len(t), bool)
    extra_flags = np.full(len(t), "", dtype=object)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):   # a bound beyond float range: inf
        if m.lognormal:
            mu = np.where(est > 0, np.log(np.where(est > 0, est, 1.0)), np.nan)
            sig = t["ln_se"].to_numpy(float)
            sig = np.where(np.isfinite(sig), sig, se / est)
            if m.ci:
                q_src = q if source_confidence is None else t_quantile(
                    source_confidence, np.where(np.isfinite(df), df, np.inf))
                sig = np.where(np.isfinite(sig), sig, np.log(hi_in / lo_in) / (2 * q_src))
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
    if m.limits is not None:                          # a percentage's interval within its range
        ci_lo, ci_hi = within_range(ci_lo, ci_hi, est, 0.0 if absolute.any() else m.limits[0], m.limits[1])
    return {"mu": mu, "sigma": sig, "estimate": est, "ci_low": ci_lo, "ci_high": ci_hi, "favours": favours,
            "absolute": absolute, "extra_flags": extra_flags}


def _missing_texts(m: Metric, t: pd.DataFrame, arr: pd.DataFrame, measured_t: pd.Series, at_temperature_c: float,
                   no_sig: np.ndarray, no_row: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(what is missing, in words; where an Arrhenius-based estimate lacks a usable fit). The
    texts are read where ``no_row`` (no source row) or the fit is missing, and made only there."""
    names_arr = t["catalyst"].to_numpy(dtype=object)
    basis = t["basis"].fillna("").to_numpy(dtype=object)
    est, n = t["estimate"].to_numpy(float), t["n"].to_numpy(float)

    def reasons_where(need, purpose):
        """:func:`_fit_reasons` for the rows ``need`` (the texts are read only there), '' elsewhere."""
        fr = np.full(len(t), "", dtype=object)
        if need.any():
            fr[need] = _fit_reasons(names_arr[need], arr, measured_t, purpose=purpose)
        return fr

    if m.source == "rates":
        lead = f"not measured at {at_temperature_c:g} degC"
        what = np.full(len(t), lead, dtype=object)
        fit_missing = np.zeros(len(t), bool)
        if m.predict:
            # an Arrhenius prediction without a usable fit: say what the fit lacks (never "no activity")
            fit_missing = (basis == "arrhenius") & (~np.isfinite(est) | no_sig)
            fr = reasons_where(no_row | fit_missing, "no Arrhenius line to predict from")
            what = np.where(fr != "", lead + "; " + fr, lead + " and no Arrhenius fit").astype(object)
    else:
        fit_missing = (basis == "fit") & (~np.isfinite(est) | no_sig | (n < 3))
        fr = reasons_where(no_row | fit_missing, "no Ea")
        what = np.where(fr != "", fr, "no Arrhenius fit (needs at least two temperatures)").astype(object)
    return what, fit_missing


def _reasons(t: pd.DataFrame, m: Metric, arr: pd.DataFrame, measured_t: pd.Series, *, at_temperature_c: float,
             low_ea_kj_mol: float, include_transport_limited: bool, lower: np.ndarray, upper: np.ndarray,
             no_row: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Why each candidate cannot be ranked ('' where it can), first applicable wins (np.select), and
    its ``order`` (0 ranked; 1 too fast; 3 transport-limited; 4 other reasons)."""
    est, n = t["estimate"].to_numpy(float), t["n"].to_numpy(float)
    mu, sig = t["mu"].to_numpy(float), t["sigma"].to_numpy(float)
    basis = t["basis"].fillna("").to_numpy(dtype=object)
    no_sig = ~(np.isfinite(sig) & (sig > 0) & np.isfinite(mu))
    what, fit_missing = _missing_texts(m, t, arr, measured_t, at_temperature_c, no_sig, no_row)
    all_failed = t["all_failed"].fillna(False).to_numpy(bool)
    few = (n < 2) & (basis == "measured")
    few_txt = "too few wells (fewer than 2 at this condition)"
    inactive = ~(est > 0) if m.lognormal else ~np.isfinite(est)
    inactive_txt = "no activity over the blank" if m.name in ("tof", "ton") else "no estimate"
    lb = np.isinf(t["hi"].to_numpy(float)) & ~lower & ~upper if m.ci else np.zeros(len(t), bool)
    flags_in = t["flags"].fillna("").astype(str)
    low_ea = flags_in.str.split(";").map(lambda c: "low_ea" in c).to_numpy(bool) if m.name == "ea" \
        else np.zeros(len(t), bool)
    transport_txt = (f"apparent Ea below {low_ea_kj_mol:g} kJ/mol: likely transport-controlled (diffusion), so "
                     "the low barrier is not the catalyst's; --include-transport-limited ranks it")
    transport = low_ea & (not include_transport_limited)
    conds = [no_row, all_failed, lower, upper, fit_missing, few, inactive, lb, no_sig, transport]
    texts = [what, "measured only on failed plates", TOO_FAST, NOT_SHOWN_ACTIVE, what, few_txt,
             inactive_txt, "only a lower bound (blank below its detection limit)", "no uncertainty estimate",
             transport_txt]
    reason = np.select(conds, texts, default="").astype(object)
    order = np.where(reason == "", 0, np.where(lower & (reason == TOO_FAST), 1,
                                               np.where(transport & (reason == transport_txt), 3, 4)))
    return reason, order


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
    m = get_metric(metric)
    sign_ee, by_magnitude = _enantiomer_sign(m, enantiomers, enantiomer)
    settings = getattr(kin, "settings", None)
    if at_temperature_c is None:
        at_temperature_c = ranking_temperature(kin, None)
    arr = kin.arrhenius if kin.arrhenius is not None else pd.DataFrame()
    base = _base_table(kin, arr, catalysts)
    measured_t = _standard_temperatures(kin)
    src = (_rates_source(kin, m, arr, base, at_temperature_c, confidence) if m.source == "rates"
           else _fit_source(m, arr))
    t = base.merge(src, on="catalyst", how="left")
    used = src.set_index("catalyst")["plates"] if "plates" in src else None
    t = t.merge(_plate_info(kin, quality, used), on="catalyst", how="left")
    cens = t["censored"].fillna("").astype(str).to_numpy(dtype=object)

    d = _draw_parameters(t, m, confidence, enantiomers, sign_ee, by_magnitude,
                         source_confidence=getattr(settings, "confidence", None))
    est, sig = d["estimate"], d["sigma"]
    t["mu"], t["sigma"], t["absolute"] = d["mu"], sig, d["absolute"]
    t["estimate"] = est
    t["ci_low"] = np.where(np.isfinite(sig), d["ci_low"], np.nan)
    t["ci_high"] = np.where(np.isfinite(sig), d["ci_high"], np.nan)
    if m.ci:
        # an interval open above (a lower bound: the blank below its detection limit) keeps its
        # lower limit as the rates table gives it
        lo_in, hi_in = t["lo"].to_numpy(float), t["hi"].to_numpy(float)
        open_above = np.isposinf(hi_in) & np.isfinite(lo_in)
        t.loc[open_above, "ci_low"] = lo_in[open_above]
        t.loc[open_above, "ci_high"] = np.inf
    # a bound: the open side has no value, the bound is the estimate
    lower, upper = cens == "lower", cens == "upper"
    t.loc[lower, "ci_low"] = est[lower]
    t.loc[lower, "ci_high"] = np.nan
    t.loc[upper, "ci_high"] = est[upper]
    t.loc[upper, "ci_low"] = np.nan
    t["favours"] = d["favours"]

    no_row = ~np.isfinite(est) & t["basis"].isna().to_numpy()
    t["reason"], t["order"] = _reasons(t, m, arr, measured_t, at_temperature_c=at_temperature_c,
                                       low_ea_kj_mol=float(getattr(settings, "low_ea_kj_mol", 20.0)),
                                       include_transport_limited=include_transport_limited, lower=lower,
                                       upper=upper, no_row=no_row)
    t["flags"] = merge_codes(t["flags"].fillna("").astype(str), t["plate_flags"].fillna("").astype(str),
                             np.where(t["any_failed"].fillna(False).to_numpy(bool), "on_failed_plate", ""),
                             np.where(t["any_unchecked"].fillna(False).to_numpy(bool), "on_unchecked_plate", ""),
                             np.where(t["role"].to_numpy() == "reference", "reference", ""), d["extra_flags"])
    t["basis"] = t["basis"].fillna("").to_numpy(dtype=object)
    t["censored"] = cens
    return t[["catalyst", "role", "family", "estimate", "ci_low", "ci_high", "censored", "favours", "mu", "sigma",
              "df", "absolute", "n", "temperature_c", "basis", "flags", "reason", "order"]]


def requirements(require, rates: pd.DataFrame):
    """Requirement objects from strings (or Requirement objects), checked against the rates table."""
    from screenlab.stats.constraints import Requirement, parse_requirements

    items = list(require or ())
    texts = [x for x in items if not isinstance(x, Requirement)]
    return [x for x in items if isinstance(x, Requirement)] + parse_requirements(texts, rates)


def apply_requirements(t: pd.DataFrame, kin, reqs, at_temperature_c: float, confidence: float) -> pd.DataFrame:
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
    t["flags"] = merge_codes(t["flags"], np.where(unsure, "constraint_uncertain", ""))
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


__all__ = ["DIRECTION", "FLAGS", "METRICS", "NOT_SHOWN_ACTIVE", "TOO_FAST", "Metric", "apply_requirements",
           "candidate_table", "get_metric", "merge_codes", "ranking_temperature", "requirements"]
