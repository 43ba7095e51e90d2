"""Shortlist export: files, sheets, units in headers, provenance and formula neutralising."""
from __future__ import annotations

import csv

import numpy as np
import openpyxl
import pandas as pd

from screenlab.export.shortlist import write_shortlist
from screenlab.stats.quality import plate_quality
from screenlab.stats.ranking import rank_candidates
from quality_campaigns import make_campaign

from screenlab.kinetics import KineticsResult

NASTY = ['=HYPERLINK("x")', "@SUM(A1)", "+cmd", "-1.5"]


def _renamed(kin, data, mapping):
    """The campaign with some catalysts renamed (ids in every frame)."""
    def ren(f):
        return f.assign(catalyst=f["catalyst"].replace(mapping)) if "catalyst" in f else f
    k = KineticsResult(kin.amounts, ren(kin.wells), kin.blanks, ren(kin.rates), ren(kin.arrhenius), kin.orders,
                     kin.settings)
    return k, ren(data.catalysts)


def test_shortlist_files_and_neutralising(tmp_path):
    data, kin, _ = make_campaign(seed=31, n_cat=6)
    # give the four best candidates formula-like names
    order = kin.rates[kin.rates.temperature_c == 60].sort_values("tof_per_h", ascending=False)
    best = [c for c in order["catalyst"] if c != "REF"][:4]
    kin, cats = _renamed(kin, data, dict(zip(best, NASTY)))
    q = plate_quality(kin, data, kin.settings)
    r = rank_candidates(kin, q, draws=2000, catalysts=cats)
    files = pd.DataFrame({"import_id": [1, 1], "name": ["campaign.toml", "layout.csv"], "sha256": ["ab" * 32, "cd" * 32]})
    paths = write_shortlist(tmp_path, r, kin, campaign="synthetic", top_k=4, catalysts=cats, quality=q,
                            import_files=files, imports=pd.DataFrame({"import_id": [1], "source": ["=cmd|x"]}),
                            options={"at_temperature_c": 60, "draws": 2000, "seed": 0})
    assert all(p.exists() for p in paths.values())

    # CSV: raw text as a spreadsheet would see it
    with open(paths["csv"], newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert [r_["catalyst"] for r_ in rows[:4]] == ["'" + NASTY[0], "'" + NASTY[1], "'" + NASTY[2], "-1.5"]
    assert rows[4]["role"] == "reference" and rows[4]["shortlist"] == ""
    assert {"tof_per_h", "tof_ci_low_per_h", "tof_ci_high_per_h"} <= set(rows[0])

    # parquet keeps the true values
    pq = pd.read_parquet(paths["parquet"])
    assert pq["catalyst"].tolist()[:4] == NASTY
    np.testing.assert_allclose(pq["tof_per_h"].to_numpy(float), pd.to_numeric(pd.Series([r_["tof_per_h"] for r_ in rows])))

    wb = openpyxl.load_workbook(paths["xlsx"])
    assert {"shortlist", "kinetics", "arrhenius", "ranking", "plate quality", "provenance", "imports",
            "safety"} <= set(wb.sheetnames)
    ws = wb["shortlist"]
    header = [c.value for c in ws[1]]
    col = header.index("catalyst") + 1
    vals = [ws.cell(row=i, column=col).value for i in range(2, 6)]
    assert vals == ["'" + NASTY[0], "'" + NASTY[1], "'" + NASTY[2], "-1.5"]
    # no cell anywhere in the workbook is a formula
    for sheet in wb.worksheets:
        for row in sheet.iter_rows():
            for c in row:
                assert c.data_type != "f", (sheet.title, c.coordinate, c.value)
    # kinetics per temperature for every shortlisted catalyst and the benchmark
    kin_sheet = pd.read_excel(paths["xlsx"], sheet_name="kinetics", engine="openpyxl")
    assert kin_sheet.groupby("catalyst")["temperature_c"].nunique().eq(4).all()
    assert len(kin_sheet["catalyst"].unique()) == 5
    prov = pd.read_excel(paths["xlsx"], sheet_name="provenance", engine="openpyxl").set_index("item")["value"]
    assert prov["campaign"] == "synthetic" and prov["metric"] == "tof"
    assert prov["import_file.1.layout.csv"] == "cd" * 32
    assert prov["setting.zprime_min"] == "0.5" and "screenlab_version" in prov and "created_utc" in prov
    assert "local safety rules and licensed practice" in paths["safety"].read_text()
