"""Campaigns: what is in the store, and the chosen campaign at a glance."""
from __future__ import annotations

import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common

ctx = widgets.context()
st.title("Campaigns")

camps = cache.campaigns(ctx.path, ctx.read_only, ctx.version)
if len(camps):
    st.subheader("In this store")
    widgets.table(camps, key="campaigns_table")

if widgets.need_campaign(ctx):
    a = ctx.analysis()
    data, kin = a.data, a.kinetics
    st.subheader(f"{ctx.campaign}")
    if data.manifest.description or data.manifest.reaction:
        st.caption(" · ".join(x for x in (data.manifest.reaction, data.manifest.description) if x))
    roles = data.wells["role"].astype(str).value_counts()
    temps = sorted(pd.to_numeric(data.wells["temperature_c"], errors="coerce").dropna().round(1).unique())
    c = st.columns(6)
    c[0].metric("Plates", len(data.plates))
    c[1].metric("Catalysts", int(data.catalysts["catalyst"].nunique()))
    c[2].metric("Sample wells", int(roles.get("sample", 0)))
    c[3].metric("Blank wells", int(roles.get("blank", 0)))
    c[4].metric("Benchmark wells", int(roles.get("reference", 0)))
    c[5].metric("Readings", len(data.readings))
    st.markdown("**Temperatures / °C:** " + (", ".join(f"{t:g}" for t in temps) or "–")
                + f" · **readout:** {data.manifest.readout_kind}"
                + (f" ({data.manifest.readout_scale})" if data.manifest.readout_scale else ""))

    with st.container(border=True):
        st.markdown("**From screen to shortlist**")
        steps = st.columns(4)
        for col, (page, label, icon, what) in zip(steps, [
                ("ranking", "1. Ranking", "leaderboard", "who leads, and how sure"),
                ("plate_map", "2. Plate map", "grid_on", "the wells behind a number"),
                ("quality", "3. Plate quality", "verified", "which plates to trust"),
                ("shortlist", "4. Shortlist", "checklist", "pick, note, download")]):
            col.page_link(f"app_pages/{page}.py", label=label, icon=f":material/{icon}:")
            col.caption(what)

    left, right = st.columns([3, 2])
    with left:
        st.subheader("Best candidates so far")
        _common.best_candidates(ctx, a)
    with right:
        st.subheader("Plates")
        q = a.quality
        status = q["status"].astype(str).value_counts()
        s = st.columns(3)
        s[0].metric("ok", int(status.get("ok", 0)))
        s[1].metric("flagged", int(status.get("flagged", 0)))
        s[2].metric("failed", int(status.get("failed", 0)))
        st.page_link("app_pages/quality.py", label="Plate quality details", icon=":material/verified:")

    st.subheader("Flags")
    counts = cache.flag_counts(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key)
    if counts.empty:
        st.success("No flags raised.")
    else:
        helptext = cache.flag_help()
        counts["meaning"] = counts["flag"].map(helptext).fillna("")
        widgets.table(counts, key="campaigns_flags")
    widgets.flag_glossary()
