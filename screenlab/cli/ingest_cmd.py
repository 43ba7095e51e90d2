"""``screenlab ingest PATH [PATH ...]`` (import campaigns into the store) and ``screenlab campaigns``
(list them).

ingest: each PATH is a campaign folder, a folder of campaign folders / .zip files, or one .zip. Each
campaign is imported all or nothing; the command reports per campaign what happened, or every
problem found (file, row, column, value, what was expected). Exit 0 when everything was imported
or there was nothing to do, 1 when any campaign had data errors or was refused, 2 for usage errors.
"""
from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

from screenlab.cli.common import add_format_option, add_store_option, emit, print_problems, resolve_store_path


def register(sub) -> None:
    p = sub.add_parser(
        "ingest", help="import campaign folders (or .zip files) into the store",
        description="Import campaign folders, folders of campaign folders, or .zip files into the store. "
        "Each campaign is imported all or nothing. Importing unchanged data again adds nothing; new plates "
        "of a stored campaign are added; changed plates, catalysts or manifest are refused unless --replace.",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("paths", metavar="PATH", nargs="+", help="campaign folder, folder of campaigns, or .zip")
    p.add_argument("--replace", action="store_true",
                   help="store changed plates / catalysts / manifest as the new current version "
                   "(the old version stays in the store as history)")
    p.add_argument("--dry-run", action="store_true", help="check and report what would happen; write nothing")
    add_store_option(p)
    p.set_defaults(func=run_ingest)

    c = sub.add_parser("campaigns", help="list the campaigns in the store",
                       description="One row per stored campaign: plates, wells, readings, catalysts, import times (UTC).")
    add_format_option(c)
    add_store_option(c)
    c.set_defaults(func=run_campaigns)


def _err(text: str) -> None:
    print(text, file=sys.stderr)


def run_ingest(args) -> int:
    from screenlab.errors import UsageError, ValidationError
    from screenlab.errors import DataQualityWarning
    from screenlab.ingest import find_campaigns, read_campaign
    from screenlab.store import ImportRefusedError, Store

    paths = [Path(p) for p in args.paths]
    for path in paths:
        if not path.exists():
            raise UsageError(f"{path} does not exist (give a campaign folder, a folder of campaigns or a .zip)")
    store_path = resolve_store_path(args.store)
    if store_path.is_dir():
        raise UsageError(f"--store {store_path} is a folder; give the path of a .duckdb file")
    if not store_path.parent.exists():
        raise UsageError(f"--store {store_path}: folder {store_path.parent} does not exist")
    done = {"ok": 0, "failed": 0}
    sources = []
    for path in paths:                               # each PATH in the order given
        try:
            sources.extend(find_campaigns(path))
        except ValidationError as exc:
            _print_problems(str(path), exc)
            done["failed"] += 1
    if not sources:
        return 1 if done["failed"] else 0
    store = Store(store_path)
    for src in sources:
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", DataQualityWarning)
                result = read_campaign(src)
        except ValidationError as exc:
            _print_problems(str(src), exc)
            done["failed"] += 1
            continue
        except (OSError, UnicodeError, ValueError, KeyError, TypeError) as exc:  # a file the reader choked on
            _err(f"{src}: could not be read ({type(exc).__name__}: {exc}); nothing was written")
            done["failed"] += 1
            continue
        for note in result.notes:
            print(f"{src}: note: {note}")
        try:
            report = store.import_campaign(result, replace=args.replace, dry_run=args.dry_run)
        except ImportRefusedError as exc:
            _err(f"{src}: refused: {exc}")
            done["failed"] += 1
            continue
        except ValidationError as exc:
            _print_problems(str(src), exc)
            done["failed"] += 1
            continue
        print(report.message)
        m = result.data.manifest
        if m.parent and report.status != "unchanged":  # the round link kept with the manifest
            print(f"{m.name}: next round of {m.parent}" + (f", decision {m.decision}" if m.decision else ""))
        done["ok"] += 1
    if done["ok"] + done["failed"] > 1:
        print(f"{done['ok'] + done['failed']} campaigns: {done['ok']} {'checked' if args.dry_run else 'done'}, "
              f"{done['failed']} with errors (nothing written for those)")
    return 1 if done["failed"] else 0


def _print_problems(label: str, exc) -> None:
    problems = list(getattr(exc, "problems", ()) or ())
    if not problems:
        _err(f"{label}: {exc}")
        return
    print_problems(label, problems)


def run_campaigns(args) -> int:
    from screenlab.store import Store

    frame = Store(resolve_store_path(args.store), read_only=True).campaigns()
    if not frame.empty:
        frame = frame.copy()
        fmt = "%Y-%m-%d %H:%M" if args.format == "table" else "%Y-%m-%dT%H:%M:%SZ"
        for c in ("imported_at", "updated_at"):  # stored in UTC
            frame[c] = frame[c].dt.strftime(fmt)
    emit(frame, args.format)
    return 0
