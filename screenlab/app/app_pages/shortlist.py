"""Shortlist: pick candidates from the ranking, note why, download the table and the next-round plates."""
from __future__ import annotations

import streamlit as st

from screenlab.app import cache, widgets
from screenlab.app.app_pages import _common
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

files = cache.shortlist_files(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, metric,
                              temperature, k, tuple(picked), note, **opts)
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
if files.next_round_summary:
    st.markdown(files.next_round_summary)
title, _, body = SAFETY_NOTE.partition("\n")
st.warning(f"**{title.strip()} (scale-up caution)**\n\n{body.strip()}", icon=":material/warning:")
