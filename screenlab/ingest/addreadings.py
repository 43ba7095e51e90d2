"""Readings for a stored campaign: complete a planned round, or fill plates that have none yet.

:func:`read_new_readings` checks readings in any accepted form (long table, sample-named table,
plate grids, a workbook of grids; several files at once) against a stored campaign's manifest,
plates and layout, with the checks of an import (:func:`screenlab.ingest.validate.check_readings`),
and refuses readings for a plate that already has some. It never raises: the result lists the
problems, so the app can show what arrived next to what is wrong. The store writes the result
(:func:`screenlab.store.add_readings`).

:func:`readings_files` collects the files of command-line paths (files, folders, .zip archives).
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from screenlab import units
from screenlab.errors import Problem, ValidationError
from screenlab.model import DEFAULT_ANALYTE, CampaignData

from . import forms
from . import validate as v
from .manifest import parse_manifest
from .reader import FileRecord
from .sources import MANIFEST, READINGS_DIR, TABLES, extract_zip

_EXTENSIONS = (".csv", ".xlsx")
_OTHER_TABLES = {f"{t}.{ext}" for t in TABLES if t != "readings" for ext in ("csv", "xlsx")} | {MANIFEST}


@dataclass(frozen=True)
class NewReadings:
    """Readings checked against a stored campaign (nothing written yet).

    ``readings`` holds the checked readings (the columns of ``CampaignData.readings``, sorted) of
    the plates in ``plates`` when there is no problem, else None. ``arrival`` is
    :func:`screenlab.ingest.forms.arrival_map` for the campaign's plates without readings and
    every plate something arrived for. ``forms`` names the forms that arrived (long, sample, grid).
    """

    campaign: str
    readings: pd.DataFrame | None
    plates: tuple[str, ...]
    files: tuple[FileRecord, ...]
    notes: tuple[str, ...]
    problems: tuple[Problem, ...]
    arrival: pd.DataFrame
    forms: tuple[str, ...]
    source: str = ""

    @property
    def ok(self) -> bool:
        return not self.problems and self.readings is not None

    def raise_for_problems(self) -> None:
        """Raise :class:`ValidationError` listing every problem (nothing is written)."""
        if not self.ok:
            raise ValidationError(list(self.problems) or [Problem(self.source or "readings", None, None, None,
                                                                  "no readings found")],
                                  source=self.source or self.campaign)


def manifest_info(data: CampaignData) -> dict:
    """The manifest facts the readings checks need (as :func:`parse_manifest` gives them on import)."""
    m = data.manifest
    info: dict | None = None
    if m.source_toml:
        quiet: list[Problem] = []
        parsed, info = parse_manifest(m.source_toml.encode("utf-8"), quiet)
        if parsed is None:
            info = None
    if info is None:  # a campaign built in code: its fields
        info = {"kind": m.readout_kind, "scale": m.readout_scale, "product_per_substrate": m.product_per_substrate,
                "time_unit": m.time_unit, "conc_unit": m.concentration_unit, "volume_unit": m.volume_unit,
                "analytes_declared": m.has_analytes or m.analyte_main != DEFAULT_ANALYTE, "main": m.analyte_main,
                "byproducts": tuple(m.byproducts), "enantiomers": m.enantiomers}
    info["time_factor"] = units.time_factor_to_h(info["time_unit"])
    info["conc_factor"] = units.conc_factor_to_mM(info["conc_unit"])
    info["volume_factor"] = units.volume_factor_to_uL(info["volume_unit"])
    return info


def plates_with_readings(data: CampaignData) -> dict[str, int]:
    """Plate -> number of stored readings (plates without readings are absent)."""
    if not len(data.readings):
        return {}
    counts = data.readings.groupby(data.readings["plate"].astype(str)).size()
    return {str(k): int(n) for k, n in counts.items()}


def read_new_readings(files: dict[str, bytes], data: CampaignData, *, source: str = "") -> NewReadings:
    """Check readings files (``{label: bytes}``) against the stored campaign ``data``.

    Refused (listed in ``problems``): everything an import refuses, a plate that already has
    readings in the store, and a delivery holding no reading at all.
    """
    problems: list[Problem] = []
    label = source or "new readings"
    got = forms.gather_readings(files, plates=data.plates, wells=data.wells, problems=problems, label=label)
    notes = list(got.notes)
    readings = None
    if got.table is not None:
        local: list[Problem] = []
        readings, nt = v.check_readings(got.table, local, wells=data.wells, plates=data.plates,
                                        info=manifest_info(data))
        problems.extend(forms.unique_problems(local) if got.reshaped else local)
        notes.extend(nt)
    have = plates_with_readings(data)
    arrived: list[str] = []
    if readings is not None and len(readings):
        arrived = list(dict.fromkeys(readings["plate"].astype(str).tolist()))
        for plate in arrived:  # the plates of this delivery
            if plate in have:
                problems.append(Problem(_file_of(got.table, plate), None, "plate", plate,
                                        f"plate {plate} already has {have[plate]:,} readings in the store; readings "
                                        "are added only to plates without any (to change stored readings, import "
                                        "the completed campaign folder with screenlab ingest --replace)"))
    elif not problems:
        problems.append(Problem(label, None, None, None, "no readings found in the files given"))
    waiting = [p for p in data.plates["plate"].astype(str) if p not in have]
    shown = list(dict.fromkeys(waiting + arrived))
    arrival = forms.arrival_map(got.table, got.outside, data.plates, data.wells, only_plates=shown)
    records = tuple(FileRecord(name, hashlib.sha256(files[name]).hexdigest(), int(n)) for name, n in got.records)
    order = pd.Index(data.plates["plate"].astype(str))
    arrived.sort(key=lambda p: order.get_loc(p) if p in order else len(order))
    return NewReadings(campaign=data.name, readings=None if problems else readings, plates=tuple(arrived),
                       files=records, notes=tuple(notes), problems=tuple(problems), arrival=arrival,
                       forms=got.forms, source=source)


def _file_of(table, plate: str) -> str:
    """The file the first reading of ``plate`` came from."""
    hit = (table.frame["plate"].astype(str) == plate).to_numpy()
    if table.origin is not None and hit.any():
        return str(table.origin.files[hit.argmax()])
    return table.name


def _pick(files: dict[str, bytes]) -> dict[str, bytes]:
    """The readings files among the files of a folder or archive (relative posix paths): a
    campaign folder's readings.csv / readings.xlsx / readings/ grids when it has them, else every
    .csv and .xlsx file at its top level that is not one of the campaign's other tables."""
    top = {k: b for k, b in files.items() if "/" not in k}
    own = {k: b for k, b in top.items() if k.lower() in ("readings.csv", "readings.xlsx")}
    own.update({k: b for k, b in files.items()
                if k.count("/") == 1 and k.split("/")[0].lower() == READINGS_DIR and k.lower().endswith(_EXTENSIONS)})
    if own:
        return own
    return {k: b for k, b in top.items() if k.lower().endswith(_EXTENSIONS)
            and k.lower() not in _OTHER_TABLES and not k.startswith((".", "~$"))}


def readings_files_from_upload(files: dict[str, bytes]) -> dict[str, bytes]:
    """The readings files of an upload (``{name: bytes}``): the files themselves, and for a .zip
    its readings files (see :func:`_pick`) as ``<zip name>/<path>``. Raises ValidationError for an
    unsafe or unreadable archive."""
    out: dict[str, bytes] = {}
    for name, data in files.items():  # a handful of uploads
        if not name.lower().endswith(".zip"):
            out[name] = bytes(data)
            continue
        inner = extract_zip(bytes(data), name)
        heads = {k.split("/", 1)[0] for k in inner if "/" in k}
        prefix = f"{name}/"
        if len(heads) == 1 and not any("/" not in k for k in inner):
            head = heads.pop()
            inner = {k.split("/", 1)[1]: b for k, b in inner.items()}
            prefix = f"{name}/{head}/"
        out.update({prefix + k: b for k, b in _pick(inner).items()})
    return out


def readings_files(paths) -> dict[str, bytes]:
    """``{label: bytes}`` of the readings files under command-line ``paths``: a file is itself; a
    folder and a .zip give their readings files (see :func:`_pick`). Raises ValidationError for a
    path that does not exist or holds no readings file."""
    out: dict[str, bytes] = {}
    problems: list[Problem] = []
    for path in map(Path, paths):  # the paths given
        if not path.exists():
            problems.append(Problem(str(path), None, None, None, "does not exist"))
        elif path.is_dir():
            found = {p.relative_to(path).as_posix(): p for p in sorted(path.rglob("*"))
                     if p.is_file() and len(p.relative_to(path).parts) <= 2}
            picked = _pick({k: b"" for k in found})
            if not picked:
                problems.append(Problem(str(path), None, None, None, "holds no readings file (.csv or .xlsx)"))
            for k in picked:
                out[str(found[k])] = found[k].read_bytes()
        elif path.suffix.lower() == ".zip":
            try:
                picked = readings_files_from_upload({str(path): path.read_bytes()})
            except ValidationError as exc:
                problems.extend(exc.problems)
                continue
            if not picked:
                problems.append(Problem(str(path), None, None, None, "holds no readings file (.csv or .xlsx)"))
            out.update(picked)
        else:
            out[str(path)] = path.read_bytes()
    if problems:
        raise ValidationError(problems, source="readings")
    return out
