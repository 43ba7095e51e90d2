"""``screenlab add-readings --campaign NAME PATH...``: readings onto a stored campaign's plates
that have none yet (a planned round completed, or plates run later).

PATH: a long readings table, a sample-named table, plate-grid files (``<plate>.csv`` /
``<plate>.xlsx``), a workbook with one sheet per plate, a folder of such files, a campaign folder
(its readings.csv / readings.xlsx / readings/ folder) or a .zip of one. All files are checked
together with the checks of ``screenlab ingest``; any problem writes nothing. Exit 0 done,
1 data errors or refused, 2 usage errors.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

from screenlab.cli.common import add_store_option, print_problems, resolve_store_path


def register(sub) -> None:
    p = sub.add_parser(
        "add-readings", help="add readings to a stored campaign's plates that have none yet",
        description="Complete a planned campaign (imported without readings, as the next-round export writes) "
        "or add readings for plates that have none yet. PATH may be a long readings table, a sample-named "
        "table, plate-grid files or a folder of them, a workbook with one sheet per plate, a campaign folder "
        "or a .zip. One transaction, the checks of an import; recorded in the import history.",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("paths", metavar="PATH", nargs="+", help="readings file, folder or .zip")
    p.add_argument("--campaign", required=True, metavar="NAME", help="the stored campaign")
    p.add_argument("--dry-run", action="store_true", help="check and report what would happen; write nothing")
    add_store_option(p)
    p.set_defaults(func=run_add_readings)


def _err(text: str) -> None:
    print(text, file=sys.stderr)


def run_add_readings(args) -> int:
    from screenlab.errors import NotFoundError, UsageError, ValidationError
    from screenlab.ingest.addreadings import read_new_readings, readings_files
    from screenlab.store import ImportRefusedError, Store, add_readings

    store_path = resolve_store_path(args.store)
    if not Path(store_path).is_file():
        raise UsageError(f"store {store_path} does not exist; import the planned campaign first with "
                         "'screenlab ingest FOLDER'")
    for path in args.paths:
        if not Path(path).exists():
            raise UsageError(f"{path} does not exist (give readings files, a folder of them or a .zip)")
    try:
        files = readings_files(args.paths)
    except ValidationError as exc:
        print_problems("readings", exc.problems)
        return 1
    store = Store(store_path)
    for attempt in range(3):  # the store may change between the check and the write: check again
        version = store.data_version()
        names = store.campaign_names()
        if args.campaign not in names:
            raise NotFoundError(f"campaign {args.campaign!r} is not in {store_path} (stored: "
                                f"{', '.join(names) if names else 'none'})")
        data = store.load_campaign(args.campaign)
        if store.data_version() != version:
            continue
        new = read_new_readings(files, data, source=", ".join(map(str, args.paths)))
        for note in new.notes:
            print(f"note: {note}")
        if new.problems:
            print_problems(f"{args.campaign}", new.problems)
            return 1
        try:
            report = add_readings(store, data, new, data_version=version, dry_run=args.dry_run,
                                  source=", ".join(map(str, args.paths)))
        except ImportRefusedError as exc:
            if "the store changed" in str(exc) and attempt < 2:
                continue
            _err(f"refused: {exc}")
            return 1
        print(report.message)
        print(_summary(new))
        return 0
    _err("the store kept changing while the readings were checked; nothing was written")
    return 1


def _summary(new) -> str:
    """Per plate: wells with readings, expected but missing, values left out (plain text)."""
    a = new.arrival
    if a.empty:
        return ""
    got = a[a["plate"].astype(str).isin(new.plates)]
    rows = []
    for plate, g in got.groupby("plate", sort=False):  # one line per plate
        st = g["status"].value_counts()
        rows.append(f"  {plate}: {int(st.get('read', 0))} wells with readings, {int(st.get('missing', 0))} expected "
                    f"but missing, {int(st.get('extra', 0))} positions with values not imported (empty in the layout)")
    return "\n".join(rows)


