"""Import: upload a campaign's files (or one .zip), see every problem, then commit."""
from __future__ import annotations

import hashlib

import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets
from screenlab.errors import ScreenlabError, StoreBusyError, ValidationError

ctx = widgets.context()
st.title("Import a campaign")

if ctx.read_only:  # the page is not listed in read-only mode; refuse a direct visit as well
    st.error("This store is open read-only; importing is switched off.")
    st.stop()

st.markdown(
    "Upload the campaign folder's files (`campaign.toml`, `catalysts.csv`, `plates.csv`, "
    "`layout.csv`, `readings.csv`; `.xlsx` tables are accepted too) **or** one `.zip` of the folder. "
    "Every file is checked before anything is written; an import with any problem writes nothing.")

uploads = st.file_uploader("Campaign files or a .zip", accept_multiple_files=True,
                           type=["toml", "csv", "xlsx", "zip"], key="import_files")


def _problems_frame(err: ValidationError) -> pd.DataFrame:
    return pd.DataFrame([{"file": p.file, "row": p.row, "column": p.column, "value": p.value,
                          "problem": p.message} for p in err.problems],
                        columns=["file", "row", "column", "value", "problem"]).astype(
        {"row": "Int64"})


def _report_lines(report) -> str:
    """An ImportReport in a few plain lines."""
    lines = [f"**{report.campaign}**: {report.status.replace('_', ' ')}"]
    if report.message:
        lines.append(report.message)
    for label, items in (("plates added", report.plates_added), ("plates replaced", report.plates_replaced),
                         ("plates unchanged", report.plates_unchanged), ("catalysts added", report.catalysts_added),
                         ("catalysts replaced", report.catalysts_replaced)):
        if items:
            lines.append(f"{label}: {', '.join(map(str, items))}")
    lines.append(f"{report.n_wells} wells, {report.n_readings} readings")
    return "\n\n".join(lines)


if uploads:
    files = {u.name: u.getvalue() for u in uploads}
    digest = hashlib.sha256(b"".join(hashlib.sha256(k.encode() + v).digest() for k, v in sorted(files.items()))).hexdigest()
    if st.session_state.get("import_digest") != digest:
        st.session_state["import_digest"] = digest
        st.session_state.pop("import_result", None)
        st.session_state.pop("import_done", None)
        from screenlab.ingest import read_campaign

        with st.spinner("Checking the files ..."):
            try:
                st.session_state["import_result"] = read_campaign(files)
                st.session_state["import_problems"] = None
            except ValidationError as err:
                st.session_state["import_problems"] = err
            except ScreenlabError as err:
                st.session_state["import_problems"] = ValidationError([], source=str(err))

    err = st.session_state.get("import_problems")
    result = st.session_state.get("import_result")
    st.subheader("Validation report")
    if err is not None:
        n = len(err.problems)
        st.error(f"{n} problem{'s' if n != 1 else ''} found; nothing was written." if n else str(err.source))
        if n:
            widgets.table(_problems_frame(err), key="import_problems_table")
            st.download_button("Download the problem list (CSV)", data=_problems_frame(err).to_csv(index=False),
                               file_name="import-problems.csv", mime="text/csv", on_click="ignore",
                               key="import_problems_csv")
    elif result is not None:
        data = result.data
        st.success(f"No problems found in {len(result.files)} file(s): campaign **{data.name}**, "
                   f"{len(data.plates)} plates, {len(data.wells)} wells, {len(data.readings)} readings.")
        exists = data.name in ctx.campaign_names
        replace = False
        if exists:
            st.warning(f"The store already holds a campaign named **{data.name}**.")
            replace = st.checkbox("Replace the stored campaign with this one", key="import_replace")
        try:
            with cache.open_store(ctx.path, False) as s:
                dry = s.import_campaign(result, replace=replace, dry_run=True)
            st.markdown("**What the import would do:**\n\n" + _report_lines(dry))
            can_commit = True
        except ScreenlabError as exc:
            st.error(str(exc))
            can_commit = False
        if st.session_state.get("import_done") == digest:
            st.success("Imported. The other pages now show this data.")
        elif st.button("Import into the store", type="primary", disabled=not can_commit, key="import_commit"):
            with st.status("Importing ...", expanded=True) as status:
                bar = st.progress(0, text="opening the store")
                try:
                    with cache.open_store(ctx.path, False) as s:
                        bar.progress(30, text="writing the tables (one transaction)")
                        report = s.import_campaign(result, replace=replace)
                    bar.progress(90, text="refreshing the analysis")
                    cache.clear()
                    bar.progress(100, text="done")
                    status.update(label="Import complete", state="complete")
                    st.markdown(_report_lines(report))
                    st.session_state["import_done"] = digest
                except StoreBusyError as exc:
                    status.update(label="The store is busy", state="error")
                    st.error(f"{exc} Try again once the other program has finished.")
                except ScreenlabError as exc:
                    status.update(label="Import failed; nothing was written", state="error")
                    st.error(str(exc))

st.subheader("Import history")
hist = cache.imports(ctx.path, ctx.read_only, ctx.version, None)
if len(hist):
    widgets.table(hist, key="import_history")
else:
    st.caption("Nothing imported yet.")
