"""Readings written onto stored plates that have none yet (a planned round completed).

A plate version in the store is its plate row, layout, factor values and readings (see
:mod:`screenlab.store.db`). Adding readings to a plate therefore writes a new version of it: the
same plate row, layout and factor values, now with readings; the planned version gets
``superseded_by`` and stays in the store as history. No schema change: the rows go into the
existing tables, the import history records the write with status ``readings_added``.

The new version is prepared exactly as an import prepares a plate (``storage.prepare``), so its
fingerprint is the one an import of the completed campaign folder would give: importing that
folder afterwards finds the plates unchanged. Each new version keeps its plate's position
(``seq``), so a campaign whose plates all received their readings at once loads back in the same
row order as one imported complete.

All or nothing, in one transaction: the store must still be at the data version the readings were
checked against (else nothing is written and the caller checks again), and every plate receiving
readings must still have none.
"""
from __future__ import annotations

from datetime import datetime, timezone

import numpy as np
import pandas as pd

from screenlab.errors import ScreenlabError
from screenlab.model import CampaignData
from screenlab.store import fingerprints, writer
from screenlab.store import queries as Q
from screenlab.store.db import Store
from screenlab.store.planner import ImportRefusedError, ImportReport, names_text
from screenlab.store.storage import prepare, to_arrow

STATUS = "readings_added"


def plate_readings(store: Store, campaign: str | None = None) -> pd.DataFrame:
    """One row per current plate: ``campaign, plate, format, temperature_c, wells`` (non-empty
    layout wells), ``readings`` (stored readings; 0 for a planned plate)."""
    if store.read_only and not store.path.exists():
        return pd.DataFrame(columns=["campaign", "plate", "format", "temperature_c", "wells", "readings"])
    with store._connect() as con:
        frame = con.execute(Q.PLATE_READING_COUNTS, [campaign, campaign]).df()
    frame = frame.drop(columns=["seq", "import_id"])
    for c in ("wells", "readings"):
        frame[c] = frame[c].astype("int64")
    return frame


def campaigns_awaiting_readings(store: Store) -> list[str]:
    """Campaigns with at least one plate that has no readings (planned rounds, partly run ones)."""
    frame = plate_readings(store)
    return sorted(frame.loc[frame["readings"] == 0, "campaign"].astype(str).unique().tolist())


def add_readings(store: Store, data: CampaignData, new, *, data_version: str, dry_run: bool = False,
                 source: str = "") -> ImportReport:
    """Write the checked readings ``new`` (a :class:`screenlab.ingest.addreadings.NewReadings`
    built against ``data``, the campaign as loaded at ``data_version``) as new versions of their
    plates, in one transaction.

    Raises :class:`~screenlab.errors.ValidationError` when ``new`` has problems,
    :class:`ImportRefusedError` when a plate has readings by now or the store changed since
    ``data_version`` (nothing is written either way).
    """
    new.raise_for_problems()
    if store.read_only:
        raise ScreenlabError(f"store {store.path} is open read-only; cannot add readings")
    name = data.name
    targets = list(new.plates)
    keep = lambda f: f.loc[f["plate"].astype(str).isin(targets)].reset_index(drop=True)  # noqa: E731
    part = CampaignData(manifest=data.manifest, catalysts=data.catalysts, plates=keep(data.plates),
                        wells=keep(data.wells), readings=new.readings.reset_index(drop=True),
                        factor_names=data.factor_names)
    prep = prepare(part)  # storage form and fingerprints, as an import makes them
    fps = fingerprints.with_text(fingerprints.of_prepared(prep))
    with store._connect() as con:
        con.begin()
        try:
            got = con.execute(Q.GET_META, ["generation"]).fetchall()
            now_version = f"g{got[0][0] if got else 0}"
            if now_version != data_version:
                raise ImportRefusedError(
                    f"campaign {name!r}: the store changed while the readings were being checked "
                    f"({data_version} -> {now_version}); nothing was written. Run the command again.",
                    campaign=name)
            counts = con.execute(Q.PLATE_READING_COUNTS, [name, name]).df()
            if counts.empty:
                raise ImportRefusedError(f"no campaign {name!r} in store {store.path}; nothing was written",
                                         campaign=name)
            stored = dict(zip(counts["plate"].astype(str), counts["readings"].astype(int)))
            seq = dict(zip(counts["plate"].astype(str), counts["seq"].astype(int)))
            unknown = [p for p in targets if p not in stored]
            full = [p for p in targets if stored.get(p, 0) > 0]
            if unknown or full:
                bits = []
                if unknown:
                    bits.append(f"plate{'s' if len(unknown) > 1 else ''} {names_text(unknown)} not in the campaign")
                if full:
                    bits.append(f"plate{'s' if len(full) > 1 else ''} {names_text(full)} already ha"
                                f"{'ve' if len(full) > 1 else 's'} readings")
                raise ImportRefusedError(f"campaign {name!r}: {'; '.join(bits)}. Nothing was written.",
                                         campaign=name, plates=tuple(full))
            rest = [p for p in counts["plate"].astype(str) if p not in set(targets)]
            still = [p for p in rest if stored[p] == 0]
            n_wells, n_readings = len(prep.wells), len(prep.readings)
            message = _message(name, targets, still, n_wells, n_readings, dry_run)
            common = dict(campaign=name, plates_replaced=tuple(targets), plates_unchanged=tuple(rest),
                          n_wells=n_wells, n_readings=n_readings, plates_kept=tuple(rest))
            if dry_run:
                con.rollback()
                return ImportReport(status="dry_run", message=message, import_id=None, **common)
            import_id = writer.next_import_id(con)
            tag = {"campaign": name, "import_id": import_id}
            writer.supersede_plates(con, import_id, name, targets)
            for table, frame in (("wells", prep.wells), ("well_factors", prep.factors), ("readings", prep.readings)):
                writer.bulk_insert(con, table, writer.Tagged(to_arrow(frame), **tag))
            plates = prep.plates.merge(fps[["plate", "fp"]], on="plate", how="left").rename(
                columns={"fp": "fingerprint"})
            plates["seq"] = np.array([seq[str(p)] for p in plates["plate"]], dtype=np.int64)  # its place, kept
            writer.bulk_insert(con, "plates", writer.Tagged(to_arrow(plates), **tag))
            when = datetime.now(timezone.utc).replace(tzinfo=None)
            writer.record_import(con, import_id, name, when, source, STATUS, replaced=targets, unchanged=rest,
                                 n_wells=n_wells, n_readings=n_readings, message=message, files=new.files)
            writer.commit(con, n_readings)
        except BaseException:
            con.rollback()
            raise
    return ImportReport(status=STATUS, message=message, import_id=import_id, **common)


def _message(name: str, targets: list[str], still: list[str], n_wells: int, n_readings: int, dry_run: bool) -> str:
    n = len(targets)
    text = (f"{name}: readings added to {n} plate{'s' if n != 1 else ''} ({names_text(targets)}) "
            f"[{n_wells:,} wells, {n_readings:,} readings]; the planned version of "
            f"{'each plate' if n != 1 else 'the plate'} is kept as history")
    if still:
        text += f"; {len(still)} plate{'s' if len(still) != 1 else ''} still without readings ({names_text(still)})"
    if dry_run:
        text = "dry run, nothing written: " + text.replace(f"{name}: readings added", f"{name}: readings would be added", 1)
    return text
