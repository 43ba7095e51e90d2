"""Helpers shared by the sub-commands: the --store option and table/csv/json output."""
from __future__ import annotations

import argparse
import json
import math
import os
import sys
from pathlib import Path

DEFAULT_STORE = "screenlab.duckdb"
FORMATS = ("table", "csv", "json")


def add_store_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--store", metavar="PATH", default=None,
                   help=f"DuckDB store file (default: $SCREENLAB_STORE, else ./{DEFAULT_STORE})")


def add_format_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--format", choices=FORMATS, default="table", help="output format (default: table)")


def resolve_store_path(arg: str | None) -> Path:
    """--store PATH, else $SCREENLAB_STORE, else screenlab.duckdb in the current folder."""
    return Path(arg or os.environ.get("SCREENLAB_STORE") or DEFAULT_STORE)


def emit(frame, fmt: str, out=None) -> None:
    """Print a DataFrame as an aligned table, CSV or JSON records (NaN -> null)."""
    out = out or sys.stdout
    if fmt == "csv":
        from screenlab.export.safe import neutralise_frame

        neutralise_frame(frame).to_csv(out, index=False)
    elif fmt == "json":
        records = frame.to_dict(orient="records")
        clean = [{k: (None if isinstance(v, float) and not math.isfinite(v) else _plain(v)) for k, v in r.items()}
                 for r in records]
        json.dump(clean, out, indent=1, default=str)
        out.write("\n")
    else:
        if frame.empty:
            out.write("(no rows)\n")
            return
        out.write(_aligned(frame) + "\n")


def _plain(v):
    try:
        import numpy as np

        if isinstance(v, np.generic):
            return v.item()
    except ImportError:  # pragma: no cover
        pass
    if v is None:
        return None
    try:
        import pandas as pd

        if v is pd.NA or (not isinstance(v, str) and pd.isna(v)):
            return None
    except (TypeError, ValueError):
        pass
    return v


def _aligned(frame) -> str:
    """Fixed-width text, columns two spaces apart: text left-aligned, numbers right-aligned (floats
    to 4 significant digits), each header aligned as its column, a missing cell blank."""
    import pandas as pd

    columns = []
    for col in frame.columns:
        s = frame[col]
        is_text = not (pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s))
        if pd.api.types.is_float_dtype(s):
            text = ["" if v != v else f"{v:.4g}" for v in s.to_numpy(dtype=float).tolist()]
        else:
            text = _cell_texts(s)
        cells = [str(col), *text]
        width = max(len(t) for t in cells)
        columns.append([t.ljust(width) if is_text else t.rjust(width) for t in cells])
    return "\n".join("  ".join(row).rstrip() for row in zip(*columns))


def _cell_texts(s) -> list[str]:
    """The cells of the column ``s`` as ``str`` gives them, a missing cell as ''."""
    missing = s.isna().to_numpy(dtype=bool)
    return ["" if m else str(v) for v, m in zip(s.astype(object).tolist(), missing)]


def print_problems(label: str, problems) -> None:
    """Every problem of a refused import on stderr, those that repeat over rows (a mistyped plate id
    on each of its readings, say) on one line with their rows (:func:`screenlab.errors.group_problems`)."""
    from screenlab.errors import group_problems

    n = len(problems)
    print(f"{label}: {n} problem{'s' if n != 1 else ''} found; nothing was written", file=sys.stderr)
    for g in group_problems(problems):
        print(f"  - {g}", file=sys.stderr)


def load_stored_campaign(store_arg: str | None, campaign: str, *, history: bool = False):
    """The campaign's data from the store (and, with ``history``, its import records and file hashes).

    Raises UsageError for a missing store file and NotFoundError (listing what is stored) for an
    unknown campaign. Returns ``(data, imports, files)``; the last two are None without ``history``.
    """
    from screenlab.errors import NotFoundError, UsageError
    from screenlab.store import Store

    path = resolve_store_path(store_arg)
    if not Path(path).exists():
        raise UsageError(f"store {path} does not exist; import a campaign first with 'screenlab ingest PATH'")
    store = Store(path, read_only=True)
    try:
        data = store.load_campaign(campaign)  # one connection when the campaign is there (start-up time)
    except NotFoundError:
        names = store.campaign_names()
        known = ", ".join(names) if names else "none"
        raise NotFoundError(f"campaign {campaign!r} is not in {path} (stored: {known})") from None
    imports = store.imports(campaign) if history else None
    files = store.import_files(campaign) if history else None
    return data, imports, files
