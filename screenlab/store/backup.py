"""Backups of a store: a consistent DuckDB copy, a Parquet file per table and a manifest.

A backup is a folder::

    <out>/store.duckdb          the whole database (tables, views), copied by DuckDB itself
    <out>/tables/<table>.parquet one file per table (every version of every row), for any tool
    <out>/manifest.json         what is in it: tables, row counts, sha256 and size of every file,
                                schema version, screenlab and DuckDB versions, source, time (UTC)

How it stays consistent
-----------------------
:func:`backup_store` opens the store read-write (so no other process can write while it runs;
a busy store is retried like any other open, then refused with "in use"), runs ``CHECKPOINT``
so the write-ahead log is merged into the file, then lets DuckDB copy the database into a fresh
file (``ATTACH`` + ``COPY FROM DATABASE``) and write every table with ``COPY ... TO ... (FORMAT
parquet)``, all on that one connection. No byte of the live file is copied by the file system, so
a copy can never be torn. The row counts of the copy and of every Parquet file are checked
against the source before the manifest is written. Everything is written into a hidden temporary
folder next to ``out`` and renamed into place at the end, so an interrupted backup leaves no
half-written backup folder under the name asked for.

:func:`restore_store` checks the manifest and the sha256 of every file first, refuses to
overwrite an existing store unless ``force``, opens the copy and checks its row counts, and only
then moves it into place. With ``force`` the replaced store is not deleted: it is first
checkpointed (so its ``.wal`` is merged) and kept beside the store as
``<store>.replaced-<UTC time>``.
"""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

import duckdb

from screenlab.errors import NotFoundError, ScreenlabError, StoreBusyError
from screenlab.store import connection

BACKUP_FORMAT = "screenlab-store-backup"
BACKUP_FORMAT_VERSION = 1
MANIFEST_NAME = "manifest.json"
DATABASE_NAME = "store.duckdb"
TABLES_DIR = "tables"


class BackupError(ScreenlabError):
    """A backup could not be written, or a backup folder is damaged or incomplete."""


@dataclass(frozen=True)
class BackupReport:
    """What :func:`backup_store` wrote. ``tables`` maps table name -> row count."""

    store: Path
    out: Path
    tables: dict
    schema_version: int | None
    total_bytes: int
    manifest: dict

    @property
    def message(self) -> str:
        rows = sum(self.tables.values())
        return (f"backup of {self.store} written to {self.out}: {len(self.tables)} tables, {rows:,} rows, "
                f"schema version {self.schema_version}, {self.total_bytes / 2**20:.1f} MB")


@dataclass(frozen=True)
class RestoreReport:
    """What :func:`restore_store` did. ``replaced`` is where the previous store was kept (or None)."""

    store: Path
    backup: Path
    tables: dict
    schema_version: int | None
    replaced: Path | None

    @property
    def message(self) -> str:
        rows = sum(self.tables.values())
        text = (f"restored {self.backup} into {self.store}: {len(self.tables)} tables, {rows:,} rows, "
                f"schema version {self.schema_version}")
        if self.replaced is not None:
            text += f"; the previous store was kept as {self.replaced}"
        return text


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------

def _ident(name: str) -> str:
    """A quoted SQL identifier."""
    return '"' + str(name).replace('"', '""') + '"'


def _literal(text: str) -> str:
    """A quoted SQL string literal (file paths in ATTACH / COPY, which take no parameters)."""
    return "'" + str(text).replace("'", "''") + "'"


def sha256_file(path: Path, chunk: int = 1 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while True:
            block = fh.read(chunk)
            if not block:
                break
            h.update(block)
    return h.hexdigest()


def _wal(path: Path) -> Path:
    return Path(str(path) + ".wal")


def _default_mode(directory: bool) -> int:
    """The permissions a plain mkdir / open would give (mkdtemp / mkstemp use 0700 / 0600)."""
    mask = os.umask(0)
    os.umask(mask)
    return (0o777 if directory else 0o666) & ~mask


def _open_rw(path: Path, busy_timeout_s: float | None) -> duckdb.DuckDBPyConnection:
    """A read-write connection with the store's busy retry (and its clear "in use" message)."""
    from screenlab.store.connection import busy_timeout, open_connection

    return open_connection(Path(path), False, busy_timeout(busy_timeout_s))


def _schema_version(con, catalog: str = "") -> int | None:
    prefix = f"{_ident(catalog)}.main." if catalog else ""
    try:
        rows = con.execute(f"SELECT max(version) FROM {prefix}schema_migrations").fetchall()
    except duckdb.Error:
        return None
    return None if not rows or rows[0][0] is None else int(rows[0][0])


def _base_tables(con, catalog: str) -> list[str]:
    rows = con.execute("SELECT table_name FROM duckdb_tables() WHERE database_name = ? AND schema_name = 'main' "
                       "AND NOT temporary ORDER BY table_name", [catalog]).fetchall()
    return [r[0] for r in rows]


def _count(con, catalog: str, table: str) -> int:
    return int(con.execute(f"SELECT count(*) FROM {_ident(catalog)}.main.{_ident(table)}").fetchall()[0][0])


# --------------------------------------------------------------------------------------------
# backup
# --------------------------------------------------------------------------------------------

def backup_store(store_path, out, *, busy_timeout_s: float | None = None) -> BackupReport:
    """Write a consistent backup of the store at ``store_path`` into the new folder ``out``.

    ``out`` must not exist yet (an existing empty folder is accepted). Raises
    :class:`~screenlab.errors.NotFoundError` when there is no store,
    :class:`~screenlab.errors.StoreBusyError` when another process holds it past the busy timeout,
    :class:`BackupError` for anything else.
    """
    from screenlab import __version__

    store_path = Path(store_path)
    out = Path(out)
    if not store_path.is_file():
        raise NotFoundError(f"no store at {store_path}")
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise BackupError(f"{out} already exists; give a new folder for the backup")
    if not out.parent.exists():
        raise BackupError(f"cannot write backup {out}: folder {out.parent} does not exist")

    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        os.chmod(tmp, _default_mode(True))
        (tmp / TABLES_DIR).mkdir()
        db_copy = tmp / DATABASE_NAME
        con = _open_rw(store_path, busy_timeout_s)
        try:
            src = con.execute("SELECT current_database()").fetchall()[0][0]
            con.execute("CHECKPOINT")
            tables = _base_tables(con, src)
            counts = {t: _count(con, src, t) for t in tables}
            schema_version = _schema_version(con)
            meta = {}
            if "metadata" in tables:
                meta = dict(con.execute("SELECT key, value FROM metadata").fetchall())
            lib = con.execute("SELECT library_version FROM pragma_version()").fetchall()[0][0]
            con.execute(f"ATTACH {_literal(db_copy)} AS screenlab_backup_copy")
            try:
                con.execute(f"COPY FROM DATABASE {_ident(src)} TO screenlab_backup_copy")
                copied = {t: _count(con, "screenlab_backup_copy", t)
                          for t in _base_tables(con, "screenlab_backup_copy")}
                con.execute("CHECKPOINT screenlab_backup_copy")
            finally:
                con.execute("DETACH screenlab_backup_copy")
            if copied != counts:
                raise BackupError(f"the database copy does not match the store (tables/rows {copied} vs {counts})")
            for t in tables:  # a handful of tables, one COPY each
                target = tmp / TABLES_DIR / f"{t}.parquet"
                con.execute(f"COPY (SELECT * FROM {_ident(src)}.main.{_ident(t)}) TO {_literal(target)} "
                            "(FORMAT parquet, COMPRESSION zstd)")
                n = int(con.execute(f"SELECT count(*) FROM read_parquet({_literal(target)})").fetchall()[0][0])
                if n != counts[t]:
                    raise BackupError(f"Parquet export of table {t} holds {n} rows, the store {counts[t]}")
        except duckdb.Error as exc:
            raise BackupError(f"backup of {store_path} failed: {exc}") from exc
        finally:
            con.close()
        if _wal(db_copy).exists():  # pragma: no cover - CHECKPOINT + DETACH leave none
            raise BackupError("the database copy still has a write-ahead log after its checkpoint")

        files = {DATABASE_NAME: {"sha256": sha256_file(db_copy), "bytes": db_copy.stat().st_size}}
        for t in tables:
            rel = f"{TABLES_DIR}/{t}.parquet"
            files[rel] = {"sha256": sha256_file(tmp / rel), "bytes": (tmp / rel).stat().st_size}
        manifest = {
            "format": BACKUP_FORMAT,
            "format_version": BACKUP_FORMAT_VERSION,
            "created_at": datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "source": str(store_path.resolve()),
            "schema_version": schema_version,
            "screenlab_version": __version__,
            "duckdb_version": str(lib),
            "store_metadata": meta,
            "database": DATABASE_NAME,
            "tables": {t: {"rows": counts[t], "file": f"{TABLES_DIR}/{t}.parquet"} for t in tables},
            "files": files,
        }
        (tmp / MANIFEST_NAME).write_text(json.dumps(manifest, indent=1, sort_keys=True) + "\n", encoding="utf-8")
        if out.exists():
            out.rmdir()  # the empty folder the caller gave
        os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    total = sum(f["bytes"] for f in files.values())
    return BackupReport(store=store_path, out=out, tables=counts, schema_version=schema_version,
                        total_bytes=total, manifest=manifest)


# --------------------------------------------------------------------------------------------
# checking and restoring
# --------------------------------------------------------------------------------------------

def read_manifest(backup) -> dict:
    """The parsed manifest of a backup folder, its structure checked (raises :class:`BackupError`)."""
    backup = Path(backup)
    path = backup / MANIFEST_NAME
    if not backup.is_dir():
        raise BackupError(f"{backup} is not a backup folder (expected a folder holding {MANIFEST_NAME})")
    if not path.is_file():
        raise BackupError(f"{backup} has no {MANIFEST_NAME}; it is not a complete screenlab backup")
    try:
        m = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeError, json.JSONDecodeError) as exc:
        raise BackupError(f"{path} is not readable JSON ({exc})") from None
    if not isinstance(m, dict) or m.get("format") != BACKUP_FORMAT:
        raise BackupError(f"{path} is not a screenlab backup manifest (no \"format\": \"{BACKUP_FORMAT}\")")
    if not isinstance(m.get("format_version"), int) or m["format_version"] > BACKUP_FORMAT_VERSION:
        raise BackupError(f"{path}: backup format version {m.get('format_version')!r} is not one this screenlab "
                          f"reads (up to {BACKUP_FORMAT_VERSION}); upgrade screenlab")
    files, tables = m.get("files"), m.get("tables")
    if not isinstance(files, dict) or not isinstance(tables, dict) or m.get("database") not in files:
        raise BackupError(f"{path}: the manifest lacks its file list, table list or database entry")
    for rel, info in files.items():
        parts = Path(rel).parts
        if not isinstance(info, dict) or not isinstance(info.get("sha256"), str) or Path(rel).is_absolute() \
                or ".." in parts:
            raise BackupError(f"{path}: bad file entry {rel!r}")
    for t, info in tables.items():
        if not isinstance(info, dict) or not isinstance(info.get("rows"), int):
            raise BackupError(f"{path}: bad table entry {t!r}")
    return m


def verify_backup(backup) -> dict:
    """Check every file of a backup against the manifest's sha256; return the manifest.

    Raises :class:`BackupError` naming each missing or changed file.
    """
    backup = Path(backup)
    m = read_manifest(backup)
    bad = []
    for rel, info in sorted(m["files"].items()):  # a handful of files
        p = backup / rel
        if not p.is_file():
            bad.append(f"{rel} is missing")
        elif sha256_file(p) != info["sha256"]:
            bad.append(f"{rel} does not match its sha256 in the manifest (changed or damaged)")
    if bad:
        raise BackupError(f"backup {backup} failed its check; nothing was restored:\n  - " + "\n  - ".join(bad))
    return m


def restore_store(backup, store_path, *, force: bool = False, busy_timeout_s: float | None = None) -> RestoreReport:
    """Bring the backup folder ``backup`` back as the store at ``store_path``.

    Order: verify the manifest and every file's sha256; refuse an existing store unless
    ``force``; copy the database into a temporary file beside the store and check that every
    table holds the manifest's row count; then (``force``) checkpoint the old store and keep it as
    ``<store>.replaced-<UTC time>``; finally move the copy into place. Nothing at ``store_path``
    changes unless every check passed.
    """
    backup, store_path = Path(backup), Path(store_path)
    m = verify_backup(backup)
    wal = _wal(store_path)
    exists = store_path.exists() or wal.exists()
    if store_path.is_dir():
        raise BackupError(f"--store {store_path} is a folder; give the path of a .duckdb file")
    if exists and not force:
        raise BackupError(f"a store already exists at {store_path}; nothing was restored. Restore to a new path, "
                          f"or give --force to replace it (the current store is then kept as "
                          f"{store_path.name}.replaced-<time>)")
    if not store_path.parent.exists():
        raise BackupError(f"cannot restore to {store_path}: folder {store_path.parent} does not exist")

    fd, tmp_name = tempfile.mkstemp(prefix=f".{store_path.name}.restore-", suffix=".duckdb", dir=store_path.parent)
    os.close(fd)
    tmp = Path(tmp_name)
    replaced = None
    try:
        os.chmod(tmp, _default_mode(False))
        shutil.copyfile(backup / m["database"], tmp)
        try:
            con = duckdb.connect(str(tmp), read_only=False, config=dict(connection.CONFIG))
        except duckdb.Error as exc:
            raise BackupError(f"{backup / m['database']} cannot be opened as a DuckDB database: {exc}") from exc
        try:
            cat = con.execute("SELECT current_database()").fetchall()[0][0]
            have = set(_base_tables(con, cat))
            wrong = []
            for t, info in sorted(m["tables"].items()):
                n = _count(con, cat, t) if t in have else None
                if n != info["rows"]:
                    wrong.append(f"table {t}: {'missing' if n is None else f'{n} rows'}, manifest says {info['rows']}")
            schema_version = _schema_version(con)
            con.execute("CHECKPOINT")
        finally:
            con.close()
        if wrong:
            raise BackupError(f"backup {backup}: the database does not match its manifest; nothing was restored:\n"
                              "  - " + "\n  - ".join(wrong))
        if exists:
            replaced = _set_aside(store_path, busy_timeout_s)
        os.replace(tmp, store_path)
        if _wal(tmp).exists():  # pragma: no cover - the checkpoint above leaves none
            os.replace(_wal(tmp), _wal(store_path))
    except BaseException:
        tmp.unlink(missing_ok=True)
        _wal(tmp).unlink(missing_ok=True)
        raise
    return RestoreReport(store=store_path, backup=backup, tables={t: i["rows"] for t, i in m["tables"].items()},
                         schema_version=schema_version, replaced=replaced)


def _set_aside(store_path: Path, busy_timeout_s: float | None) -> Path:
    """Merge the old store's WAL (refusing a store another process holds) and move it aside."""
    wal = _wal(store_path)
    if store_path.exists():
        try:
            con = _open_rw(store_path, busy_timeout_s)
        except StoreBusyError:
            raise
        except ScreenlabError:
            con = None  # not a readable store: --force replaces it as it is (kept aside below)
        if con is not None:
            try:
                con.execute("CHECKPOINT")
            except duckdb.Error:
                pass
            finally:
                con.close()
    stamp = datetime.now(timezone.utc).strftime("%Y%m%dT%H%M%S%fZ")
    aside = store_path.with_name(f"{store_path.name}.replaced-{stamp}")
    if store_path.exists():
        os.replace(store_path, aside)
    if wal.exists():
        os.replace(wal, Path(str(aside) + ".wal"))
    return aside
