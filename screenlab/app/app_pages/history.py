"""Catalyst history: one catalyst's results in every campaign (round) it was screened in, side by side."""
from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common
from screenlab.stats.history import display_table
from screenlab.viz import figures

ctx = widgets.context()
st.title("Catalyst history")
cats = cache.all_catalysts(ctx.path, ctx.read_only, ctx.version)
if cats.empty:
    st.info("No catalyst in this store yet.")
    st.stop()
ids = sorted(set(cats["catalyst"].astype(str)))
names = cats.drop_duplicates("catalyst").set_index(cats.drop_duplicates("catalyst")["catalyst"].astype(str))["name"]

wanted = st.query_params.get("catalyst")          # a link names the catalyst: ?catalyst=ID
if wanted is not None and wanted != st.session_state.get("_hist_param"):
    st.session_state["_hist_param"] = wanted
    if wanted in ids:
        st.session_state["hist_catalyst"] = wanted
    else:
        st.warning(f"No stored campaign holds a catalyst with the id {wanted!r} (ids are matched exactly).")
if st.session_state.get("hist_catalyst") not in ids:
    here = cats.loc[cats["campaign"] == ctx.campaign, "catalyst"].astype(str).tolist()
    st.session_state["hist_catalyst"] = here[0] if here else ids[0]

c1, c2 = st.columns([4, 1])
catalyst = c1.selectbox("Catalyst", ids, key="hist_catalyst",
                        format_func=lambda c: f"{c} · {names.get(c)}" if isinstance(names.get(c), str)
                        and names.get(c) != c else c)
k = int(c2.number_input("K (top)", min_value=1, max_value=50, value=3, step=1, key="hist_k",
                        help="P(top K) in each campaign's ranking (TOF at its reference temperature)."))
hist = cache.history(ctx.path, ctx.read_only, ctx.version, cache.decisions_token(ctx.path, ctx.read_only),
                     catalyst, k)
n = len(hist)
renamed = hist[hist["catalyst"].astype(str) != catalyst]
st.caption(f"{catalyst} is in {n} stored campaign{'s' if n != 1 else ''}, first import first. Ids are matched "
           "exactly" + (": under another id (catalysts.csv column alias) in " + ", ".join(
               f"{c} ({i})" for c, i in zip(renamed["campaign"], renamed["catalyst"])) if len(renamed) else "")
           + ". TOF at each campaign's own reference temperature; the ratio to that campaign's benchmark is the "
           "scale that compares across rounds and plate readers.")

measured = hist[np.isfinite(pd.to_numeric(hist["vs_benchmark"], errors="coerce").to_numpy(float))
                & (hist["vs_benchmark_censored"].astype(str) == "")
                & ~((hist["role"] == "reference") & (hist["catalyst"] == hist["benchmark"]))]
left, right = st.columns(2)
with left:
    st.subheader("Relative to the benchmark")
    if measured.empty:
        st.info("No campaign gives a ratio to its benchmark with an interval.")
    else:
        fr = pd.DataFrame({"rank": np.arange(1, len(measured) + 1), "catalyst": measured["campaign"].astype(str),
                           "estimate": measured["vs_benchmark"], "ci_low": measured["vs_benchmark_ci_low"],
                           "ci_high": measured["vs_benchmark_ci_high"]})
        fig = figures.forest_plot(fr, label="TOF / TOF(benchmark)", log_x=True)
        fig.update_yaxes(title="campaign (first import at top)")
        # ratio 1: as active as the benchmark (a trace, not a shape: shapes on a log axis take log units)
        ends = [fr["catalyst"].iloc[0], fr["catalyst"].iloc[-1]]
        fig.add_scatter(x=[1.0, 1.0], y=ends, mode="lines", name="as active as the benchmark", hoverinfo="skip",
                        line=dict(color="#e69f00", dash="dot", width=2))
        widgets.chart(fig, key="hist_ratio", filename=f"history-{catalyst}-ratio")
with right:
    st.subheader("TOF at the reference temperature")
    tof = hist[np.isfinite(pd.to_numeric(hist["tof_per_h"], errors="coerce").to_numpy(float))
               & (hist["tof_censored"].astype(str) == "")]
    if tof.empty:
        st.info("No campaign has a TOF with an interval for this catalyst.")
    else:
        fr = pd.DataFrame({"rank": np.arange(1, len(tof) + 1),
                           "catalyst": [f"{c} ({t:g} °C)" for c, t in zip(tof["campaign"], tof["reference_temperature_c"])],
                           "estimate": tof["tof_per_h"], "ci_low": tof["tof_ci_low"], "ci_high": tof["tof_ci_high"]})
        fig = figures.forest_plot(fr, label="TOF / h⁻¹", log_x=True)
        fig.update_yaxes(title="campaign (reference temperature)")
        widgets.chart(fig, key="hist_tof", filename=f"history-{catalyst}-tof")
st.caption("Bounds (a rate only known to exceed, or not to exceed, a limit) are not drawn; the table writes them "
           "as ≥ / ≤. Intervals at each campaign's confidence level.")

st.subheader("Side by side")
widgets.table(display_table(hist), key="hist_table")
with st.expander("All columns (numbers)"):
    widgets.table(hist, key="hist_numbers")

st.subheader("Open a round")
cols = st.columns(min(max(n, 1), 4))
for i, name in enumerate(hist["campaign"].astype(str)):  # one button per campaign
    with cols[i % len(cols)]:
        _common.campaign_button(name, key=f"hist_open_{i}", label=name, icon=":material/dashboard:")
widgets.flag_glossary(hist["flags"])
