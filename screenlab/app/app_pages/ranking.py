"""Ranking: estimate and interval per candidate, rank intervals, P(top K), and the Pareto view."""
from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common
from screenlab.errors import UsageError
from screenlab.export.display import show_bounds
from screenlab.viz import figures

#: a chart row per candidate: beyond a few dozen the charts are unreadable and slow in the browser
CHART_ROWS_MIN, CHART_ROWS_DEFAULT = 10, 40
EITHER = "either enantiomer (|ee|)"

ctx = widgets.context()
st.title("Ranking")
if not widgets.need_campaign(ctx):
    st.stop()

a = ctx.analysis()
metrics = _common.metric_choices()
temps = sorted(pd.to_numeric(a.kinetics.rates["temperature_c"], errors="coerce").dropna().unique())
c1, c2, c3 = st.columns([3, 2, 1])
metric = c1.selectbox("Rank by", list(metrics), format_func=lambda m: metrics[m]["label"], key="rank_metric")
needs_t = metrics[metric]["per_temperature"]
temperature = None
if needs_t:
    t_opts = [None, *temps]
    temperature = c2.selectbox(
        "Temperature / °C", t_opts, key="rank_temperature",
        format_func=lambda t: (f"reference {ctx.settings.reference_temperature_c:g}"
                               + (" (the Arrhenius fit where not measured)" if metrics[metric]["predict"] else ""))
        if t is None else f"{t:g} (measured)")
else:
    c2.caption("This metric does not depend on a temperature.")
n_cands = int(a.kinetics.rates["catalyst"].nunique())
k = int(c3.number_input("K (top)", min_value=1, max_value=max(1, n_cands), value=min(3, max(1, n_cands)), step=1,
                        key="rank_k"))

enantiomer = None
transport = False
if metric == "ee":
    pair = [str(e) for e in (a.data.manifest.enantiomers or ())]
    if pair:
        pick = st.radio("Excess of", [EITHER, *pair], horizontal=True, key="rank_enantiomer",
                        help="Either enantiomer: ranked by |ee|, the favoured enantiomer named in the table. "
                             "A named enantiomer: ranked by its excess (the other one in excess counts negative).")
        enantiomer = None if pick == EITHER else pick
    else:
        st.caption("This campaign names no enantiomers in its [analytes] table.")
if metric == "ea":
    transport = st.toggle(
        "Rank likely transport-limited candidates too", value=False, key="rank_transport",
        help=f"An apparent Ea below {ctx.settings.low_ea_kj_mol:g} kJ mol⁻¹ (flag low_ea) usually means the "
             "reaction runs into mass transport: diffusion has an apparent Ea of only about 10-20 kJ mol⁻¹, so a "
             "catalyst fast enough to be transport-limited shows a low Ea whatever its own barrier. Such a low "
             "apparent Ea is not a better catalyst; by default these candidates are listed after the others.")

with st.expander("Requirements (filter)", expanded=bool(st.session_state.get("rank_require"))):
    from screenlab.stats.constraints import requirement_columns

    req_text = st.text_input(
        "Keep candidates with", key="rank_require", placeholder="e.g. selectivity_pct>=90; ee_pct>=80",
        help="column>=value or column<=value on the rates table, several separated by ';'. Judged on each "
             "candidate's interval: clearly outside -> listed after the ranked ones with the reason; "
             "straddling the threshold -> kept and flagged constraint_uncertain.")
    usable = [c for c in requirement_columns(a.kinetics.rates)
              if pd.to_numeric(a.kinetics.rates[c], errors="coerce").notna().any()]
    st.caption("Columns with values in this campaign: " + ", ".join(f"`{c}`" for c in usable))
require = tuple(x.strip() for x in (req_text or "").replace(",", ";").split(";") if x.strip())

view = st.radio("Show", ["Ranking", "Pareto view"], horizontal=True, key="rank_view",
                help="Ranking: one metric with its uncertainty. Pareto view: two or three metrics at once, "
                     "which candidates no other beats on all of them.")
if view == "Pareto view":
    st.subheader("Pareto view")
    try:
        _common.pareto_section(ctx, a, temperature, require=require)
    except UsageError as exc:
        st.error(str(exc))
    st.stop()

try:
    r = cache.ranking(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, metric, temperature, k,
                      enantiomer, transport, require)
except UsageError as exc:
    st.error(str(exc))
    st.stop()
ranked = r[r["rank"].notna()]
label = metrics[metric]["axis"]
if metric == "ee" and enantiomer:
    label = f"excess of {enantiomer} / %"
direction = r.attrs.get("direction", "")
has_ref = bool((ranked["role"].astype(str) == "reference").any())
st.caption(f"Order: **{direction}**. Intervals at {ctx.settings.confidence * 100:g} %"
           + ("; the benchmark in orange" if has_ref else "") + f". Rank interval and P(top {k}) from the estimates' "
           "uncertainty; 1 = best. "
           + (f"The benchmark is ranked with the candidates and takes one of the {k} places of P(top {k}); the "
              "shortlist leaves it out, so its last pick can be a candidate just below the benchmark with a low "
              f"P(top {k}). " if has_ref else "")
           + metrics[metric].get("help", ""))
if require:
    n_out = int((r["reason"].astype(str).str.contains("--require", regex=False)).sum())
    st.caption(f"Required: {', '.join(r.attrs.get('requirements', require))}: {n_out} candidate(s) clearly outside, "
               "listed after the ranked ones; probabilities are over the candidates that remain.")
mc = r.attrs.get("monte_carlo") or {}
if mc.get("draws"):
    st.caption(f"From {mc['draws']:,} draws ({mc['draws_ranked']:,} ranking every candidate); largest Monte Carlo "
               f"standard error of a probability {mc['mc_se']:.4f}; rank bounds stable for "
               f"{100 * mc.get('rank_bound_stable_share', 1.0):.1f} % of the candidates.")
bounds = r[(r["censored"].astype(str) != "") & r["rank"].isna()]
if len(bounds):
    fast = bounds[bounds["censored"] == "lower"]
    if len(fast):
        st.warning(f"{len(fast)} candidate(s) only known to be faster than the first reading allows "
                   f"({', '.join(fast['catalyst'].astype(str).head(8))}{' ...' if len(fast) > 8 else ''}): shown as "
                   "bounds (≥), not ranked; rerun them at lower loading or temperature.", icon=":material/speed:")
if ranked.empty:
    st.info("No candidate can be ranked on this metric.")
else:
    n_ranked = len(ranked)
    n_show = n_ranked
    if n_ranked > CHART_ROWS_MIN:
        n_show = int(st.number_input(
            "Candidates in the charts", min_value=CHART_ROWS_MIN, max_value=n_ranked,
            value=min(CHART_ROWS_DEFAULT, n_ranked), step=10, key="rank_chart_rows",
            help=f"The best N of {n_ranked} ranked candidates (the benchmark always); the table below has all."))
    by_rank = ranked.sort_values("rank", kind="stable")
    shown = by_rank[(np.arange(n_ranked) < n_show) | (by_rank["role"].astype(str) == "reference").to_numpy()]
    if n_show < n_ranked:
        st.caption(f"Charts: the best {n_show} of {n_ranked} ranked candidates" + (", and the benchmark." if has_ref
                                                                                   else "."))
    left, right = st.columns([3, 2])
    with left:
        fast_rows = bounds[bounds["censored"] == "lower"].head(10)
        widgets.chart(figures.forest_plot(pd.concat([shown, fast_rows]) if len(fast_rows) else shown, label=label,
                                          log_x=metrics[metric]["log"], title=f"{metrics[metric]['label']}",
                                          highlight=shown.loc[shown["role"].astype(str) == "reference",
                                                              "catalyst"].astype(str).tolist()),
                      key="rank_forest", filename=f"forest-{metric}")
    with right:
        tab1, tab2 = st.tabs(["Rank intervals", f"P(top {k})"])
        with tab1:
            widgets.chart(figures.rank_intervals(shown), key="rank_intervals", filename=f"rank-intervals-{metric}")
        with tab2:
            widgets.chart(figures.p_top_bars(shown, k=k), key="rank_ptop", filename=f"p-top-{metric}")
st.subheader("Table")
col = metrics[metric]["column"]
lo, hi = (col.replace(metric, f"{metric}_ci_{side}", 1) for side in ("low", "high"))
unit = _common.unit_text(str(r["unit"].iloc[0])) if len(r) else ""
table = show_bounds(r, "estimate", "ci_low", "ci_high", unit=unit, text="shown")
cols = ["rank", "catalyst", "family", "role", "shown", col, lo, hi, "censored", "favours", "rank_low", "rank_high",
        "p_top", "p_best", "p_beats_reference", "n", "temperature_c", "basis", "reason", "flags"]
if metric != "ee":
    cols.remove("favours")
if not (table["censored"].astype(str) != "").any():
    cols.remove("censored")
widgets.table(table.rename(columns={"estimate": col, "ci_low": lo, "ci_high": hi}), key="rank_table", columns=cols)
st.session_state["rank_last"] = {"metric": metric, "temperature": temperature, "k": k, "enantiomer": enantiomer,
                                 "transport": transport, "require": require}
widgets.flag_glossary(r["flags"])
_common.history_links(r["catalyst"].astype(str).tolist(), key="rank_history")
