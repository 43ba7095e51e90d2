"""Connections to the store file: open with a retry on a busy lock, the schema migrations, and the
fingerprint upgrade of stores written by an older screenlab.

* **Short-lived connections.** DuckDB allows one read-write process *or* several read-only ones;
  when the file is locked, :func:`open_connection` retries with backoff for ``busy_timeout_s``
  (default :data:`DEFAULT_BUSY_TIMEOUT_S`, or ``$SCREENLAB_BUSY_TIMEOUT_S``) and then fails with
  :class:`~screenlab.errors.StoreBusyError` naming the other process.
* **Offline.** Connections never install or auto-load extensions (only the ones built into the
  wheel, :data:`BUILTIN_EXTENSIONS`).
* **Migrations** live in ``screenlab/store/migrations/NNN_name.sql`` and are applied in order,
  each in one transaction, recorded in ``schema_migrations(version, name, applied_at)``
  (:func:`apply_migrations`). A read-only connection to a store that needs one is refused.
"""
from __future__ import annotations

import os
import re
import time
import weakref
from importlib import resources
from pathlib import Path

import duckdb

from screenlab.errors import NotFoundError, ScreenlabError, StoreBusyError
from screenlab.store import queries as Q

#: default seconds to keep retrying a locked store file
DEFAULT_BUSY_TIMEOUT_S = 10.0
BUSY_TIMEOUT_ENV = "SCREENLAB_BUSY_TIMEOUT_S"
#: extensions compiled into the duckdb wheel; nothing else may load (offline machines)
BUILTIN_EXTENSIONS = frozenset({"core_functions", "icu", "json", "parquet"})

#: every DuckDB connection ScreenLab opens: no extension fetched or loaded behind its back
CONFIG = {"autoinstall_known_extensions": False, "autoload_known_extensions": False}
_LOCK_WORDS = ("could not set lock", "conflicting lock")
#: every connection :func:`open_connection` handed out that is still alive (closed ones drop out
#: when their last reference goes); the command line ends its process early only when it is empty
_LIVE: weakref.WeakSet = weakref.WeakSet()


def live_connections() -> int:
    """How many connections from :func:`open_connection` are still referenced."""
    return len(_LIVE)


def busy_timeout(value: float | None) -> float:
    """``value``, else ``$SCREENLAB_BUSY_TIMEOUT_S``, else the default (a bad variable is ignored)."""
    if value is None:
        env = os.environ.get(BUSY_TIMEOUT_ENV)
        try:
            value = float(env) if env else DEFAULT_BUSY_TIMEOUT_S
        except ValueError:
            value = DEFAULT_BUSY_TIMEOUT_S
    return float(value)


def open_connection(path: Path, read_only: bool, busy_timeout_s: float) -> duckdb.DuckDBPyConnection:
    """A DuckDB connection to ``path``, retried while another process holds the file's lock."""
    if read_only and not path.exists():
        raise NotFoundError(f"no store at {path} (import a campaign first: screenlab ingest FOLDER)")
    if not read_only and not path.parent.exists():
        raise ScreenlabError(f"cannot create store {path}: folder {path.parent} does not exist")
    deadline = time.monotonic() + busy_timeout_s
    delay = 0.05
    while True:
        try:
            con = duckdb.connect(str(path), read_only=read_only, config=dict(CONFIG))
            _LIVE.add(con)
            return con
        except duckdb.IOException as exc:
            text = str(exc)
            if not any(w in text.lower() for w in _LOCK_WORDS):
                raise ScreenlabError(f"cannot open store {path}: {text}") from exc
            if time.monotonic() + delay > deadline:
                m = re.search(r"PID (\d+)", text)
                pid = m.group(1) if m else "unknown"
                raise StoreBusyError(
                    f"store {path} is in use by another process (PID {pid}); gave up after "
                    f"{busy_timeout_s:g} s. Close the program holding it (or wait for its import "
                    f"to finish) and try again.") from exc
            time.sleep(delay)
            delay = min(delay * 2, 0.5)
        except duckdb.Error as exc:
            raise ScreenlabError(f"cannot open store {path}: {exc}") from exc


def migrations() -> list[tuple[int, str, str]]:
    """The shipped migrations as ``(version, name, sql)``, in order."""
    out = []
    for entry in resources.files("screenlab.store").joinpath("migrations").iterdir():
        m = re.match(r"^(\d+)_(.+)\.sql$", entry.name)
        if m:
            out.append((int(m.group(1)), m.group(2), entry.read_text(encoding="utf-8")))
    return sorted(out)


def _statements(sql: str) -> list[str]:
    lines = [ln.split("--", 1)[0] for ln in sql.splitlines()]
    return [s.strip() for s in "\n".join(lines).split(";") if s.strip()]


def apply_migrations(con, path: Path, read_only: bool) -> None:
    """Apply the shipped migrations the store lacks, each in one transaction (refused for a store
    newer than this screenlab, and on a read-only connection)."""
    shipped = migrations()
    latest = shipped[-1][0]
    try:
        applied = {r[0] for r in con.execute(Q.APPLIED_VERSIONS).fetchall()}
    except duckdb.CatalogException:   # no migrations table: a new (empty) store
        applied = set()
    if applied and max(applied) > latest:
        raise ScreenlabError(f"store {path} has schema version {max(applied)}, newer than this "
                             f"screenlab understands ({latest}); upgrade screenlab")
    pending = [m for m in shipped if m[0] not in applied]
    if pending and read_only:
        raise ScreenlabError(f"store {path} needs a schema upgrade (to version {latest}); "
                             f"open it once for writing (e.g. screenlab ingest) first")
    if not pending:
        return
    from screenlab import __version__
    from screenlab.store.fingerprints import FINGERPRINT_VERSION

    for version, name, sql in pending:
        con.begin()
        try:
            con.execute(Q.CREATE_MIGRATIONS)
            for stmt in _statements(sql):
                con.execute(stmt)
            con.execute(Q.RECORD_MIGRATION, [version, name])
            lib = con.execute(Q.LIBRARY_VERSION).fetchall()[0][0]
            storage = con.execute(Q.STORAGE_VERSION).fetchall()[0][0]
            meta = {"schema_version": str(version), "duckdb_version": str(lib), "storage_version": str(storage),
                    "screenlab_version": __version__,
                    "storage_note": f"written by DuckDB {lib} (storage {storage}); open it with "
                                    f"DuckDB 2.0 or newer; copy the .duckdb and .wal files together"}
            if not applied and not read_only:  # a new store: no plate has a fingerprint of an older kind
                meta["fingerprint_version"] = FINGERPRINT_VERSION
            con.execute(Q.UPSERT_META_MANY, [list(meta), list(meta.values())])
            con.commit()
        except BaseException:
            con.rollback()
            raise


def refresh_fingerprints(con) -> None:
    """Bring the plates' fingerprints to the current definition (one transaction).

    A store written by an older screenlab holds fingerprints of another definition; comparing
    them with new ones would call every re-imported plate "changed". They are recomputed from
    the stored rows (which are the stored form the fingerprints are defined on), for every
    plate version, current and superseded. Only the derived ``fingerprint`` column changes.
    """
    from screenlab.store.fingerprints import FINGERPRINT_VERSION, stored_versions

    rows = con.execute(Q.GET_META, ["fingerprint_version"]).fetchall()
    if rows and rows[0][0] == FINGERPRINT_VERSION:
        return
    con.begin()
    try:
        plates = con.execute(Q.ALL_PLATE_VERSIONS).df()
        if len(plates):
            frames = [con.execute(q).df() for q in (Q.ALL_WELL_VERSIONS, Q.ALL_FACTOR_VERSIONS,
                                                     Q.ALL_READING_VERSIONS)]
            con.register("incoming_fingerprints", stored_versions(plates, *frames))
            try:
                con.execute(Q.UPDATE_FINGERPRINTS)
            finally:
                con.unregister("incoming_fingerprints")
        con.execute(Q.UPSERT_META, ["fingerprint_version", FINGERPRINT_VERSION])
        con.commit()
    except BaseException:
        con.rollback()
        raise
