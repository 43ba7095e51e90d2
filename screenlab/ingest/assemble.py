"""A campaign folder assembled from loose pieces (the app's "build a campaign" flow).

The pieces are the manifest (a campaign.toml, or the fields of one: :func:`manifest_text`), the
catalysts, plates and layout tables (CSV or XLSX, any file name) and readings in any accepted form
(:mod:`screenlab.ingest.forms`). :func:`assemble_campaign` names each piece as the campaign format
wants it (``catalysts.xlsx``, ``readings/<plate>.csv``, ...); the result is checked like any
folder (:func:`screenlab.ingest.read_campaign`) and can be downloaded as a .zip
(:func:`campaign_zip`).
"""
from __future__ import annotations

import io
import json
import math
import re
import zipfile
from pathlib import PurePosixPath

from screenlab.errors import Problem

from . import forms
from .sources import MANIFEST, READINGS_DIR
from .tables import decode_text, read_table

#: the tables a builder asks for, in order
PIECES = ("catalysts", "plates", "layout")
_TIME_UNITS = ("s", "min", "h")
_CONC_UNITS = ("M", "mM", "uM")
_VOLUME_UNITS = ("L", "mL", "uL")


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        if not math.isfinite(v):
            raise ValueError(f"cannot write {v!r} to campaign.toml")
        return repr(v)
    return json.dumps(str(v), ensure_ascii=False)  # a JSON string is a valid TOML basic string


def manifest_text(*, name: str, time_unit: str, concentration_unit: str, volume_unit: str, kind: str,
                  scale: str | None = None, product_per_substrate: float = 1.0, epsilon_M_cm: float | None = None,
                  path_length_cm: float | None = None, description: str = "", reaction: str = "",
                  reference_temperature_c: float | None = None) -> str:
    """campaign.toml text from its fields (only the keys that apply to the readout are written;
    the import checks the values)."""
    lines = ["[campaign]", f"name = {_toml_value(name)}"]
    if description:
        lines.append(f"description = {_toml_value(description)}")
    if reaction:
        lines.append(f"reaction = {_toml_value(reaction)}")
    lines += ["", "[units]", f"time = {_toml_value(time_unit)}", f"concentration = {_toml_value(concentration_unit)}",
              f"volume = {_toml_value(volume_unit)}", "", "[readout]", f"kind = {_toml_value(kind)}"]
    if kind in ("conversion", "yield") and scale:
        lines.append(f"scale = {_toml_value(scale)}")
    lines.append(f"product_per_substrate = {_toml_value(float(product_per_substrate))}")
    if kind == "absorbance":
        for key, v in (("epsilon_M_cm", epsilon_M_cm), ("path_length_cm", path_length_cm)):
            if v is not None:
                lines.append(f"{key} = {_toml_value(float(v))}")
    if reference_temperature_c is not None:
        lines += ["", "[analysis]", f"reference_temperature_c = {_toml_value(float(reference_temperature_c))}"]
    return "\n".join(lines) + "\n"


def _plate_ids(plates: tuple[str, bytes] | None) -> list[str]:
    if plates is None:
        return []
    t = read_table(plates[0], plates[1], [])
    if t is None or not t.has("plate"):
        return []
    return [p for p in t.frame["plate"].astype(str).tolist() if p]


def classify_readings(name: str, data: bytes, plate_ids: list[str]) -> str:
    """``table`` (long or sample-named), ``grid`` (one plate), ``workbook`` (a sheet per plate)
    or ``unknown`` (not .csv / .xlsx, or unreadable), by the rules of :mod:`screenlab.ingest.forms`."""
    low = name.lower()
    stem = PurePosixPath(name).stem
    if low.endswith(".csv"):
        first = forms._first_record(decode_text(name, data, []))
        if first is None:
            return "unknown"
        return "table" if forms._names_table(first) else "grid"
    if low.endswith(".xlsx"):
        sheets = forms._xlsx_sheets(name, data, [])
        if not sheets:
            return "unknown"
        s0 = forms._sheet(name, stem, next(iter(sheets.values())))
        if s0.nonblank.any() and forms._names_table(list(s0.cells[int(s0.nonblank.argmax())])):
            return "table"
        return "grid" if forms._plate_for(stem, plate_ids) is not None else "workbook"
    return "unknown"


def assemble_campaign(*, manifest: bytes | None, tables: dict[str, tuple[str, bytes] | None],
                      readings: dict[str, bytes]) -> tuple[dict[str, bytes], list[Problem]]:
    """The campaign folder's files (``{name in the folder: bytes}``) and the problems of putting
    them together (a piece in an unknown format, two readings tables, grids mixed with a table).

    ``tables`` maps ``catalysts``, ``plates``, ``layout`` to ``(uploaded name, bytes)`` (or None);
    ``readings`` maps uploaded names to bytes. A missing piece is left out (the campaign check then
    says what is missing).
    """
    files: dict[str, bytes] = {}
    problems: list[Problem] = []
    if manifest is not None:
        files[MANIFEST] = manifest
    for piece in PIECES:
        got = tables.get(piece)
        if got is None:
            continue
        name, data = got
        ext = PurePosixPath(name).suffix.lower()
        if ext not in (".csv", ".xlsx"):
            problems.append(Problem(name, None, None, None, f"the {piece} table must be a .csv or .xlsx file"))
            continue
        files[f"{piece}{ext}"] = data
    ids = _plate_ids(tables.get("plates"))
    kinds = {name: classify_readings(name, data, ids) for name, data in readings.items()}
    for name, kind in kinds.items():
        if kind == "unknown":
            problems.append(Problem(name, None, None, None, "not a readings file: expected a readable .csv or .xlsx"))
    tabs = [n for n, k in kinds.items() if k in ("table", "workbook")]
    grids = [n for n, k in kinds.items() if k == "grid"]
    if len(tabs) > 1:
        problems.append(Problem(tabs[1], None, None, None,
                                f"a campaign holds one readings table or workbook; {tabs[0]} is one already "
                                "(combine them, or add the second with the planned-campaign readings flow)"))
    elif tabs and grids:
        problems.append(Problem(grids[0], None, None, None,
                                f"plate-grid files and a readings table ({tabs[0]}) together; a campaign holds "
                                "one or the other"))
    elif tabs:
        files[f"readings{PurePosixPath(tabs[0]).suffix.lower()}"] = readings[tabs[0]]
    else:
        for name in grids:
            base = PurePosixPath(name.replace("\\", "/")).name
            files[f"{READINGS_DIR}/{base}"] = readings[name]
    return files, problems


def _folder_name(files: dict[str, bytes]) -> str:
    m = re.search(rb'^\s*name\s*=\s*"([^"]*)"', files.get(MANIFEST, b""), re.MULTILINE)
    name = m.group(1).decode("utf-8", "replace") if m else "campaign"
    return re.sub(r"[^A-Za-z0-9._-]+", "-", name).strip("-") or "campaign"


def campaign_zip(files: dict[str, bytes]) -> tuple[str, bytes]:
    """(file name, bytes) of a .zip holding the campaign folder (one top-level folder named after
    the campaign), as ``screenlab ingest`` and the Import page read it back."""
    folder = _folder_name(files)
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for name in sorted(files):
            info = zipfile.ZipInfo(f"{folder}/{name}", date_time=(2026, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            zf.writestr(info, files[name])
    return f"{folder}.zip", buf.getvalue()
