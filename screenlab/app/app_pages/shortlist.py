"""Shortlist: pick candidates from the ranking, note why, record the decision, download the table,
the next-round plates and the report."""
from __future__ import annotations

import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common
from screenlab.errors import ScreenlabError
from screenlab.export.decision import default_author, draft_decision
from screenlab.export.shortlist import SAFETY_NOTE

ctx = widgets.context()
st.title("Shortlist")
if not widgets.need_campaign(ctx):
    st.stop()

a = ctx.analysis()
metrics = _common.metric_choices()
last = st.session_state.get("rank_last") or {}
metric = last.get("metric") if last.get("metric") in metrics else next(iter(metrics))
temperature = last.get("temperature")
k = int(last.get("k") or 3)
opts = dict(enantiomer=last.get("enantiomer") if metric == "ee" else None,
            transport_limited=bool(last.get("transport")) if metric == "ea" else False,
            require=tuple(last.get("require") or ()))
r = cache.ranking(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, metric, temperature, k,
                  opts["enantiomer"], opts["transport_limited"], opts["require"])
ranked = r[r["rank"].notna()]
st.caption(f"Candidates ranked by **{metrics[metric]['label']}**"
           + (f" at {temperature:g} °C" if temperature is not None else "")
           + (f", excess of {opts['enantiomer']}" if opts["enantiomer"] else "")
           + (f", requiring {', '.join(opts['require'])}" if opts["require"] else "")
           + " (change this on the Ranking page).")
fast = r[(r["censored"].astype(str) == "lower") & r["rank"].isna()]
if len(fast):
    st.info(f"Not in the ranking, only known as lower bounds (faster than the first reading allows): "
            + ", ".join(f"{c} ({b})" for c, b in zip(fast["catalyst"].astype(str),
                                                     [bound for bound in _common.bound_texts(fast)]))
            + ". Rerun them at lower loading or temperature to measure them.")
if ranked.empty:
    st.info("No candidate can be ranked, so there is nothing to shortlist.")
    st.stop()

cands = ranked[ranked["role"].astype(str) != "reference"]
options = cands["catalyst"].astype(str).tolist()
picked = st.multiselect("Candidates for the next round", options, default=options[:k], key="short_pick",
                        help=f"The top {k} by default, in ranking order; the benchmark is always added for "
                             "comparison.")
picked = [c for c in options if c in set(picked)]  # keep the ranking order
note = st.text_area("Note (kept with the shortlist)", key="short_note",
                    placeholder="why these, what to vary next ...")
if not picked:
    st.info("Pick at least one candidate.")
    st.stop()

# ---- recording the decision (never edited afterwards; a changed mind is a new decision) ----
recorded_key = f"short_recorded_{ctx.campaign}"
listed = cache.decisions(ctx.path, ctx.read_only, ctx.campaign)
with st.container(border=True):
    st.markdown("**Record the decision**")
    c1, c2 = st.columns([2, 3])
    author = c1.text_input("Decided by", value=default_author(), key="short_author",
                           help="Kept with the decision (default: the user running ScreenLab).")
    current = listed[listed["status"] == "current"]
    sup_opts = [None, *current["decision"].astype(int).tolist()]
    sup_text = dict(zip(current["decision"].astype(int), current["catalysts"].astype(str)))
    supersedes = c2.selectbox("Supersedes", sup_opts, key="short_supersedes",
                              format_func=lambda d: "nothing (a new decision)" if d is None
                              else f"decision {d}: {sup_text.get(d, '')}",
                              help="A changed mind is a new decision naming the one it replaces; the old one "
                                   "stays as it was.")
    def _recorded() -> int | None:
        """The decision these picks and this note were recorded as in this session, if any."""
        state = st.session_state.get(recorded_key) or {}
        same = state.get("picked") == list(picked) and state.get("note") == note.strip()
        return state.get("decision") if same else None

    can = not ctx.read_only and bool(note.strip()) and bool(author.strip()) and _recorded() is None
    why = ("This store is open read-only: record decisions with `screenlab shortlist ... --note TEXT`."
           if ctx.read_only else "Write a note first (why these catalysts)." if not note.strip() else "")
    if st.button("Record this decision", key="short_record", disabled=not can, icon=":material/gavel:",
                 help=why or "Keeps the picks in order with their estimates and intervals, the ranking, the "
                             "settings, the note, who and when (UTC) in the store."):
        from screenlab.store import Store
        from screenlab.store.decisions import record_decision

        draft = draft_decision(r, picked, campaign=ctx.campaign, note=note, author=author, settings=a.settings,
                               top_k=k, draws=10000, seed=0, catalysts=a.data.catalysts, supersedes=supersedes,
                               campaign_version=cache.campaign_version(ctx.path, ctx.read_only, ctx.version,
                                                                       ctx.campaign))
        try:
            done = record_decision(Store(ctx.path), draft)
        except ScreenlabError as exc:
            st.error(f"Not recorded: {exc}")
        else:
            st.session_state[recorded_key] = {"decision": done.decision, "picked": list(picked),
                                              "note": note.strip()}
            listed = cache.decisions(ctx.path, ctx.read_only, ctx.campaign)
    if why:
        st.caption(why)
    rec_state = st.session_state.get(recorded_key) or {}
    decision_id = _recorded()
    if decision_id is not None:
        st.success(f"Recorded as decision {decision_id}. The next-round folder below names it in its "
                   f"campaign.toml ([campaign] parent = \"{ctx.campaign}\", decision = {decision_id}).",
                   icon=":material/task_alt:")
    elif rec_state:
        st.caption(f"Decision {rec_state.get('decision')} was recorded for other picks or another note; these are "
                   "not recorded yet.")

files = cache.shortlist_files(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, metric,
                              temperature, k, tuple(picked), note, decision_id, **opts)
st.subheader("Shortlisted")
widgets.table(files.table, key="short_table")
c1, c2, c3 = st.columns(3)
c1.download_button("Download CSV", data=files.csv, file_name=f"{ctx.campaign}-shortlist.csv", mime="text/csv",
                   on_click="ignore", key="short_csv", icon=":material/download:")
c2.download_button("Download XLSX", data=files.xlsx, file_name=f"{ctx.campaign}-shortlist.xlsx",
                   mime="application/vnd.openxmlformats-officedocument.spreadsheetml.sheet", on_click="ignore",
                   key="short_xlsx", icon=":material/download:")
c3.download_button("Next-round campaign folder (.zip)", data=files.next_round_zip,
                   file_name=f"{ctx.campaign}-next-round.zip", mime="application/zip", on_click="ignore",
                   key="short_zip", icon=":material/folder_zip:")
report = cache.report_html(ctx.path, ctx.read_only, ctx.version, cache.decisions_token(ctx.path, ctx.read_only),
                           ctx.campaign, ctx.settings_key, metric, temperature, k, tuple(picked), note,
                           author.strip() or default_author(), decision_id)
st.download_button("Report (.html)", data=report, file_name=f"{ctx.campaign}-report.html", mime="text/html",
                   on_click="ignore", key="short_report", icon=":material/description:",
                   help="One self-contained HTML file (opens offline, prints to PDF): summary, decision and note, "
                        "ranking, Arrhenius plot of the picks, plate quality, flags, provenance, safety."
                        + ("" if decision_id is not None else " Not recorded yet: the report says so."))
if files.next_round_summary:
    st.markdown(files.next_round_summary)
_common.history_links(picked, key="short_history")

st.subheader("Decisions on this campaign")
if listed.empty:
    st.caption("None recorded yet.")
else:
    show = listed.assign(created_at=pd.to_datetime(listed["created_at"]).dt.strftime("%Y-%m-%d %H:%M UTC"))
    widgets.table(show, key="short_decisions", columns=["decision", "created_at", "author", "metric",
                                                        "temperature_c", "catalysts", "note", "supersedes",
                                                        "status", "on_current_data"])
title, _, body = SAFETY_NOTE.partition("\n")
st.warning(f"**{title.strip()} (scale-up caution)**\n\n{body.strip()}", icon=":material/warning:")
