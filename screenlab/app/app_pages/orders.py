"""Reaction orders: the apparent orders in substrate and in catalyst from loading and substrate
series at one temperature, each series on log-log axes."""
from __future__ import annotations

import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common
from screenlab.units import shown_unit
from screenlab.viz import figures

ctx = widgets.context()
st.title("Reaction orders")
if not widgets.need_campaign(ctx):
    st.stop()

a = ctx.analysis()
orders = a.kinetics.orders
conf = a.settings.confidence
if orders.empty:
    st.info("No catalyst was run at several substrate concentrations or several loadings at one temperature "
            "with everything else held fixed, so there are no apparent orders. A substrate series (three or more "
            "concentrations, in replicate) gives the order in substrate; a loading series the order in catalyst.")
    st.stop()

VARIABLE = {"substrate_conc": "substrate", "loading": "catalyst loading"}
view = orders.reset_index(drop=True).assign(
    varied=orders["variable"].map(VARIABLE).fillna(orders["variable"]).to_numpy(),
    levels=[f"{lo:g} – {hi:g}" for lo, hi in zip(orders["level_min"], orders["level_max"])])
st.caption(f"{len(view)} series. Order = slope of ln(net rate) on ln(level), each well one point (blank-corrected "
           f"initial rates); {conf * 100:g} % intervals from the scatter about the line (t, df = wells − 2; none "
           "from two wells). Apparent orders hold at the conditions listed as fixed: another temperature, "
           "loading or substrate level can give another order.")
sel = widgets.table(view, key="orders_table", on_select="rerun", selection_mode="single-row",
                    columns=["catalyst", "temperature_c", "varied", "order", "order_ci_low", "order_ci_high",
                             "n_levels", "n_wells", "levels", "fixed", "tof_slope", "tof_slope_ci_low",
                             "tof_slope_ci_high", "flags"])
widgets.flag_glossary(view["flags"])
_common.history_links(list(dict.fromkeys(view["catalyst"].astype(str))), key="orders_history")

rows = widgets.selected_rows(sel, len(view))
i = rows[0] if rows else 0
row = view.iloc[i]
pts = cache.order_points(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key)
pts = pts[pts["series"] == i]
unit = str(pts["level_unit"].iloc[0]) if len(pts) else ""
shown = shown_unit(unit)
st.subheader(f"{row['catalyst']} at {row['temperature_c']:g} °C: order in {row['varied']}")
ci = (f" ({widgets.fmt(row['order_ci_low'])} to {widgets.fmt(row['order_ci_high'])})"
      if pd.notna(row["order_ci_low"]) else " (no interval: two wells)")
st.markdown(f"Apparent order **{widgets.fmt(row['order'])}**{ci} over {row['levels']} {shown}, "
            f"{int(row['n_wells'])} wells at {int(row['n_levels'])} levels"
            + (f"; fixed: {row['fixed']}" if str(row["fixed"]) else "")
            + ("" if rows else " (select a row above to change)") + ".")
widgets.chart(figures.order_plot(pts, float(row["order"]), variable=str(row["variable"]), unit=unit),
              key="orders_plot", filename=f"{row['catalyst']}-order-{row['variable']}")
left_out = int((~pts["in_fit"].astype(bool)).sum())
notes = ["Dotted lines: order 0 and order 1 through the centre of the points, to read the slope against."]
if left_out:
    notes.append(f"{left_out} well{'s' if left_out != 1 else ''} without a net rate or a level above zero (at or "
                 "below the blank, or no blank to subtract) cannot be drawn on log axes and "
                 f"{'were' if left_out != 1 else 'was'} left out of the fit (in fit: no, below).")
if row["variable"] == "loading":
    notes.append("In a loading series an order near 1 means every site works at the same rate. The TOF slope "
                 "(ln TOF on ln loading) should be near 0; when its whole interval lies below 0 the TOF falls as the "
                 "loading rises (flag tof_falls_with_loading): mass transfer limits the faster wells, or the sites "
                 "are not all equally active (the Madon–Boudart test). Check stirring or shaking before reading "
                 "that as chemistry.")
st.caption(" ".join(notes))
widgets.table(pts.reset_index(drop=True), key="orders_points",
              columns=["plate", "well", "level", "level_unit", "net_rate_mM_per_h", "tof_per_h", "in_fit"])
