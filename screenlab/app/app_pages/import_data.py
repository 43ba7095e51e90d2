"""Import: a campaign folder, readings for a planned campaign, or a campaign built from its pieces.

Every path checks everything before anything is written and lists each problem with file, row
and column; the write is one transaction.
"""
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

MODES = {
    "folder": "A campaign folder",
    "readings": "Readings for a planned campaign",
    "build": "A campaign from separate files",
}
mode = st.radio("What arrives", list(MODES), format_func=MODES.get, horizontal=True, key="import_mode")


def _digest(files: dict[str, bytes], *extra) -> str:
    h = hashlib.sha256("\x1f".join(map(str, extra)).encode())
    for k, v in sorted(files.items()):
        h.update(hashlib.sha256(k.encode() + v).digest())
    return h.hexdigest()


def _problems_frame(problems) -> pd.DataFrame:
    return pd.DataFrame([{"file": p.file, "row": p.row, "column": p.column, "value": p.value,
                          "problem": p.message} for p in problems],
                        columns=["file", "row", "column", "value", "problem"]).astype({"row": "Int64"})


def _grouped_frame(problems) -> pd.DataFrame:
    """The problems as shown: one line per problem that repeats over rows (the rows as runs, e.g.
    ``2–9``), :func:`screenlab.errors.group_problems`."""
    from screenlab.errors import group_problems, row_ranges

    return pd.DataFrame([{"file": g.first.file, "rows": row_ranges(g.rows) if g.rows else "",
                          "n rows": len(g.rows), "column": g.first.column, "value": g.first.value,
                          "problem": g.first.message} for g in group_problems(problems)],
                        columns=["file", "rows", "n rows", "column", "value", "problem"])


def _show_problems(problems, key: str, source: str = "") -> None:
    n = len(problems)
    st.error(f"{n} problem{'s' if n != 1 else ''} found; nothing was written." if n else source)
    if n:
        frame = _problems_frame(problems)
        widgets.table(_grouped_frame(problems), key=f"{key}_table")
        st.download_button("Download the problem list (CSV, one line per problem)", data=frame.to_csv(index=False),
                           file_name="import-problems.csv", mime="text/csv", on_click="ignore", key=f"{key}_csv")


def _show_notes(notes, key: str) -> None:
    if notes:
        with st.expander(f"Notes ({len(notes)})", expanded=len(notes) <= 6):
            st.markdown("\n".join(f"- {n}" for n in notes))


def _report_lines(report) -> str:
    """An ImportReport in a few plain lines."""
    lines = [f"**{report.campaign}**: {report.status.replace('_', ' ')}"]
    if report.message:
        lines.append(report.message)
    replaced = "plates completed" if report.status == "readings_added" else "plates replaced"
    for label, items in (("plates added", report.plates_added), (replaced, report.plates_replaced),
                         ("plates unchanged", report.plates_unchanged), ("catalysts added", report.catalysts_added),
                         ("catalysts replaced", report.catalysts_replaced)):
        if items:
            lines.append(f"{label}: {', '.join(map(str, items))}")
    lines.append(f"{report.n_wells} wells, {report.n_readings} readings")
    return "\n\n".join(lines)


def _commit_campaign(result, digest: str, key: str, exists_note: str = "") -> None:
    """The dry run of an import of ``result`` and its commit button (shared by two flows)."""
    data = result.data
    exists = data.name in ctx.campaign_names
    replace = False
    if exists:
        st.warning(f"The store already holds a campaign named **{data.name}**.{exists_note}")
        replace = st.checkbox("Replace the stored campaign with this one", key=f"{key}_replace")
    try:
        with cache.open_store(ctx.path, False) as s:
            dry = s.import_campaign(result, replace=replace, dry_run=True)
        st.markdown("**What the import would do:**\n\n" + _report_lines(dry))
        can_commit = True
    except ScreenlabError as exc:
        st.error(str(exc))
        can_commit = False
    if st.session_state.get(f"{key}_done") == digest:
        st.success("Imported. The other pages now show this data.")
    elif st.button("Import into the store", type="primary", disabled=not can_commit, key=f"{key}_commit"):
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
                st.session_state[f"{key}_done"] = digest
            except StoreBusyError as exc:
                status.update(label="The store is busy", state="error")
                st.error(f"{exc} Try again once the other program has finished.")
            except ScreenlabError as exc:
                status.update(label="Import failed; nothing was written", state="error")
                st.error(str(exc))


def _check_campaign(files: dict[str, bytes], key: str):
    """read_campaign of the files, remembered per content; (result, error)."""
    digest = _digest(files)
    if st.session_state.get(f"{key}_digest") != digest:
        st.session_state[f"{key}_digest"] = digest
        st.session_state.pop(f"{key}_done", None)
        from screenlab.ingest import read_campaign

        with st.spinner("Checking the files ..."):
            try:
                st.session_state[f"{key}_result"] = read_campaign(files)
                st.session_state[f"{key}_problems"] = None
            except ValidationError as err:
                st.session_state[f"{key}_result"] = None
                st.session_state[f"{key}_problems"] = err
            except ScreenlabError as err:
                st.session_state[f"{key}_result"] = None
                st.session_state[f"{key}_problems"] = ValidationError([], source=str(err))
    return st.session_state.get(f"{key}_result"), st.session_state.get(f"{key}_problems"), digest


# ----------------------------------------------------------------------------------- 1. a folder

def folder_flow() -> None:
    st.markdown(
        "Upload the campaign folder's files (`campaign.toml`, `catalysts.csv`, `plates.csv`, "
        "`layout.csv`, `readings.csv`; `.xlsx` tables are accepted too) **or** one `.zip` of the folder "
        "(a `readings/` folder of plate grids inside it is read too). Every file is checked before anything "
        "is written; an import with any problem writes nothing.")
    uploads = st.file_uploader("Campaign files or a .zip", accept_multiple_files=True,
                               type=["toml", "csv", "xlsx", "zip"], key="import_files")
    if not uploads:
        return
    files = {u.name: u.getvalue() for u in uploads}
    result, err, digest = _check_campaign(files, "import")
    st.subheader("Validation report")
    if err is not None:
        _show_problems(err.problems, "import_problems", str(err.source))
    elif result is not None:
        data = result.data
        st.success(f"No problems found in {len(result.files)} file(s): campaign **{data.name}**, "
                   f"{len(data.plates)} plates, {len(data.wells)} wells, {len(data.readings)} readings.")
        _show_notes(result.notes, "import_notes")
        _commit_campaign(result, digest, "import")


# ----------------------------------------------------------------------------------- 2. readings

def _arrival_section(arrival: pd.DataFrame, plates: pd.DataFrame, key: str, default=None) -> None:
    """Per plate: counts of what arrived, and the plate map of one plate."""
    from screenlab.viz import figures

    if arrival.empty:
        return
    counts = (arrival.groupby(["plate", "status"]).size().unstack(fill_value=0)
              .reindex(columns=["read", "missing", "extra"], fill_value=0))
    n_read = arrival[arrival["status"] == "read"].groupby("plate")["n_readings"].sum()
    n_extra = arrival[arrival["status"] == "extra"].groupby("plate")["n_readings"].sum()
    order = [p for p in plates["plate"].astype(str) if p in counts.index]
    summary = pd.DataFrame({"plate": order,
                            "wells_with_readings": counts.loc[order, "read"].to_numpy(),
                            "expected_but_missing": counts.loc[order, "missing"].to_numpy(),
                            "extra_positions": counts.loc[order, "extra"].to_numpy(),
                            "readings": n_read.reindex(order).fillna(0).astype("int64").to_numpy(),
                            "values_on_extra_positions": n_extra.reindex(order).fillna(0).astype("int64").to_numpy()})
    widgets.table(summary, key=f"{key}_summary")
    st.caption("Extra positions: values where the layout has no well (empty, or not listed). From plate grids they "
               "are left out and said so in the notes; in a table they are refused.")
    info = plates.set_index(plates["plate"].astype(str))
    pick = st.selectbox("Plate map of", order, index=order.index(default) if default in order else 0,
                        key=f"{key}_plate",
                        format_func=lambda p: f"{p} · {info.loc[p, 'temperature_c']:g} °C · {int(info.loc[p, 'format'])} wells")
    one = arrival[arrival["plate"].astype(str) == pick]
    fig = figures.arrival_map(one, n_rows=int(info.loc[pick, "n_rows"]), n_cols=int(info.loc[pick, "n_cols"]),
                              title=f"{pick}: what arrived")
    widgets.chart(fig, key=f"{key}_map_{pick}", filename=f"{pick}-arrived")


def readings_flow() -> None:
    from screenlab.ingest.addreadings import read_new_readings, readings_files_from_upload
    from screenlab.store import add_readings, plate_readings

    st.markdown(
        "A planned campaign is in the store without readings (for example the next round written by the "
        "**Shortlist** page and imported here). Drop the readings as the instruments wrote them: plate-grid "
        "files named after their plate (`UV-25.csv`, `UV-25.xlsx`), one workbook with a sheet per plate, a long "
        "table (`plate, well, time, value`) or a table by sample code (`sample, time, value`). Readings go to "
        "plates that have none yet; everything is checked as on import, and nothing is written before you commit.")
    if st.session_state.get("addr_report"):
        st.success("Readings added. The other pages now show them.")
        st.markdown(st.session_state["addr_report"])
    with cache.open_store(ctx.path, False) as s:
        table = plate_readings(s)
    waiting = table[table["readings"] == 0]
    if waiting.empty:
        st.info("No stored campaign has plates waiting for readings. Import a planned campaign (a folder without "
                "readings, such as a next-round folder) first.")
        return
    camps = list(dict.fromkeys(waiting["campaign"].astype(str)))
    n_wait = waiting.groupby("campaign").size()
    camp = st.selectbox("Planned campaign", camps, key="addr_campaign",
                        format_func=lambda c: f"{c} · {int(n_wait[c])} plate(s) without readings")
    mine = table[table["campaign"].astype(str) == camp].drop(columns=["campaign"])
    widgets.table(mine.rename(columns={"wells": "wells_in_layout"}), key="addr_plates")
    uploads = st.file_uploader("Readings files (or a .zip of them)", accept_multiple_files=True,
                               type=["csv", "xlsx", "zip"], key="addr_files")
    if not uploads:
        return
    raw = {u.name: u.getvalue() for u in uploads}
    content = _digest(raw, camp)
    if st.session_state.get("addr_done") == content:
        return
    digest = _digest(raw, camp, ctx.version)  # checked again whenever the store changed
    if st.session_state.get("addr_digest") != digest:
        st.session_state["addr_digest"] = digest
        st.session_state.pop("addr_error", None)
        st.session_state.pop("addr_report", None)
        with st.spinner("Checking the readings ..."):
            try:
                files = readings_files_from_upload(raw)
                data = cache.campaign_data(ctx.path, ctx.read_only, ctx.version, camp)
                st.session_state["addr_new"] = read_new_readings(files, data, source="upload")
            except ValidationError as err:
                st.session_state["addr_new"] = None
                st.session_state["addr_error"] = err
    err = st.session_state.get("addr_error")
    new = st.session_state.get("addr_new")
    st.subheader("What arrived")
    if err is not None:
        _show_problems(err.problems, "addr_problems", str(err.source))
        return
    if new is None:
        return
    data = cache.campaign_data(ctx.path, ctx.read_only, ctx.version, camp)
    forms_text = ", ".join({"long": "long table", "sample": "table by sample code", "grid": "plate grids"}.get(f, f)
                           for f in new.forms)
    st.markdown(f"{len(new.files)} file(s) read ({forms_text}): "
                + ", ".join(f"`{f.name}`" for f in new.files))
    _show_notes(new.notes, "addr_notes")
    if new.problems:
        _show_problems(new.problems, "addr_problems")
    else:
        st.success(f"No problems found: {len(new.readings):,} readings for {len(new.plates)} plate(s) "
                   f"({', '.join(new.plates)}).")
    _arrival_section(new.arrival, data.plates, "addr", default=new.plates[0] if new.plates else None)
    if not new.ok:
        return
    if st.button("Add the readings to the store", type="primary", key="addr_commit"):
        with st.status("Adding the readings ...", expanded=True) as status:
            try:
                with cache.open_store(ctx.path, False) as s:
                    report = add_readings(s, data, new, data_version=ctx.version, source="upload: " + ", ".join(raw))
                cache.clear()
                status.update(label="Readings added", state="complete")
                st.session_state["addr_done"] = content
                st.session_state["addr_report"] = _report_lines(report)
            except StoreBusyError as exc:
                status.update(label="The store is busy", state="error")
                st.error(f"{exc} Try again once the other program has finished.")
                return
            except ScreenlabError as exc:
                status.update(label="Nothing was written", state="error")
                st.error(str(exc))
                return
        st.rerun()  # every table on the page (and the sidebar) from the new store version


# ----------------------------------------------------------------------------------- 3. build

def _manifest_form() -> bytes | None:
    from screenlab.ingest.assemble import manifest_text

    how = st.radio("Manifest", ["fill in", "upload campaign.toml"], horizontal=True, key="build_manifest_how")
    if how == "upload campaign.toml":
        up = st.file_uploader("campaign.toml", type=["toml"], key="build_manifest_file")
        return up.getvalue() if up is not None else None
    c1, c2, c3 = st.columns(3)
    name = c1.text_input("Campaign name", key="build_name", placeholder="e.g. aldol-screen-2026")
    description = c2.text_input("Description", key="build_description")
    reaction = c3.text_input("Reaction", key="build_reaction", placeholder="A + B -> C")
    c1, c2, c3 = st.columns(3)
    time_unit = c1.selectbox("Time unit of the readings", ["min", "s", "h"], key="build_time")
    conc_unit = c2.selectbox("Concentration unit", ["mM", "M", "uM"], key="build_conc")
    vol_unit = c3.selectbox("Volume unit", ["uL", "mL", "L"], key="build_volume")
    c1, c2, c3 = st.columns(3)
    kind = c1.selectbox("Readout", ["conversion", "yield", "product_conc", "absorbance"], key="build_kind")
    scale = c2.selectbox("Scale", ["percent", "fraction"], key="build_scale",
                         disabled=kind not in ("conversion", "yield"))
    pps = c3.number_input("Product per substrate (mol/mol)", value=1.0, min_value=0.0, step=0.5, key="build_pps")
    eps = path = None
    if kind == "absorbance":
        c1, c2 = st.columns(2)
        eps = c1.number_input("Molar absorption coefficient ε / L mol⁻¹ cm⁻¹", value=0.0, min_value=0.0, key="build_eps")
        path = c2.number_input("Path length / cm", value=0.0, min_value=0.0, key="build_path")
        eps, path = (eps or None), (path or None)
    tref = st.number_input("Reference temperature / °C (for comparing TOF)", value=60.0, step=5.0, key="build_tref")
    if not name.strip():
        st.caption("Give the campaign a name to build its manifest.")
        return None
    return manifest_text(name=name.strip(), description=description.strip(), reaction=reaction.strip(),
                         time_unit=time_unit, concentration_unit=conc_unit, volume_unit=vol_unit, kind=kind,
                         scale=scale, product_per_substrate=pps, epsilon_M_cm=eps, path_length_cm=path,
                         reference_temperature_c=tref).encode("utf-8")


def build_flow() -> None:
    from screenlab.ingest.assemble import assemble_campaign, campaign_zip

    st.markdown(
        "Put a campaign together from its pieces: the manifest (fill it in or upload `campaign.toml`), the "
        "catalysts, plates and layout tables (CSV or XLSX, any file name) and the readings in any form "
        "(a long table, a table by sample code, plate-grid files named after their plate, or one workbook with a "
        "sheet per plate; or none, for a planned round). Every problem is listed with file, row and column "
        "before anything is written; the assembled folder can be downloaded as a `.zip`.")
    manifest = _manifest_form()
    cols = st.columns(3)
    tables = {}
    for col, piece in zip(cols, ("catalysts", "plates", "layout")):
        up = col.file_uploader(f"{piece.capitalize()} table", type=["csv", "xlsx"], key=f"build_{piece}")
        tables[piece] = (up.name, up.getvalue()) if up is not None else None
    ups = st.file_uploader("Readings (optional)", accept_multiple_files=True, type=["csv", "xlsx"],
                           key="build_readings")
    readings = {u.name: u.getvalue() for u in ups or ()}
    if manifest is None and not any(tables.values()) and not readings:
        return
    files, problems = assemble_campaign(manifest=manifest, tables=tables, readings=readings)
    st.subheader("The assembled folder")
    st.markdown(", ".join(f"`{k}`" for k in sorted(files)) or "(nothing yet)")
    if problems:
        _show_problems(problems, "build_assembly")
        return
    result, err, digest = _check_campaign(files, "build")
    zname, zbytes = campaign_zip(files)
    st.download_button("Download the campaign folder (.zip)", data=zbytes, file_name=zname, mime="application/zip",
                       on_click="ignore", key="build_zip")
    st.subheader("Validation report")
    if err is not None:
        _show_problems(err.problems, "build_problems", str(err.source))
        return
    data = result.data
    st.success(f"No problems found: campaign **{data.name}**, {len(data.plates)} plates, {len(data.wells)} wells, "
               f"{len(data.readings)} readings" + (" (a planned round: no readings yet)." if not len(data.readings)
                                                   else "."))
    _show_notes(result.notes, "build_notes")
    if len(data.readings):
        from screenlab.ingest.forms import arrival_map
        from screenlab.ingest.tables import RawTable

        seen = RawTable("readings", data.readings[["plate", "well"]].astype(str).reset_index(drop=True),
                        rows=pd.RangeIndex(len(data.readings)).to_numpy())
        _arrival_section(arrival_map(seen, pd.DataFrame(columns=["plate", "well", "n"]), data.plates, data.wells),
                         data.plates, "build")
    _commit_campaign(result, digest, "build")


if mode == "folder":
    folder_flow()
elif mode == "readings":
    readings_flow()
else:
    build_flow()

st.subheader("Import history")
hist = cache.imports(ctx.path, ctx.read_only, ctx.version, None)
if len(hist):
    widgets.table(hist, key="import_history")
else:
    st.caption("Nothing imported yet.")
