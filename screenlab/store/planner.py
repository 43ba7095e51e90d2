"""The import plan: what an import of one campaign would write, decided without touching the store.

:func:`plan_import` compares what the store holds for a campaign (:class:`Stored`) with the
incoming data in storage form (:class:`Incoming`) and returns an :class:`ImportPlan`, or raises
:class:`ImportRefusedError`. It is pure (frames in, a plan out; no DuckDB), so every rule below can
be tested on small frames. :mod:`screenlab.store.writer` writes a plan in one transaction.

Rules
-----
* **Plates** are compared by fingerprint (:mod:`screenlab.store.fingerprints`): a plate the
  campaign does not have is *added*; one with the stored fingerprint is *unchanged*; one with
  another is *changed* (and the parts that differ are named: plate row, layout, readings).
  Stored plates the data does not mention are *kept* as they are. A campaign with no stored plate
  adds every plate (no fingerprint is needed to decide).
* **Catalysts** are compared by id and value (missing equals missing): new ids are *added*,
  ids whose values differ are *changed*. The merged set keeps the stored order (changed rows
  taking the new values under ``replace``), then the additions.
* **Manifest**: changed when its fingerprint differs.
* **Refused** without ``replace`` when any plate, catalyst or the manifest is changed (also on a
  dry run): nothing is written.
* **Status**: ``imported`` (a new campaign), ``unchanged`` (nothing to write), ``replaced``
  (changed plates, catalysts or manifest stored as the new version), else ``added_plates``.
* **Header** (manifest, catalyst set, factor names, dtypes of the frames) is written again when
  it changes: a replaced manifest, added or replaced catalysts, new factor names or new columns.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd

from screenlab.errors import ScreenlabError
from screenlab.store.storage import CATALYST_COLS, Prepared, rows_in, storage_form

#: every status an import can report (``readings_added`` is the add-readings write's)
STATUSES = ("imported", "unchanged", "added_plates", "replaced", "dry_run")


class ImportRefusedError(ScreenlabError):
    """Data for a stored campaign differs from what the store holds and ``replace`` was not given."""

    def __init__(self, message: str, *, campaign: str, plates: tuple[str, ...] = (),
                 catalysts: tuple[str, ...] = (), manifest: bool = False):
        super().__init__(message)
        self.campaign = campaign
        self.plates = plates
        self.catalysts = catalysts
        self.manifest = manifest


@dataclass(frozen=True)
class ImportReport:
    """What one import did (or, with ``dry_run``, would do).

    ``status``: imported (new campaign) | unchanged (nothing written) | added_plates (new plates or
    catalysts for a stored campaign) | replaced (changed plates / manifest / catalysts stored as the
    new current version, the old one kept as history) | dry_run (nothing written; the lists say
    what an import would do). ``n_wells`` and ``n_readings`` count the rows written (or that would
    be written). ``import_id`` is None when nothing was written.
    """

    campaign: str
    status: str
    plates_added: tuple[str, ...] = ()
    plates_replaced: tuple[str, ...] = ()
    plates_unchanged: tuple[str, ...] = ()
    n_wells: int = 0
    n_readings: int = 0
    message: str = ""
    import_id: int | None = None
    catalysts_added: tuple[str, ...] = ()
    catalysts_replaced: tuple[str, ...] = ()
    manifest_replaced: bool = False
    plates_kept: tuple[str, ...] = ()   # stored plates the imported data did not mention (left as they are)


@dataclass(frozen=True)
class Stored:
    """What the store holds for one campaign (its current versions); the default: nothing.

    ``catalysts`` in storage form; ``plate_fingerprints``: plate -> stored fingerprint text;
    ``frame_schema``: the recorded dtypes of the frames (``[[column, dtype spec], ...]`` per frame).
    """

    manifest_fingerprint: str | None = None
    factor_names: tuple[str, ...] = ()
    frame_schema: dict | None = None
    catalysts: pd.DataFrame | None = None
    plate_fingerprints: dict[str, str] = field(default_factory=dict)

    @property
    def is_new(self) -> bool:
        return self.manifest_fingerprint is None


@dataclass(frozen=True)
class Incoming:
    """The data of an import in storage form. ``fingerprints`` gives the per-plate fingerprints
    (with the stored text ``fp``); it is called only when they are needed (they may still be being
    computed in another thread)."""

    campaign: str
    manifest_fingerprint: str
    factor_names: tuple[str, ...]
    prepared: Prepared
    fingerprints: Callable[[], pd.DataFrame]


@dataclass(frozen=True)
class Header:
    """A campaign header to write: the merged catalyst set (storage form, with ``seq``), the
    factor names and the dtypes of the frames."""

    catalysts: pd.DataFrame
    factor_names: tuple[str, ...]
    frame_schema: dict


@dataclass(frozen=True)
class ImportPlan:
    """What an import writes. ``rows`` (None: every incoming row) selects, per prepared frame
    (``plates``, ``wells``, ``factors``, ``readings``), the rows of the plates written;
    ``fingerprints`` is None when the plan did not need them (a campaign with nothing stored)."""

    campaign: str
    status: str
    added: tuple[str, ...]
    changed: tuple[str, ...]
    unchanged: tuple[str, ...]
    kept: tuple[str, ...]
    catalysts_added: tuple[str, ...]
    catalysts_changed: tuple[str, ...]
    manifest_replaced: bool
    header: Header | None
    rows: dict[str, np.ndarray] | None
    n_wells: int
    n_readings: int
    fingerprints: pd.DataFrame | None = None

    @property
    def writes(self) -> bool:
        return self.status != "unchanged"

    def message(self, dry_run: bool = False) -> str:
        return import_message(self.campaign, self.status, self.added, self.changed, self.unchanged, self.kept,
                              self.catalysts_added, self.catalysts_changed, self.manifest_replaced,
                              self.n_wells, self.n_readings, dry_run)

    def report(self, *, dry_run: bool = False, import_id: int | None = None) -> ImportReport:
        return ImportReport(
            campaign=self.campaign, status="dry_run" if dry_run else self.status, message=self.message(dry_run),
            import_id=import_id, plates_added=self.added, plates_replaced=self.changed,
            plates_unchanged=self.unchanged, n_wells=self.n_wells, n_readings=self.n_readings,
            catalysts_added=self.catalysts_added, catalysts_replaced=self.catalysts_changed,
            manifest_replaced=self.manifest_replaced, plates_kept=self.kept)


# --------------------------------------------------------------------------------------------

def _equal_cells(a: pd.Series, b: pd.Series) -> np.ndarray:
    """Per row: equal values, or both missing."""
    a = a.reset_index(drop=True)
    b = b.reset_index(drop=True)
    both_na = (a.isna() & b.isna()).to_numpy(dtype=bool)
    eq = (a.astype(object) == b.astype(object)).to_numpy(dtype=bool) if len(a) else np.zeros(0, bool)
    return both_na | (eq & ~(a.isna() | b.isna()).to_numpy(dtype=bool))


def _catalyst_changes(stored: pd.DataFrame, inc: pd.DataFrame, replace: bool):
    """(added ids, changed ids, merged catalyst set in storage form with a new ``seq``)."""
    is_new = ~inc["catalyst"].isin(stored["catalyst"]).to_numpy(dtype=bool)
    added = [str(v) for v in inc.loc[is_new, "catalyst"]]
    both = inc.loc[~is_new].merge(stored, on="catalyst", how="left", suffixes=("", "_old"))
    same = np.ones(len(both), dtype=bool)
    for c in CATALYST_COLS:
        if c != "catalyst":
            same &= _equal_cells(both[c], both[c + "_old"])
    changed = [str(v) for v in both.loc[~same, "catalyst"]]
    merged = stored.drop(columns=["seq"], errors="ignore")
    if replace and changed:
        upd = inc.set_index("catalyst").loc[changed]
        merged = merged.set_index("catalyst")
        merged.loc[changed, upd.columns.drop("seq", errors="ignore")] = upd.drop(columns=["seq"], errors="ignore")
        merged = merged.reset_index()
    catalysts = pd.concat([merged, inc.loc[is_new].drop(columns=["seq"])], ignore_index=True)
    catalysts = storage_form(catalysts, CATALYST_COLS)
    catalysts["seq"] = np.arange(len(catalysts), dtype=np.int64)
    return added, changed, catalysts


def _merged_schema(old: dict, new: dict) -> dict:
    """The recorded dtypes: the stored columns, then the incoming columns the store has not seen."""
    out = {}
    for frame_name, cols in old.items():
        have = {c for c, _ in cols}
        out[frame_name] = cols + [c for c in new[frame_name] if c[0] not in have]
    return out


def _refusal(name: str, changed: list[str], what: dict, cats_changed: list[str],
             manifest_changed: bool) -> ImportRefusedError:
    bits = []
    if changed:
        detail = "; ".join(f"{p} ({', '.join(what[p])})" for p in changed[:12])
        more = f"; and {len(changed) - 12} more" if len(changed) > 12 else ""
        bits.append(f"plate{'s' if len(changed) > 1 else ''} {detail}{more} differ from the stored data")
    if cats_changed:
        bits.append(f"catalyst{'s' if len(cats_changed) > 1 else ''} {names_text(cats_changed)} differ")
    if manifest_changed:
        bits.append("the manifest (campaign.toml) differs")
    return ImportRefusedError(
        f"campaign {name!r}: {'; '.join(bits)}. Nothing was written. To store the new data as the "
        f"current version (the old version is kept as history), import again with replace "
        f"(screenlab ingest --replace).",
        campaign=name, plates=tuple(changed), catalysts=tuple(cats_changed), manifest=manifest_changed)


def plan_import(stored: Stored, incoming: Incoming, *, replace: bool = False) -> ImportPlan:
    """The plan of importing ``incoming`` over ``stored`` (see the module docstring for the rules).

    Raises :class:`ImportRefusedError` when plates, catalysts or the manifest would change and
    ``replace`` is false."""
    name = incoming.campaign
    prep = incoming.prepared
    manifest_changed = False
    cats_added: list[str] = []
    cats_changed: list[str] = []
    if stored.is_new:
        header = Header(prep.catalysts, tuple(incoming.factor_names), prep.schema)
    else:
        manifest_changed = stored.manifest_fingerprint != incoming.manifest_fingerprint
        cats_added, cats_changed, catalysts = _catalyst_changes(stored.catalysts, prep.catalysts, replace)
        old_factors = tuple(stored.factor_names)
        factor_names = old_factors + tuple(f for f in incoming.factor_names if f not in old_factors)
        schema = _merged_schema(stored.frame_schema, prep.schema)
        needed = ((manifest_changed and replace) or bool(cats_added) or (bool(cats_changed) and replace)
                  or factor_names != old_factors or schema != stored.frame_schema)
        header = Header(catalysts, factor_names, schema) if needed else None

    # plates: with nothing stored for the campaign every plate is added, whatever its fingerprint
    plate_names = prep.plates["plate"].tolist()
    stored_map = stored.plate_fingerprints
    added, changed, unchanged, what = [], [], [], {}
    fps = incoming.fingerprints() if stored_map else None
    for row in (fps.itertuples() if fps is not None else ()):  # one per plate
        old = stored_map.get(row.plate)
        if old is None:
            added.append(row.plate)
        elif old == row.fp:
            unchanged.append(row.plate)
        else:
            changed.append(row.plate)
            parts = old.split(":")
            what[row.plate] = [label for label, a, b in zip(("plate row", "layout", "readings"), parts,
                                                             (row.fp_plate, row.fp_layout, row.fp_readings))
                               if a != b]
    if fps is None:
        added = list(plate_names)
    kept = sorted(set(stored_map) - set(plate_names))

    if not replace and (changed or manifest_changed or cats_changed):
        raise _refusal(name, changed, what, cats_changed, manifest_changed)

    # rows of the plates being written (every row when no plate is unchanged: the validation has
    # made sure that each row's plate is in the plates table)
    rows = None
    if unchanged:
        write_set = set(added + changed)
        rows = {k: rows_in(getattr(prep, k)["plate"], write_set) for k in ("plates", "wells", "factors", "readings")}
    n_wells = len(prep.wells) if rows is None else int(rows["wells"].sum())
    n_readings = len(prep.readings) if rows is None else int(rows["readings"].sum())

    if stored.is_new:
        status = "imported"
    elif not (added or changed) and header is None:
        status = "unchanged"
    elif changed or (manifest_changed and replace) or cats_changed:
        status = "replaced"
    else:
        status = "added_plates"
    return ImportPlan(
        campaign=name, status=status, added=tuple(added), changed=tuple(changed), unchanged=tuple(unchanged),
        kept=tuple(kept), catalysts_added=tuple(cats_added), catalysts_changed=tuple(cats_changed),
        manifest_replaced=bool(manifest_changed and replace), header=header,
        rows=rows, n_wells=n_wells, n_readings=n_readings, fingerprints=fps)


# --------------------------------------------------------------------------------------------
# messages

def names_text(items) -> str:
    """Up to 12 names joined with ", ", then "and N more"."""
    items = list(items)
    if len(items) <= 12:
        return ", ".join(items)
    return ", ".join(items[:12]) + f" and {len(items) - 12} more"


def _plates(ps) -> str:
    return f"{len(ps)} plate{'s' if len(ps) != 1 else ''} ({names_text(ps)})"


def import_message(name, status, added, changed, unchanged, kept, cats_added, cats_changed, manifest_replaced,
                   n_wells, n_readings, dry_run) -> str:
    """The one-line report of an import (``dry_run``: what it would do)."""
    counts = f"{n_wells:,} wells, {n_readings:,} readings"
    if status == "unchanged":
        text = f"{name}: unchanged, nothing to import ({_plates(unchanged)} already stored)"
    else:
        parts = []
        if status == "imported":
            parts.append(f"new campaign with {_plates(added)}")
        else:
            if added:
                parts.append(f"added {_plates(added)}")
            if changed:
                parts.append(f"replaced {_plates(changed)} (old version kept as history)")
            if unchanged:
                parts.append(f"{len(unchanged)} unchanged")
        if cats_added and status != "imported":
            parts.append(f"added catalyst{'s' if len(cats_added) != 1 else ''} {names_text(cats_added)}")
        if cats_changed:
            parts.append(f"replaced catalyst{'s' if len(cats_changed) != 1 else ''} {names_text(cats_changed)}")
        if manifest_replaced:
            parts.append("replaced the manifest")
        text = f"{name}: " + "; ".join(parts) + f" [{counts}]"
    if kept:
        text += f"; {len(kept)} stored plate{'s' if len(kept) != 1 else ''} not in this import left as they are"
    if dry_run:
        text = "dry run, nothing written: " + text.replace(f"{name}: ", f"{name}: would be ", 1) \
            if status != "unchanged" else "dry run: " + text
    return text
