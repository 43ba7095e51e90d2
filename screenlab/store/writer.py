"""The writer: an import plan (:mod:`screenlab.store.planner`) written into the open transaction.

Rows go to DuckDB as one Arrow table of one record batch per table (one ``INSERT ... SELECT``;
:func:`bulk_insert`); the campaign and import id, the same on every row, are parameters of that
statement, not columns of the table. Every write ends with :func:`record_import` (the import
history, its files, the store's write generation) and :func:`commit`: an import of at least
:data:`CHECKPOINT_READINGS` readings commits straight into the database file.
"""
from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import datetime, timezone

import duckdb
import pandas as pd
import pyarrow as pa

from screenlab.model import Manifest
from screenlab.store import queries as Q
from screenlab.store.planner import ImportPlan, Incoming
from screenlab.store.storage import files_frame, manifest_dict, to_arrow

#: an import that writes at least this many readings commits straight into the database file
#: (a checkpoint at commit instead of a WAL write), and a CHECKPOINT follows it
CHECKPOINT_READINGS = 50_000


@dataclass(frozen=True)
class Tagged:
    """The rows of one table of an import and the campaign and import id they are stored under:
    one value each for every row, given to the INSERT as parameters (no per-row column is built)."""

    rows: pa.Table
    campaign: str
    import_id: int


def bulk_insert(con, table: str, rows: pa.Table | pd.DataFrame | Tagged) -> None:
    """INSERT ... SELECT from the rows as one Arrow table of one record batch (one statement per
    table, never row by row); :class:`Tagged` rows give the statement its ``$campaign`` and
    ``$import_id`` parameters.

    Arrow lets DuckDB scan the columns zero-copy; scanning pandas text columns directly costs
    several times more at campaign scale."""
    params = None
    if isinstance(rows, Tagged):
        params = {"campaign": rows.campaign, "import_id": rows.import_id}
        rows = rows.rows
    data = rows if isinstance(rows, pa.Table) else pa.Table.from_pandas(rows, preserve_index=False)
    if data.num_rows == 0:
        return
    # one record batch: DuckDB inserts a table of several batches (columns in chunks, e.g. straight
    # from the CSV reader) batch by batch and merges the row groups, much slower than one scan
    data = data.combine_chunks()
    view = f"incoming_{table}"
    con.register(view, data)
    try:
        con.execute(Q.BULK_INSERT[table], params)
    finally:
        con.unregister(view)


def next_import_id(con) -> int:
    return int(con.execute(Q.NEXT_IMPORT_ID).fetchall()[0][0])


def supersede_plates(con, import_id: int, campaign: str, plates) -> None:
    """Mark the current versions of ``plates`` superseded by ``import_id``."""
    names = pd.DataFrame({"plate": pd.array(list(plates), dtype="string")})
    con.register("incoming_plate_names", names)
    try:
        con.execute(Q.SUPERSEDE_PLATES, [import_id, campaign])
    finally:
        con.unregister("incoming_plate_names")


def record_import(con, import_id: int, campaign: str, when: datetime, source: str, status: str, *,
                  added=(), replaced=(), unchanged=(), catalysts_added=(), catalysts_replaced=(),
                  manifest_replaced: bool = False, n_wells: int = 0, n_readings: int = 0, message: str = "",
                  files=()) -> None:
    """The import's history row, its files, and the store's write generation (bumped)."""
    from screenlab import __version__

    lib = con.execute(Q.LIBRARY_VERSION).fetchall()[0][0]
    con.execute(Q.INSERT_IMPORT, [
        import_id, campaign, when, source, status, list(added), list(replaced), list(unchanged),
        list(catalysts_added), list(catalysts_replaced), bool(manifest_replaced), n_wells, n_readings, message,
        __version__, str(lib)])
    bulk_insert(con, "import_files", files_frame(files, import_id))
    con.execute(Q.BUMP_GENERATION_WRITTEN_BY, [f"DuckDB {lib}, screenlab {__version__}"])


def commit(con, n_readings: int) -> None:
    """Commit the open transaction; a write of at least :data:`CHECKPOINT_READINGS` readings
    commits straight into the file (one checkpoint at commit, not the WAL first and the file at a
    later CHECKPOINT), and a CHECKPOINT merges anything left in the WAL afterwards (only an
    optimisation: the write is committed by then)."""
    large = n_readings >= CHECKPOINT_READINGS
    try:
        if large:
            con.execute(Q.COMMIT_INTO_FILE)
        con.commit()
    finally:
        if large:
            try:
                con.execute(Q.DEFAULT_CHECKPOINT_THRESHOLD)
            except duckdb.Error:  # pragma: no cover - a setting of this connection only
                pass
    if large:
        try:
            con.execute(Q.CHECKPOINT)
        except duckdb.Error:
            pass


def _selected(frame: pd.DataFrame, plan: ImportPlan, key: str) -> pd.DataFrame:
    return frame if plan.rows is None else frame.loc[plan.rows[key]]


def write_import(con, plan: ImportPlan, incoming: Incoming, manifest: Manifest, *, files=(), source: str = "",
                 whole: dict[str, pa.Table] | None = None) -> int:
    """Write ``plan`` (a plan that writes) in the open transaction; returns the new import id.

    ``whole``: the prepared wells, factors and readings already as Arrow tables, used when every
    incoming plate is written. The incoming fingerprints are asked for only after the wells and
    readings are written when the plan did not need them (they may be computed meanwhile)."""
    name = plan.campaign
    prep = incoming.prepared
    import_id = next_import_id(con)
    now = datetime.now(timezone.utc).replace(tzinfo=None)
    tag = {"campaign": name, "import_id": import_id}
    if plan.header is not None:
        m, h = manifest, plan.header
        con.execute(Q.SUPERSEDE_HEADER, [import_id, name])
        con.execute(Q.INSERT_HEADER, [
            name, import_id, incoming.manifest_fingerprint, m.description, m.reaction, m.readout_kind,
            m.readout_scale, m.product_per_substrate, m.epsilon_M_cm, m.path_length_cm, m.time_unit,
            m.concentration_unit, m.volume_unit, m.analyte_main, list(m.byproducts),
            None if m.enantiomers is None else list(m.enantiomers), json.dumps(m.analysis, default=str),
            json.dumps(manifest_dict(m)), m.source_toml, list(h.factor_names), json.dumps(h.frame_schema)])
        bulk_insert(con, "catalysts", Tagged(to_arrow(h.catalysts), **tag))
    if plan.changed:
        supersede_plates(con, import_id, name, plan.changed)
    if whole is not None and plan.rows is None:
        out = whole
    else:
        out = {"wells": to_arrow(_selected(prep.wells, plan, "wells")),
               "well_factors": to_arrow(_selected(prep.factors, plan, "factors")),
               "readings": to_arrow(_selected(prep.readings, plan, "readings"))}
    for table in ("wells", "well_factors", "readings"):
        bulk_insert(con, table, Tagged(out[table], **tag))
    fps = plan.fingerprints if plan.fingerprints is not None else incoming.fingerprints()
    plates = _selected(prep.plates, plan, "plates").merge(fps[["plate", "fp"]], on="plate", how="left").rename(
        columns={"fp": "fingerprint"})
    bulk_insert(con, "plates", Tagged(to_arrow(plates), **tag))
    record_import(con, import_id, name, now, source, plan.status, added=plan.added, replaced=plan.changed,
                  unchanged=plan.unchanged, catalysts_added=plan.catalysts_added,
                  catalysts_replaced=plan.catalysts_changed, manifest_replaced=plan.manifest_replaced,
                  n_wells=plan.n_wells, n_readings=plan.n_readings, message=plan.message(), files=files)
    return import_id
