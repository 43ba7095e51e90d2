"""Campaigns: what is in the store, and the chosen campaign at a glance."""
from __future__ import annotations

import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common
from screenlab.errors import ScreenlabError
from screenlab.stats.bounds import estimate_texts

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

    # ---- rounds: the round this one follows (and what was decided there), and the rounds after it ----
    links = cache.round_links(ctx.path, ctx.read_only, ctx.version)
    later = links.loc[links["parent"].astype(object) == ctx.campaign, "campaign"].astype(str).tolist()
    m = data.manifest
    if m.parent or later:
        with st.container(border=True):
            st.markdown("**Rounds**")
            if m.parent:
                text = f"This round follows **{m.parent}**"
                rec = None
                if m.decision is not None:
                    try:
                        rec, rec_rows = cache.decision_detail(ctx.path, ctx.read_only, m.decision)
                    except ScreenlabError:
                        rec = None
                    text += f", decision {m.decision}" + ("" if rec is not None else " (not in this store)")
                st.markdown(text + ".")
                if rec is not None:
                    when = pd.Timestamp(rec["created_at"]).strftime("%Y-%m-%d %H:%M UTC")
                    by = _common.metric_choices().get(rec["metric"], {}).get("label", rec["metric"])
                    st.markdown(f"Decided there by **{rec['author']}** on {when}: chose **{rec['catalysts']}** "
                                f"(ranked by {by}"
                                + (f" at {rec['temperature_c']:g} °C" if pd.notna(rec["temperature_c"]) else "")
                                + f"; {rec['status']}).")
                    st.info(rec["note"], icon=":material/sticky_note_2:")
                    chosen = rec_rows[rec_rows["position"].notna()].copy()
                    chosen["estimate (interval)"] = estimate_texts(chosen, "estimate", "ci_low", "ci_high")
                    ptop = f"P(top {int(rec['top_k'])})" if pd.notna(rec["top_k"]) else "P(top K)"
                    widgets.table(chosen.rename(columns={"p_top": ptop}), key="campaigns_parent_decision",
                                  columns=["position", "catalyst", "name", "estimate (interval)", "unit", "rank",
                                           "rank_low", "rank_high", ptop, "basis", "flags"])
                _common.campaign_button(m.parent, key="campaigns_go_parent", label=f"Open {m.parent} (round before)")
            if later:
                st.markdown("Rounds after this one: " + ", ".join(f"**{c}**" for c in later))
                cols = st.columns(min(len(later), 4))
                for i, c in enumerate(later):  # a few next rounds
                    with cols[i % len(cols)]:
                        _common.campaign_button(c, key=f"campaigns_go_next_{i}", label=f"Open {c}",
                                                icon=":material/arrow_forward:")

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

    st.subheader("Decisions")
    listed = cache.decisions(ctx.path, ctx.read_only, ctx.campaign)
    if listed.empty:
        st.caption("No decision recorded on this campaign yet (Shortlist page, or `screenlab shortlist ... --note`).")
    else:
        show = listed.assign(created_at=pd.to_datetime(listed["created_at"]).dt.strftime("%Y-%m-%d %H:%M UTC"))
        widgets.table(show, key="campaigns_decisions",
                      columns=["decision", "created_at", "author", "metric", "temperature_c", "catalysts", "note",
                               "supersedes", "status", "on_current_data"])
        for d in listed[listed["status"] == "current"].itertuples():  # the standing decisions, note in full
            st.markdown(f"**Decision {d.decision}** ({d.author}): {d.catalysts}")
            st.info(d.note, icon=":material/sticky_note_2:")
        stale = listed[~listed["on_current_data"].astype(bool)]
        if len(stale):
            st.caption("on current data = False: the campaign's data changed after that decision (a later import).")
    st.page_link("app_pages/shortlist.py", label="Shortlist and record a decision", icon=":material/checklist:")
    _common.history_links(data.catalysts["catalyst"].astype(str).tolist(), key="campaigns_history")

    st.subheader("Flags")
    counts = cache.flag_counts(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key)
    if counts.empty:
        st.success("No flags raised.")
    else:
        helptext = cache.flag_help()
        counts["meaning"] = counts["flag"].map(helptext).fillna("")
        widgets.table(counts, key="campaigns_flags")
    widgets.flag_glossary()
