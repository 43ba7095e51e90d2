"""Ranking: estimate and interval per candidate, rank intervals, P(top K), and the Pareto view."""
from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common
from screenlab.viz import figures

#: a chart row per candidate: beyond a few dozen the charts are unreadable and slow in the browser
CHART_ROWS_MIN, CHART_ROWS_DEFAULT = 10, 40

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
        format_func=lambda t: f"reference {ctx.settings.reference_temperature_c:g} (from the Arrhenius fit)"
        if t is None else f"{t:g} (measured)")
else:
    c2.caption("This metric does not depend on a temperature.")
n_cands = int(a.kinetics.rates["catalyst"].nunique())
k = int(c3.number_input("K (top)", min_value=1, max_value=max(1, n_cands), value=min(3, max(1, n_cands)), step=1,
                        key="rank_k"))

view = st.radio("Show", ["Ranking", "Pareto view"], horizontal=True, key="rank_view",
                help="Ranking: one metric with its uncertainty. Pareto view: two or three metrics at once, "
                     "which candidates no other beats on all of them.")
if view == "Pareto view":
    st.subheader("Pareto view")
    _common.pareto_section(ctx, a, temperature)
    st.stop()

r = cache.ranking(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, metric, temperature, k)
ranked = r[r["rank"].notna()]
label = metrics[metric]["axis"]
st.caption(f"Intervals at {ctx.settings.confidence * 100:g} %; the benchmark in orange. Rank interval and P(top {k}) from the estimates' "
           "uncertainty; 1 = best. " + metrics[metric].get("help", ""))
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
        st.caption(f"Charts: the best {n_show} of {n_ranked} ranked candidates, and the benchmark.")
    left, right = st.columns([3, 2])
    with left:
        widgets.chart(figures.forest_plot(shown, label=label, log_x=metrics[metric]["log"],
                                          title=f"{metrics[metric]['label']}",
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
widgets.table(r.rename(columns={"estimate": col, "ci_low": lo, "ci_high": hi}), key="rank_table",
              columns=["rank", "catalyst", "family", "role", col, lo, hi, "rank_low", "rank_high", "p_top", "p_best",
                       "p_beats_reference", "n", "temperature_c", "basis", "reason", "flags"])
st.session_state["rank_last"] = {"metric": metric, "temperature": temperature, "k": k}
widgets.flag_glossary(r["flags"])
_common.history_links(r["catalyst"].astype(str).tolist(), key="rank_history")
