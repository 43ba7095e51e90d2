"""``screenlab backup`` (a consistent copy of the store, Parquet tables and a manifest) and
``screenlab restore`` (bring a backup back as a store).

Exit codes as every command: 0 done, 1 data errors (no store, store in use, damaged backup,
existing store without --force), 2 usage errors (an --out that already exists, a --from that does
not). See :mod:`screenlab.store.backup` for what a backup holds and how it is checked.
"""
from __future__ import annotations

import argparse
from pathlib import Path

from screenlab.cli.common import add_store_option, resolve_store_path


def register(sub) -> None:
    b = sub.add_parser(
        "backup", help="write a consistent backup of the store (DuckDB copy, Parquet tables, manifest)",
        description="Write a backup folder: store.duckdb (a copy made by DuckDB after a CHECKPOINT, never a "
        "torn file copy), tables/<table>.parquet for every table, and manifest.json (tables, row counts, "
        "sha256 of every file, schema and program versions). The store must not be written to by another "
        "process meanwhile; a busy store is retried, then refused.",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    add_store_option(b)
    b.add_argument("--out", metavar="PATH", required=True, help="new folder to write the backup into")
    b.set_defaults(func=run_backup)

    r = sub.add_parser(
        "restore", help="bring a backup folder back as a store",
        description="Check the backup's manifest and the sha256 of every file, check the row counts of its "
        "database, then put it in place as the store. An existing store is only replaced with --force, and is "
        "then kept beside it as <store>.replaced-<time>.")
    r.add_argument("--from", dest="backup", metavar="PATH", required=True, help="backup folder (from screenlab backup)")
    add_store_option(r)
    r.add_argument("--force", action="store_true", help="replace an existing store (the old one is kept aside)")
    r.set_defaults(func=run_restore)


def run_backup(args) -> int:
    from screenlab.errors import UsageError
    from screenlab.store.backup import backup_store

    store = resolve_store_path(args.store)
    out = Path(args.out)
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise UsageError(f"--out {out} already exists; give a new folder for the backup")
    if not out.parent.exists():
        raise UsageError(f"--out {out}: folder {out.parent} does not exist")
    report = backup_store(store, out)
    print(report.message)
    return 0


def run_restore(args) -> int:
    from screenlab.errors import UsageError
    from screenlab.store.backup import restore_store

    src = Path(args.backup)
    if not src.exists():
        raise UsageError(f"--from {src} does not exist (give a folder written by screenlab backup)")
    store = resolve_store_path(args.store)
    if store.is_dir():
        raise UsageError(f"--store {store} is a folder; give the path of a .duckdb file")
    report = restore_store(src, store, force=args.force)
    print(report.message)
    return 0
