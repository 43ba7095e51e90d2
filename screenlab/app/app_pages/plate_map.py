"""Plate map: one plate as a grid of a chosen quantity; a well's time course and fitted rate."""
from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.kinetics import ratelaws
from screenlab.viz import figures

QUANTITIES = {
    "rate_mM_per_h": "initial rate / mM h⁻¹",
    "tof_per_h": "TOF / h⁻¹",
    "enhancement": "rate enhancement over blank",
    "last_conversion_pct": "final conversion / %",
    "bscore": "B-score (robust SD units)",
    "residual": "median-polish residual of the rate / mM h⁻¹",
}
METHOD_TEXT = {
    **{law: f"{text}; the rate is its slope at t = 0 (the law is chosen per catalyst by AICc)"
       for law, text in ratelaws.DESCRIPTION.items()},
    "first_reading": "done before its first reading: the rate is only known to exceed the chord to it",
    "end_point": "single end point: product / time (an average rate, no standard error)",
    "no_data": "no usable reading after t = 0",
}

ctx = widgets.context()
st.title("Plate map")
if not widgets.need_campaign(ctx):
    st.stop()

a = ctx.analysis()
data, kin = a.data, a.kinetics
plates = data.plates.reset_index(drop=True)
labels = {str(r.plate): f"{r.plate} · {r.temperature_c:g} °C · {int(r.format)} wells" for r in plates.itertuples()}
c1, c2, c3 = st.columns([2, 2, 1])
plate = c1.selectbox("Plate", list(labels), format_func=labels.get, key="platemap_plate")
qty = c2.selectbox("Colour by", list(QUANTITIES), format_func=QUANTITIES.get, key="platemap_quantity")
log_scale = c3.toggle("log₁₀ colour", value=False, key="platemap_log",
                      help="Colour by log10 of the value (positive values only); useful for TOF and enhancement, "
                           "which span decades.", disabled=qty in ("bscore", "residual"))

info = plates[plates["plate"].astype(str) == plate].iloc[0]
n_rows, n_cols = int(info["n_rows"]), int(info["n_cols"])
wells = kin.wells[kin.wells["plate"].astype(str) == plate]
if qty in ("bscore", "residual"):
    bw = cache.well_bscores(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, "rate")
    wells = wells.merge(bw[["plate", "well", "bscore", "residual"]], on=["plate", "well"], how="left")
# empty positions are not in kin.wells; show them from the layout so the plate is complete
layout = data.wells[data.wells["plate"].astype(str) == plate][["plate", "well", "row", "col", "role", "catalyst"]]
grid = layout.merge(wells.drop(columns=["row", "col", "role", "catalyst"], errors="ignore"), on=["plate", "well"],
                    how="left")
label = QUANTITIES[qty]
if log_scale and qty not in ("bscore", "residual"):
    v = pd.to_numeric(grid[qty], errors="coerce")
    grid = grid.assign(**{qty: np.log10(v.where(v > 0))})
    label = f"log₁₀({label.split(' / ')[0]}" + (f" / {label.split(' / ')[1]})" if " / " in label else ")")

sample_wells = grid.loc[grid["role"].astype(str) != "empty", "well"].astype(str).tolist()
well_key = f"platemap_well_{plate}"
event_key = f"platemap_chart_{plate}"
ev = st.session_state.get(event_key)
picked = None
try:
    pts = ev["selection"]["points"] if ev else []
    picked = next((p.get("customdata") for p in pts if p.get("customdata")), None)
except (KeyError, TypeError, AttributeError):
    picked = None
if picked in sample_wells and st.session_state.get(f"{well_key}_last_click") != picked:
    st.session_state[well_key] = picked
    st.session_state[f"{well_key}_last_click"] = picked
if st.session_state.get(well_key) not in sample_wells and sample_wells:
    st.session_state[well_key] = sample_wells[0]
selected = st.session_state.get(well_key)

fig = figures.plate_heatmap(grid, qty, n_rows=n_rows, n_cols=n_cols, label=label, selected=selected,
                            signed=qty in ("bscore", "residual"))
widgets.chart(fig, key=event_key, filename=f"{plate}-{qty}", on_select="rerun")
st.caption("Markers: ○ sample · ■ blank (no catalyst) · ★ benchmark · × empty. Click a marker or pick a well below.")

if not sample_wells:
    st.info("This plate has no filled wells.")
    st.stop()
well = st.selectbox("Well", sample_wells, key=well_key)
row = grid[grid["well"].astype(str) == well].iloc[0]
left, right = st.columns([3, 2])
with right:
    st.markdown(f"**{well}** · {row['role']} · {row['catalyst'] if pd.notna(row['catalyst']) else 'no catalyst'}")
    method = str(row.get("method", "no_data"))
    st.markdown(f"**Method:** `{method}`: {METHOD_TEXT.get(method, method)}")
    m = st.columns(2)
    bound = {"lower": "≥ ", "upper": "≤ "}.get(str(row.get("censored", "") or ""), "")
    m[0].metric("Initial rate / mM h⁻¹", bound + widgets.fmt(row.get("rate_mM_per_h")),
                help="± standard error: " + widgets.fmt(row.get("rate_se_mM_per_h"), 2))
    m[1].metric("TOF / h⁻¹", widgets.fmt(row.get("tof_per_h")), help="± " + widgets.fmt(row.get("tof_se_per_h"), 2))
    m = st.columns(2)
    m[0].metric("Enhancement over blank", widgets.fmt(row.get("enhancement")),
                help=f"interval {widgets.fmt(row.get('enhancement_ci_low'))} – {widgets.fmt(row.get('enhancement_ci_high'))}")
    m[1].metric("Final conversion / %", widgets.fmt(row.get("last_conversion_pct")))
    st.markdown(f"TON at the last reading: {widgets.fmt(row.get('ton'))} · readings used: "
                f"{int(row['window_points']) if pd.notna(row.get('window_points')) else 0}"
                f" · blank rate {widgets.fmt(row.get('blank_rate_mM_per_h'))} mM h⁻¹")
    if isinstance(row.get("flags"), str) and row["flags"]:
        helptext = cache.flag_help()
        st.markdown("**Flags:**\n" + "\n".join(f"- `{c}`: {helptext.get(c, '')}" for c in row["flags"].split(";") if c))
with left:
    am = kin.amounts
    course = am[(am["plate"].astype(str) == plate) & (am["well"].astype(str) == well)]
    if "analyte" in course:
        course = course[course["analyte"].astype(str) == data.manifest.analyte_main]
    course = course.sort_values("time_h").reset_index(drop=True)
    if course.empty:
        st.info("No readings for this well.")
    else:
        usable = (course["range_code"].to_numpy() != 2) if "range_code" in course else np.ones(len(course), bool)
        if method == ratelaws.GENERIC and pd.notna(row.get("window_points")):
            in_fit = usable & (np.cumsum(usable) <= int(row["window_points"]))
        elif method in ratelaws.N_PARAMS or method == "end_point":
            in_fit = usable
        elif method == "first_reading":
            in_fit = course["time_h"].to_numpy() <= float(row.get("first_time_h", 0.0))
        else:
            in_fit = np.zeros(len(course), bool)
        course = course.assign(in_fit=in_fit)
        t_end = float(course["time_h"].max())
        params = row.copy()
        if method == ratelaws.GENERIC and in_fit.any():
            params["window_end_h"] = float(course.loc[in_fit, "time_h"].max())
        fit, fit_label = figures.fitted_course(params, t_end_h=t_end)
        widgets.chart(figures.time_course(course, fit=fit, fit_label=fit_label, title=f"{plate} {well}"),
                      key="platemap_course", filename=f"{plate}-{well}-course")
