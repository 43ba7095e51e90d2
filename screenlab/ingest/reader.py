"""Read a campaign (folder, .zip or uploaded files) into a validated :class:`CampaignData`.

Import is all or nothing: :func:`read_campaign` either returns a :class:`ReadResult` or raises
one :class:`~screenlab.errors.ValidationError` that lists every problem found in every file.
"""
from __future__ import annotations

import pandas as pd

import hashlib
import warnings
from dataclasses import dataclass
from pathlib import Path

from screenlab import schema, units
from screenlab.errors import DataQualityWarning, Problem, ValidationError
from screenlab.model import CampaignData

from . import forms
from . import validate as v
from .manifest import parse_manifest
from .sources import (MANIFEST, READINGS_DIR, TABLES, campaign_files_from_folder, campaign_files_from_upload,
                      campaign_files_from_zip)
from .tables import RawTable, read_table


@dataclass(frozen=True)
class FileRecord:
    """One imported file: its name as read, the sha256 of its bytes, and its data rows.

    n_rows counts non-blank data rows of a table (header excluded); for campaign.toml it is the
    number of lines.
    """

    name: str
    sha256: str
    n_rows: int


@dataclass(frozen=True)
class ReadResult:
    """A validated campaign, the files it came from, and a label of the source.

    ``notes`` are things worth knowing that are not errors (a file read as cp1252, unused columns);
    each is also issued as a :class:`~screenlab.errors.DataQualityWarning`.
    """

    data: CampaignData
    files: tuple[FileRecord, ...]
    source: str
    notes: tuple[str, ...] = ()


#: said of a readings file without rows: how to import a round whose plates are not run yet
_PLANNED_HINT = ("; for a planned round whose plates are not run yet, leave the readings out (the layout "
                 "imports alone; add the readings later with screenlab add-readings)")


def _gather(source) -> tuple[dict[str, bytes], str]:
    if isinstance(source, dict):
        return campaign_files_from_upload(source), "upload"
    if isinstance(source, (bytes, bytearray)):
        return campaign_files_from_zip(bytes(source), "archive.zip"), "archive.zip"
    try:
        p = Path(source)
    except TypeError:
        raise ValidationError([Problem(str(source), None, None, None,
                                       "expected a campaign folder, a .zip path or a mapping of file names to bytes")],
                              source=str(source)) from None
    label = str(p)
    if not p.exists():
        raise ValidationError([Problem(label, None, None, None, "does not exist")], source=label)
    if p.is_dir():
        return campaign_files_from_folder(p), label
    if p.suffix.lower() == ".zip":
        return campaign_files_from_zip(p, p.name), label
    if p.name.lower() == MANIFEST:
        return campaign_files_from_folder(p.parent), str(p.parent)
    raise ValidationError([Problem(label, None, None, None,
                                   "is neither a campaign folder nor a .zip of one")], source=label)


def _check_reshaped(table: RawTable, problems: list[Problem], wells, plates, info, well_names,
                    notes: list[str]) -> pd.DataFrame:
    """check_readings of a reshaped table (grids, sample codes), each problem once."""
    local: list[Problem] = []
    readings, nt = v.check_readings(table, local, wells=wells, plates=plates, info=info, well_names=well_names)
    problems.extend(forms.unique_problems(local))
    notes.extend(nt)
    return readings


def read_campaign(source) -> ReadResult:
    """Read and validate one campaign.

    ``source`` is a campaign folder, a .zip of it (optionally with one top-level folder), the path
    of its campaign.toml, or a ``dict`` of file name -> bytes (separate files or one ``.zip``).
    Each table may be ``name.csv`` or ``name.xlsx`` (not both). Raises
    :class:`~screenlab.errors.ValidationError` listing every problem found.
    """
    files, label = _gather(source)
    by_lower: dict[str, str] = {}
    for k in files:
        by_lower.setdefault(k.lower(), k)
    problems: list[Problem] = []
    records: list[FileRecord] = []
    notes: list[str] = []

    def record(name: str, n_rows: int) -> None:
        records.append(FileRecord(name, hashlib.sha256(files[name]).hexdigest(), int(n_rows)))

    mname = by_lower.get(MANIFEST)
    manifest, info = parse_manifest(files[mname] if mname else None, problems)
    if mname:
        record(mname, len(files[mname].decode("utf-8", "replace").splitlines()))
    for slot, fn in (("time_unit", units.time_factor_to_h), ("conc_unit", units.conc_factor_to_mM),
                     ("volume_unit", units.volume_factor_to_uL)):
        if slot in info:
            info[slot.replace("_unit", "_factor")] = fn(info[slot])

    tables: dict[str, RawTable | None] = {}
    grid_names = sorted(k for k in files if k.lower().startswith(READINGS_DIR + "/"))
    other_readings: dict[str, bytes] = {}  # readings.xlsx or the readings/ folder: read once the layout is known
    for t in TABLES:
        csv_name, xlsx_name = by_lower.get(f"{t}.csv"), by_lower.get(f"{t}.xlsx")
        if csv_name and xlsx_name:
            problems.append(Problem(f"{t}.csv", None, None, None,
                                    f"both {csv_name} and {xlsx_name} are present; keep only one of them"))
            tables[t] = None
            continue
        name = csv_name or xlsx_name
        if t == "readings" and grid_names:
            if name is not None:
                problems.append(Problem(name, None, None, None,
                                        f"both {name} and a {READINGS_DIR}/ folder are present; keep only one of them"))
            else:
                other_readings = {k: files[k] for k in grid_names}
            tables[t] = None
            continue
        if t == "readings" and name is not None and name == xlsx_name:
            other_readings = {name: files[name]}  # a long table or a workbook of plate grids
            tables[t] = None
            continue
        if name is None and t == "readings":
            # a planned campaign (e.g. the next round written by `screenlab shortlist`): layout only
            notes.append("no readings.csv: a planned campaign (layout only); nothing to analyse until readings arrive")
            tables[t] = None
            continue
        if name is None:
            problems.append(Problem(f"{t}.csv", None, None, None,
                                    f"missing file: the campaign needs {t}.csv (or {t}.xlsx)"))
            tables[t] = None
            continue
        n_before = len(problems)
        raw = read_table(name, files[name], problems)
        if raw is not None and raw.n_rows == 0:
            problems.append(Problem(name, None, None, None, "has a header but no data rows"
                                    + (_PLANNED_HINT if t == "readings" else "")))
        if raw is not None:
            notes.extend(raw.notes)
            record(name, raw.n_rows)
        elif len(problems) == n_before:  # pragma: no cover - read_table always says why
            problems.append(Problem(name, None, None, None, "cannot be read"))
        tables[t] = raw

    catalysts = plates = wells = None
    factor_names: tuple[str, ...] = ()
    if tables["catalysts"] is not None:
        catalysts, nt = v.check_catalysts(tables["catalysts"], problems)
        notes.extend(nt)
    if tables["plates"] is not None:
        plates, nt = v.check_plates(tables["plates"], problems)
        notes.extend(nt)
    well_names: dict = {}  # well names parsed for the layout, reused for the readings
    if tables["layout"] is not None:
        wells, factor_names = v.check_layout(tables["layout"], problems, plates=plates, catalysts=catalysts,
                                             conc_factor=info.get("conc_factor"),
                                             volume_factor=info.get("volume_factor"), well_names=well_names)
    readings = schema.empty_frame(schema.READINGS)  # a planned campaign (layout only) has no readings
    raw = tables["readings"]
    if raw is not None and forms.is_sample_table(raw):  # readings.csv naming wells by sample code
        reshaped = forms.reshape_sample_table(raw, wells, problems, notes)
        if reshaped is not None:
            readings = _check_reshaped(reshaped, problems, wells, plates, info, well_names, notes)
    elif raw is not None:
        readings, nt = v.check_readings(raw, problems, wells=wells, plates=plates, info=info,
                                        well_names=well_names)
        notes.extend(nt)
    elif other_readings:
        where = f"{READINGS_DIR}/" if grid_names else next(iter(other_readings))
        got = forms.gather_readings(other_readings, plates=plates, wells=wells, problems=problems, label=where)
        notes.extend(got.notes)
        for fname, n_rows in got.records:
            record(fname, n_rows)
        if got.table is not None and not got.reshaped:
            if got.table.n_rows == 0:
                problems.append(Problem(got.table.name, None, None, None,
                                        "has a header but no data rows" + _PLANNED_HINT))
            readings, nt = v.check_readings(got.table, problems, wells=wells, plates=plates, info=info,
                                            well_names=well_names)
            notes.extend(nt)
        elif got.table is not None:
            if got.table.n_rows == 0 and "grid" in got.forms:
                problems.append(Problem(where, None, None, None, "the grids hold no values"))
            readings = _check_reshaped(got.table, problems, wells, plates, info, well_names, notes)

    if problems or manifest is None:
        raise ValidationError(problems, source=label)
    data = schema.check_campaign(CampaignData(manifest=manifest, catalysts=catalysts, plates=plates, wells=wells,
                                              readings=readings, factor_names=factor_names), where="read_campaign")
    for note in notes:
        warnings.warn(note, DataQualityWarning, stacklevel=2)
    return ReadResult(data=data, files=tuple(records), source=label, notes=tuple(notes))
