"""The files of a small good campaign, as text, shared by the ingest tests (not a test module).

The data are invented (synthetic tests only). ``good_files()`` gives file name -> text;
``write_campaign`` writes it to a folder after applying edits.
"""
from __future__ import annotations

from pathlib import Path

GOOD_TOML = """\
[campaign]
name = "aldol test"
description = "synthetic"

[units]
time = "min"
concentration = "mM"
volume = "uL"

[readout]
kind = "conversion"
scale = "percent"
product_per_substrate = 1.0

[analysis]
reference_temperature_c = 60
"""

GOOD_CATALYSTS = """\
catalyst,name,family,molar_mass_g_mol,sites_per_unit,metal_wt_pct,metal_molar_mass_g_mol,dispersion
C1,Proline,amino acid,115.13,1,,,
C2,Pd/C,supported,,,5,106.42,0.3
REF,Benchmark,amine,300,2,,,
"""

GOOD_PLATES = """\
plate,format,temperature_c,run_date,notes
P1,96,60,2026-03-01,first
P2,24,80,,
"""

GOOD_LAYOUT = """\
plate,well,role,catalyst,loading,loading_unit,substrate_conc,volume,temperature_c,solvent
P1,A1,sample,C1,1.5,umol,100,200,,DMSO
P1,A2,sample,C2,2,mg,100,200,,DMSO
P1,A3,reference,REF,5,mol%,100,200,,MeCN
P1,A4,blank,,,,100,200,,DMSO
P1,A5,empty,,,,,,,
P1,H12,sample,C1,1.5,umol,50,200,65,DMSO
P2,A1,sample,C1,1.5,umol,100,150,,DMSO
P2,D6,blank,,,,100,150,,DMSO
"""


def good_readings() -> str:
    lines = ["plate,well,time,value"]
    wells = [("P1", "A1"), ("P1", "A2"), ("P1", "A3"), ("P1", "A4"), ("P1", "H12"), ("P2", "A1"), ("P2", "D6")]
    for k, (p, w) in enumerate(wells):
        for t in (0, 10, 20, 40):
            lines.append(f"{p},{w},{t},{min(100.0, t * (k + 1) * 0.25):g}")
    return "\n".join(lines) + "\n"


def good_files() -> dict[str, str]:
    return {"campaign.toml": GOOD_TOML, "catalysts.csv": GOOD_CATALYSTS, "plates.csv": GOOD_PLATES,
            "layout.csv": GOOD_LAYOUT, "readings.csv": good_readings()}


def edited_files(files: dict[str, str | bytes] | None = None, **edits) -> dict[str, bytes]:
    """The good campaign's files (or ``files``) as bytes, with ``edits`` replacing files by key with
    '.' as '_' (layout_csv=...); a value of None removes the file."""
    content = dict(good_files() if files is None else files)
    for key, val in edits.items():
        name = key.replace("_csv", ".csv").replace("_xlsx", ".xlsx").replace("_toml", ".toml")
        if val is None:
            content.pop(name, None)
        else:
            content[name] = val
    return {k: (v if isinstance(v, bytes) else v.encode("utf-8")) for k, v in content.items()}


def write_campaign(folder: Path, files: dict[str, str | bytes] | None = None, **edits) -> Path:
    """Write a campaign folder of :func:`edited_files`."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, data in edited_files(files, **edits).items():
        (folder / name).write_bytes(data)
    return folder
