"""Rates: the catalyst x temperature table with filters, and replicate time courses overlaid."""
from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from screenlab.app import widgets
from screenlab.app.app_pages import _common
from screenlab.export.display import censored_values, show_bounds
from screenlab.viz import figures

ctx = widgets.context()
st.title("Rates")
if not widgets.need_campaign(ctx):
    st.stop()

a = ctx.analysis()
data, kin = a.data, a.kinetics
rates = kin.rates.merge(data.catalysts[["catalyst", "family"]].astype({"catalyst": str}),
                        how="left", on="catalyst") if "family" in data.catalysts else kin.rates.assign(family=pd.NA)
factors = [f for f in data.factor_names if f in rates]

with st.container(border=True):
    cols = st.columns(4)
    fams = sorted(rates["family"].dropna().astype(str).unique())
    fam_pick = cols[0].multiselect("Family", fams, key="rates_family", placeholder="all families")
    temps = sorted(rates["temperature_c"].dropna().unique())
    t_pick = cols[1].multiselect("Temperature / °C", temps, key="rates_temps", format_func=lambda t: f"{t:g}",
                                 placeholder="all temperatures")
    cats = sorted(rates["catalyst"].dropna().astype(str).unique())
    c_pick = cols[2].multiselect("Catalyst", cats, key="rates_catalysts", placeholder="all catalysts")
    std_only = cols[3].toggle("Standard condition only", value=False, key="rates_standard",
                              help="Each catalyst's most-used loading, substrate concentration and factor levels "
                                   "(what the Arrhenius fit and the ranking use). Off: loading and "
                                   "concentration series too.")
    f_pick = {}
    if factors:
        fcols = st.columns(min(len(factors), 4))
        for i, f in enumerate(factors):
            levels = sorted(rates[f].dropna().astype(str).unique())
            f_pick[f] = fcols[i % len(fcols)].multiselect(f, levels, key=f"rates_factor_{f}", placeholder=f"all {f}")

mask = pd.Series(True, index=rates.index)
if fam_pick:
    mask &= rates["family"].astype(str).isin(fam_pick)
if t_pick:
    mask &= rates["temperature_c"].isin(t_pick)
if c_pick:
    mask &= rates["catalyst"].astype(str).isin(c_pick)
if std_only:
    mask &= rates["is_standard"].fillna(False).astype(bool)
for f, levels in f_pick.items():
    if levels:
        mask &= rates[f].astype(str).isin(levels)
view = rates[mask]

st.caption(f"{len(view)} of {len(rates)} catalyst x temperature x condition rows. TOF in h⁻¹ "
           f"(initial TOF from blank-corrected initial rates); intervals at {ctx.settings.confidence * 100:g} %.")
# a rate the readings cannot resolve is a bound: '>= x' (finished before the first reading) or
# '<= x' (not above the blank), its interval left empty
from screenlab.stats.candidates import NOT_SHOWN_ACTIVE, TOO_FAST  # noqa: E402

cens = censored_values(view)
shown_view = show_bounds(view, "tof_per_h", "tof_ci_low", "tof_ci_high", unit="h⁻¹", text="TOF")
shown_view = show_bounds(shown_view, "enhancement", "enhancement_ci_low", "enhancement_ci_high", text="enhancement_shown")
has_bounds = bool((cens != "").any())
if has_bounds:
    shown_view["censored"] = cens
    shown_view["bound_reason"] = pd.Series(cens).map({"lower": TOO_FAST, "upper": NOT_SHOWN_ACTIVE}).fillna("").to_numpy()
    n_low, n_up = int((cens == "lower").sum()), int((cens == "upper").sum())
    parts = []  # only the kinds of bound the table holds
    if n_low:
        parts.append(f"{n_low} row{'s' if n_low != 1 else ''} faster than the first reading allows (≥, rerun at "
                     "lower loading or temperature)")
    if n_up:
        parts.append(f"{n_up} row{'s' if n_up != 1 else ''} not distinguishable from the blank (≤)")
    st.caption(f"Bounds: {', '.join(parts)}; their intervals are left empty.")
show = ["catalyst", "family", "role", "temperature_c", "TOF", *(["censored", "bound_reason"] if has_bounds else []),
        "loading", "loading_unit", "substrate_conc_mM", *factors,
        "n_wells", "rate_mM_per_h", "rate_sd_mM_per_h", "tof_per_h", "tof_ci_low", "tof_ci_high", "ton",
        "enhancement", "enhancement_ci_low", "enhancement_ci_high", "is_standard", "plates", "flags"]
sel = widgets.table(shown_view.reset_index(drop=True), key="rates_table", columns=show, on_select="rerun",
                    selection_mode="single-row", height=420)
widgets.flag_glossary(view["flags"])
_common.history_links(view["catalyst"].dropna().astype(str).tolist(), key="rates_history")

st.subheader("Replicate time courses")
rows = widgets.selected_rows(sel, len(view))
choice = view.reset_index(drop=True).iloc[rows[0]] if rows else (view.iloc[0] if len(view) else None)
if choice is None:
    st.info("No rows match the filters.")
    st.stop()

label_of = lambda r: f"{r['catalyst']} at {r['temperature_c']:g} °C"  # noqa: E731
st.markdown(f"**{label_of(choice)}**, loading {choice['loading']:g} {choice['loading_unit']}, "
            f"substrate {choice['substrate_conc_mM']:g} mM" + (" (select a row above to change)" if not rows else ""))
w = kin.wells
cond = ["catalyst", "loading", "loading_unit", "substrate_conc_mM", *factors]
wm = np.isclose(pd.to_numeric(w["temperature_c"], errors="coerce"), float(choice["temperature_c"]), atol=1e-6)
for c in cond:
    wm &= (w[c].astype(str) == str(choice[c])).to_numpy()
members = w[wm][["plate", "well", "rate_mM_per_h", "tof_per_h", "method", "outlier", "flags"]]
pts = kin.amounts.merge(members[["plate", "well"]], on=["plate", "well"])
if "analyte" in pts:
    pts = pts[pts["analyte"].astype(str) == data.manifest.analyte_main]
pts = pts.assign(label=pts["plate"].astype(str) + " " + pts["well"].astype(str))
if pts.empty:
    st.info("These wells have no readings.")
else:
    widgets.chart(figures.replicate_courses(pts, y_col="product_mM", y_label="product / mM"),
                  key="rates_courses", filename=f"{choice['catalyst']}-courses")
    widgets.table(members.reset_index(drop=True), key="rates_members")
