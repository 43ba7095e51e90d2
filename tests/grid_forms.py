"""Readings rewritten in the forms instruments write (plate grids, workbooks of grids, sample-named
tables, a planned campaign without readings), written with the csv module and openpyxl from the
rules of docs/campaign-format.md "Other forms of readings", independently of screenlab.ingest.
A plain module the tests import by name (not a test module).
"""
from __future__ import annotations

import csv
import shutil
from pathlib import Path

import openpyxl
import pandas as pd



ROWS = "ABCDEFGHIJKLMNOP"


DIMS = {24: (4, 6), 48: (6, 8), 96: (8, 12), 384: (16, 24)}


def _csv_rows(path: Path) -> list[dict]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def _blocks(rows: list[dict], plate: str):
    """(time text, analyte or '', {well: value text}) per block, in the order times first appear."""
    out: dict[tuple, dict] = {}
    for r in rows:
        if r["plate"] == plate:
            out.setdefault((r["time"], r.get("analyte", "")), {})[r["well"]] = r["value"]
    return [(t, a, cells) for (t, a), cells in out.items()]


def grid_lines(rows: list[dict], plate: str, fmt: int, *, lower: bool = False) -> list[list[str]]:
    """One plate's readings as grid rows: an instrument header, then per block the label row, the
    header row and one row per plate row (empty cell: no reading)."""
    nr, nc = DIMS[fmt]
    out = [["Invented plate reader export"], ["Plate ID", plate], ["Read", "endpoint"], []]
    for t, a, cells in _blocks(rows, plate):
        out.append(["time", t] + (["analyte", a] if a else []))
        out.append([""] + [str(c) for c in range(1, nc + 1)])
        for r in range(nr):
            letter = ROWS[r].lower() if lower else ROWS[r]
            out.append([letter] + [cells.get(f"{ROWS[r]}{c}", "") for c in range(1, nc + 1)])
        out.append([])
    return out


def write_grid_csv(path: Path, lines: list[list[str]], *, semicolon: bool = False) -> None:
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, delimiter=";" if semicolon else ",")
        for line in lines:
            if semicolon:  # decimal commas, as a German-locale export writes them
                line = [c.replace(".", ",") if c[:1].isdigit() or c[:2] == "-0" or c[:1] == "-" else c for c in line]
            w.writerow(line)


def _number(text: str):
    try:
        return float(text)
    except ValueError:
        return text


def write_workbook(path: Path, sheets: dict[str, list[list[str]]], *, numbers: bool = True) -> None:
    wb = openpyxl.Workbook()
    wb.remove(wb.active)
    for name, lines in sheets.items():
        ws = wb.create_sheet(name)
        for i, line in enumerate(lines, start=1):
            for j, cell in enumerate(line, start=1):
                if cell != "":
                    ws.cell(row=i, column=j, value=_number(cell) if numbers and i > 4 and cell != "time" else cell)
    wb.save(path)


def copy_without_readings(src: Path, dst: Path) -> Path:
    dst.mkdir(parents=True)
    for name in ("campaign.toml", "catalysts.csv", "plates.csv", "layout.csv"):
        shutil.copy2(src / name, dst / name)
    return dst


def plate_formats(folder: Path) -> dict[str, int]:
    return {r["plate"]: int(r["format"]) for r in _csv_rows(folder / "plates.csv")}


def to_grid_folder(src: Path, dst: Path, *, xlsx_plates=(), semicolon_plates=(), lower=False) -> Path:
    """The campaign with readings/ (one file per plate) in place of readings.csv."""
    copy_without_readings(src, dst)
    rows = _csv_rows(src / "readings.csv")
    (dst / "readings").mkdir()
    for plate, fmt in plate_formats(src).items():
        lines = grid_lines(rows, plate, fmt, lower=lower)
        if plate in xlsx_plates:
            write_workbook(dst / "readings" / f"{plate}.xlsx", {"Sheet1": lines})
        else:
            write_grid_csv(dst / "readings" / f"{plate}.csv", lines, semicolon=plate in semicolon_plates)
    return dst


def to_sample_form(src: Path, dst: Path) -> Path:
    """layout.csv with a sample column (codes unique in the campaign), readings.csv by sample."""
    dst.mkdir(parents=True)
    for name in ("campaign.toml", "catalysts.csv", "plates.csv"):
        shutil.copy2(src / name, dst / name)
    layout = pd.read_csv(src / "layout.csv", dtype=str, keep_default_na=False)
    filled = layout["role"] != "empty"
    layout["sample"] = ""
    layout.loc[filled, "sample"] = [f"INJ-{i:05d}" for i in range(int(filled.sum()))]
    layout.to_csv(dst / "layout.csv", index=False)
    rd = pd.read_csv(src / "readings.csv", dtype=str, keep_default_na=False)
    rd = rd.merge(layout[["plate", "well", "sample"]], on=["plate", "well"], how="left")
    cols = ["sample", "time", "value"] + (["analyte"] if "analyte" in rd.columns else [])
    rd.sample(frac=1.0, random_state=3)[cols].to_csv(dst / "readings.csv", index=False)  # run order, not plate order
    return dst


def to_planned(src: Path, dst: Path) -> Path:
    return copy_without_readings(src, dst)
