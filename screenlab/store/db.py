"""The DuckDB store: one file holding every imported campaign, with its import history.

:class:`Store` is the public face; the work is split by responsibility:

=====================================  ==========================================================
:mod:`screenlab.store.connection`      open (retry on a busy lock), migrations, fingerprint upgrade
:mod:`screenlab.store.storage`         storage form: column kinds, dtypes back, Arrow, the store's
                                       own check of frames built in code
:mod:`screenlab.store.fingerprints`    per-plate fingerprints (what tells changed from unchanged)
:mod:`screenlab.store.planner`         the pure import plan: what an import writes, or why it is
                                       refused, and its report
:mod:`screenlab.store.writer`          the plan written in one transaction
:mod:`screenlab.store.queries`         every SQL statement
=====================================  ==========================================================

Design
------
* **Short-lived connections.** Every public method opens a connection, does its work and closes
  it, so the app (reading) and the CLI (writing) can share one file (see
  :mod:`screenlab.store.connection`).
* **Versioned rows, nothing lost.** A campaign header (manifest, catalyst set, factor names) and
  each plate (plate row, layout, factor values, readings) are versions written by one import. A
  replaced version is marked ``superseded_by`` the replacing import and stays in the file; the
  ``current_*`` views (and every method here) see only current versions. Raw imported values are
  never updated.
* **All or nothing.** One import is one explicit transaction (``begin``/``commit``, ``rollback`` on
  any error): DuckDB 2.0 auto-commits each statement of a multi-statement string, so no step
  relies on that.
* **Import speed.** While the data is put in storage form, a worker thread opens the store; while
  the rows are written, another computes the fingerprints (DuckDB runs without the GIL). An import
  of at least :data:`~screenlab.store.writer.CHECKPOINT_READINGS` readings commits straight into
  the file.
"""
from __future__ import annotations

import json
from concurrent.futures import Future, ThreadPoolExecutor
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

import duckdb
import pandas as pd
import pyarrow as pa

from screenlab.errors import NotFoundError, ScreenlabError
from screenlab.model import CampaignData
from screenlab.store import connection
from screenlab.store import queries as Q
from screenlab.store.storage import (CATALYST_COLS, WELL_COLS, check_campaign_frames, manifest_from_json, prepare,
                                     restore, storage_form, to_arrow)

if TYPE_CHECKING:  # imported where an import runs (a command that only reads never loads them)
    from screenlab.store.planner import ImportReport, Incoming, Stored


class Store:
    """A ScreenLab store file. Cheap to create; every method opens its own short connection.

    ``read_only=True`` never writes (and needs an existing, up-to-date store file).
    """

    def __init__(self, path, read_only: bool = False, *, busy_timeout_s: float | None = None):
        self.path = Path(path)
        self.read_only = bool(read_only)
        self.busy_timeout_s = connection.busy_timeout(busy_timeout_s)
        self._schema_ok = False

    def __repr__(self) -> str:
        return f"Store({str(self.path)!r}, read_only={self.read_only})"

    def close(self) -> None:
        """Nothing to release: every method opens and closes its own connection (kept for callers that
        close what they open)."""

    # -- connections ---------------------------------------------------------------------------

    def _open(self) -> duckdb.DuckDBPyConnection:
        return connection.open_connection(self.path, self.read_only, self.busy_timeout_s)

    def _check_schema(self, con) -> None:
        connection.apply_migrations(con, self.path, self.read_only)
        if not self.read_only:
            connection.refresh_fingerprints(con)
        self._schema_ok = True

    @contextmanager
    def _connect(self, opened: Future | None = None, *, scratch: bool = False):
        """A connection with the schema checked (``opened``: one being opened by
        :meth:`_open_checked` in another thread; ``scratch``: its in-memory stand-in, whose schema
        says nothing of the file's), closed on exit."""
        con = self._open() if opened is None else opened.result()
        try:
            if not self._schema_ok and not scratch:
                self._check_schema(con)
            yield con
        except duckdb.Error as exc:
            raise ScreenlabError(f"store {self.path}: {exc}") from exc
        finally:
            con.close()

    def _open_checked(self, scratch: bool = False) -> duckdb.DuckDBPyConnection:
        """:meth:`_open` and the schema check (migrations, fingerprint upgrade) as :meth:`_connect`
        does them, for a thread that opens the store while another prepares the data. ``scratch``:
        an empty store in memory instead (a dry run against a store file that does not exist yet,
        which must not create it)."""
        con = duckdb.connect(":memory:", config=dict(connection.CONFIG)) if scratch else self._open()
        try:
            if scratch:                          # its schema says nothing of the file's: _schema_ok stays
                connection.apply_migrations(con, self.path, read_only=False)
            elif not self._schema_ok:
                self._check_schema(con)
        except duckdb.Error as exc:
            con.close()
            raise ScreenlabError(f"store {self.path}: {exc}") from exc
        except BaseException:
            con.close()
            raise
        return con

    @staticmethod
    def migrations() -> list[tuple[int, str, str]]:
        """The shipped migrations as ``(version, name, sql)``, in order."""
        return connection.migrations()

    # -- small reads ---------------------------------------------------------------------------

    def metadata(self) -> dict[str, str]:
        """The metadata table (schema_version, duckdb_version, storage_version, generation, ...)."""
        with self._connect() as con:
            return dict(con.execute(Q.ALL_META).fetchall())

    def schema_versions(self) -> list[int]:
        with self._connect() as con:
            return [r[0] for r in con.execute(Q.APPLIED_VERSIONS).fetchall()]

    def loaded_extensions(self) -> list[str]:
        """Extensions loaded in a store connection (should be built-ins only)."""
        with self._connect() as con:
            return [r[0] for r in con.execute(Q.LOADED_EXTENSIONS).fetchall()]

    def data_version(self) -> str:
        """A token that changes on every write (for caches): the store's write generation."""
        if not self.path.exists():
            return "empty"
        with self._connect() as con:
            rows = con.execute(Q.GET_META, ["generation"]).fetchall()
        return f"g{rows[0][0] if rows else 0}"

    def campaign_names(self) -> list[str]:
        if self.read_only and not self.path.exists():
            return []
        with self._connect() as con:
            return [r[0] for r in con.execute(Q.CAMPAIGN_NAMES).fetchall()]

    def campaigns(self) -> pd.DataFrame:
        """One row per campaign (current data only): ``campaign, description, readout_kind, parent,
        parent_decision, plates, wells, readings, catalysts, analytes, imported_at, updated_at, imports``
        (times UTC; ``parent`` / ``parent_decision``: the round link of the manifest, else missing)."""
        with self._connect() as con:
            frame = con.execute(Q.CAMPAIGNS_SUMMARY).df()
        for c in ("plates", "wells", "readings", "catalysts", "analytes", "imports"):
            frame[c] = frame[c].astype("int64")
        frame["parent_decision"] = frame["parent_decision"].astype("Int64")
        return frame

    def imports(self, campaign: str | None = None) -> pd.DataFrame:
        """The import history: ``import_id, campaign, imported_at, source, status, plates_added,
        plates_replaced, plates_unchanged, catalysts_added, catalysts_replaced, manifest_replaced,
        n_wells, n_readings, files, message`` (list columns joined with ", "; imported_at UTC)."""
        with self._connect() as con:
            frame = con.execute(Q.IMPORTS_ALL, [campaign, campaign]).df()
        for c in ("plates_added", "plates_replaced", "plates_unchanged", "catalysts_added", "catalysts_replaced"):
            frame[c] = frame[c].map(lambda v: ", ".join(v) if v is not None and len(v) else "").astype("str")
        return frame

    def import_files(self, campaign: str | None = None) -> pd.DataFrame:
        """Files behind each import: ``import_id, campaign, name, sha256, n_rows``."""
        with self._connect() as con:
            return con.execute(Q.IMPORT_FILES, [campaign, campaign]).df()

    def table_counts(self) -> dict[str, int]:
        """Row counts of every data table, current and superseded (diagnostics, tests)."""
        names = ("campaigns", "catalysts", "plates", "wells", "well_factors", "readings", "imports", "import_files",
                 "decisions", "decision_catalysts")
        with self._connect() as con:
            return dict(zip(names, (int(v) for v in con.execute(Q.TABLE_COUNTS).fetchall()[0])))

    # -- load ----------------------------------------------------------------------------------

    def load_campaign(self, name: str) -> CampaignData:
        """The current data of one campaign, with the columns and dtypes it was imported with."""
        with self._connect() as con:
            head = con.execute(Q.CURRENT_HEADER, [name]).df()
            if head.empty:
                from screenlab.store.planner import names_text

                known = [r[0] for r in con.execute(Q.CAMPAIGN_NAMES).fetchall()]
                hint = f"; stored campaigns: {names_text(known)}" if known else "; the store is empty"
                raise NotFoundError(f"no campaign {name!r} in store {self.path}{hint}")
            h = head.iloc[0]
            schema = json.loads(h["frame_schema_json"])
            catalysts = con.execute(Q.CURRENT_CATALYSTS, [name]).df()
            plates = con.execute(Q.CURRENT_PLATES, [name]).df()
            wells = con.execute(Q.CURRENT_WELLS, [name]).df()
            # the named factors' values, when the wells were imported with any (else none are read)
            with_factors = any(c not in WELL_COLS for c, _ in schema["wells"])
            factors = con.execute(Q.CURRENT_FACTORS, [name]).df() if with_factors else None
            readings = con.execute(Q.CURRENT_READINGS, [name]).df()
        manifest = manifest_from_json(h["manifest_json"])
        factor_names = tuple(h["factor_names"]) if h["factor_names"] is not None else ()
        if factors is not None and not factors.empty:
            wide = factors.pivot(index=["import_id", "seq"], columns="factor", values="value").reset_index()
            wide.columns.name = None
            wells = wells.merge(wide, on=["import_id", "seq"], how="left", sort=False)
        wells = wells.drop(columns=["import_id", "seq"])
        return CampaignData(
            manifest=manifest,
            catalysts=restore(catalysts, schema["catalysts"]),
            plates=restore(plates, schema["plates"]),
            wells=restore(wells, schema["wells"]),
            readings=restore(readings, schema["readings"]),
            factor_names=factor_names,
        )

    # -- import --------------------------------------------------------------------------------

    def import_campaign(self, result_or_data, files=(), *, replace: bool = False, dry_run: bool = False,
                        source: str | None = None) -> ImportReport:
        """Import one campaign, all or nothing (the rules: :mod:`screenlab.store.planner`).

        ``result_or_data`` is a reader result (with ``.data``, ``.files``, ``.source``) or a
        :class:`CampaignData`. Raises :class:`~screenlab.store.planner.ImportRefusedError` when
        stored plates, catalysts or the manifest would change and ``replace`` is false (also on a
        dry run), and :class:`~screenlab.errors.ValidationError` for frames that break the contract.
        """
        from screenlab.store import fingerprints
        from screenlab.store.planner import STATUSES, Incoming

        if isinstance(result_or_data, CampaignData):
            data = result_or_data
        elif hasattr(result_or_data, "data") and isinstance(result_or_data.data, CampaignData):
            data = result_or_data.data
            files = files or tuple(getattr(result_or_data, "files", ()) or ())
            source = source if source is not None else str(getattr(result_or_data, "source", "") or "")
        else:
            raise TypeError("import_campaign expects a CampaignData or a reader result with .data")
        if self.read_only:
            raise ScreenlabError(f"store {self.path} is open read-only; cannot import")
        check_campaign_frames(data)  # frames that break the contract are refused before the store is touched
        name = data.manifest.name
        # Work that overlaps (DuckDB runs without the GIL): a worker opens the store (schema check)
        # while this thread puts the data in storage form; then a worker computes the fingerprints
        # while this thread writes, for a campaign with nothing stored yet (its plates are all new,
        # whatever their fingerprints), the wells and readings. This thread hands DuckDB only
        # Arrow tables made before the fingerprint worker starts, which alone reads the prepared
        # frames meanwhile.
        with ThreadPoolExecutor(max_workers=2, thread_name_prefix="screenlab-import") as pool:
            scratch = dry_run and not self.path.exists()     # a dry run creates no store file
            opened = pool.submit(self._open_checked, scratch)
            try:
                prep = prepare(data, validated=True)
                whole = {"wells": to_arrow(prep.wells), "well_factors": to_arrow(prep.factors),
                         "readings": to_arrow(prep.readings)}
            except BaseException:
                if opened.exception() is None:
                    opened.result().close()
                raise
            pending = pool.submit(fingerprints.of_prepared, prep)
            incoming = Incoming(campaign=name, manifest_fingerprint=fingerprints.manifest_fingerprint(data.manifest),
                                factor_names=tuple(data.factor_names), prepared=prep,
                                fingerprints=lambda: fingerprints.with_text(pending.result()))
            try:
                report = self._import_connected(data, incoming, files, replace=replace, dry_run=dry_run,
                                                source=source or "", whole=whole, opened=opened,
                                                scratch=scratch)
            except BaseException:  # e.g. interrupted while waiting for the store: close it (closing twice is harmless)
                if opened.exception() is None:
                    opened.result().close()
                raise
        assert report.campaign == name and report.status in STATUSES
        return report

    def _import_connected(self, data: CampaignData, incoming: Incoming, files, *, replace: bool, dry_run: bool,
                          source: str, whole: dict[str, pa.Table], opened: Future,
                          scratch: bool = False) -> ImportReport:
        from screenlab.store import writer
        from screenlab.store.planner import plan_import

        with self._connect(opened, scratch=scratch) as con:
            con.begin()
            try:
                from screenlab.store.decisions import check_round_link

                check_round_link(con, data.manifest)  # a [campaign] decision the store holds for another campaign
                plan = plan_import(self._stored(con, incoming.campaign), incoming, replace=replace)
                if dry_run or not plan.writes:
                    con.rollback()
                    return plan.report(dry_run=dry_run)
                import_id = writer.write_import(con, plan, incoming, data.manifest, files=files, source=source,
                                                whole=whole)
                writer.commit(con, plan.n_readings)
            except BaseException:
                con.rollback()
                raise
        return plan.report(import_id=import_id)

    @staticmethod
    def _stored(con, name: str) -> Stored:
        """What the store holds for campaign ``name`` (read in the import's transaction)."""
        from screenlab.store.planner import Stored

        head = con.execute(Q.CURRENT_HEADER, [name]).df()
        if head.empty:
            return Stored()
        h = head.iloc[0]
        fps = con.execute(Q.CURRENT_PLATE_FINGERPRINTS, [name]).df()
        return Stored(manifest_fingerprint=h["fingerprint"],
                      factor_names=tuple(h["factor_names"]) if h["factor_names"] is not None else (),
                      frame_schema=json.loads(h["frame_schema_json"]),
                      catalysts=storage_form(con.execute(Q.CURRENT_CATALYSTS, [name]).df(), CATALYST_COLS),
                      plate_fingerprints=dict(zip(fps["plate"], fps["fingerprint"])))
