"""One test per validation message of screenlab.ingest (each names file, row, column).

Campaigns are built in memory from the synthetic good campaign of tests/campaign_texts.py and fed
to read_campaign as an upload dict (file name -> bytes), the same path the app uses.
"""
from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest
from campaign_texts import GOOD_CATALYSTS, GOOD_LAYOUT, GOOD_PLATES, GOOD_TOML, edited_files, good_readings
from hypothesis import given, settings
from hypothesis import strategies as st

from screenlab import plates as platelib
from screenlab.errors import ValidationError
from screenlab.ingest import read_campaign
from screenlab.ingest import validate as v
from screenlab.ingest.tables import RawTable, read_table
from screenlab.model import ROLES


def files(**edits) -> dict[str, bytes]:
    return edited_files(**edits)


def problems(**edits):
    with pytest.raises(ValidationError) as ei:
        read_campaign(files(**edits))
    return ei.value.problems


def find(probs, file, message, *, row="any", column="any"):
    """The problems of ``file`` whose message matches the regex ``message`` (and row/column if given)."""
    hits = [p for p in probs if p.file == file and re.search(message, p.message)
            and (row == "any" or p.row == row) and (column == "any" or p.column == column)]
    assert hits, f"no problem {file!r} {message!r} row={row} column={column}; got:\n" + "\n".join(map(str, probs))
    return hits


def replace_line(text: str, lineno: int, new: str) -> str:
    """Replace 1-based line ``lineno`` of ``text`` (header = line 1)."""
    lines = text.splitlines()
    lines[lineno - 1] = new
    return "\n".join(lines) + "\n"


def add_lines(text: str, *new: str) -> str:
    return text.rstrip("\n") + "\n" + "\n".join(new) + "\n"


def toml_with(old: str, new: str) -> str:
    assert old in GOOD_TOML
    return GOOD_TOML.replace(old, new)


# ----------------------------------------------------------------------------------- campaign.toml
def test_malformed_toml_reports_its_line():
    bad = GOOD_TOML.replace('time = "min"', 'time = "min')
    (p,) = find(problems(campaign_toml=bad), "campaign.toml", "malformed TOML")
    assert p.row == 6  # the unterminated string is on line 6


def test_missing_required_table_and_keys():
    probs = problems(campaign_toml=GOOD_TOML.replace('name = "aldol test"\n', "").replace('kind = "conversion"\n', ""))
    find(probs, "campaign.toml", "missing required key 'name'", column="campaign.name")
    find(probs, "campaign.toml", "missing required key 'kind'", column="readout.kind")
    probs = problems(campaign_toml='[campaign]\nname = "x"\n')
    find(probs, "campaign.toml", r"missing required table \[units\]")
    find(probs, "campaign.toml", r"missing required table \[readout\]")


def test_empty_campaign_name():
    find(problems(campaign_toml=toml_with('name = "aldol test"', 'name = "  "')), "campaign.toml",
         "campaign name must not be empty", row=2)


def test_unknown_units():
    probs = problems(campaign_toml=toml_with('time = "min"', 'time = "fortnight"').replace('volume = "uL"', 'volume = "gal"'))
    find(probs, "campaign.toml", "unknown time unit", row=6, column="units.time")
    find(probs, "campaign.toml", "unknown volume unit", column="units.volume")
    find(problems(campaign_toml=toml_with('concentration = "mM"', 'concentration = "ppm"')), "campaign.toml",
         "unknown concentration unit")


def test_unknown_readout_kind_and_scale():
    find(problems(campaign_toml=toml_with('kind = "conversion"', 'kind = "colour"')), "campaign.toml",
         "unknown readout kind", column="readout.kind")
    find(problems(campaign_toml=toml_with('scale = "percent"', 'scale = "permille"')), "campaign.toml",
         "unknown readout scale", column="readout.scale")
    find(problems(campaign_toml=toml_with('scale = "percent"\n', "")), "campaign.toml",
         "missing required key 'scale'")


def test_absorbance_needs_positive_epsilon_and_path_length():
    t = toml_with('kind = "conversion"\nscale = "percent"', 'kind = "absorbance"')
    probs = problems(campaign_toml=t)
    find(probs, "campaign.toml", "needs 'epsilon_M_cm' > 0", column="readout.epsilon_M_cm")
    find(probs, "campaign.toml", "needs 'path_length_cm' > 0", column="readout.path_length_cm")
    t2 = t.replace('kind = "absorbance"', 'kind = "absorbance"\nepsilon_M_cm = -5\npath_length_cm = "thin"')
    probs = problems(campaign_toml=t2)
    find(probs, "campaign.toml", "'epsilon_M_cm' must be a number > 0")
    find(probs, "campaign.toml", "'path_length_cm' must be a number > 0")


def test_product_per_substrate_must_be_positive():
    find(problems(campaign_toml=toml_with("product_per_substrate = 1.0", "product_per_substrate = 0")),
         "campaign.toml", "product_per_substrate must be a number > 0", row=13)


def test_analysis_settings_are_checked():
    probs = problems(campaign_toml=GOOD_TOML + "confidense = 0.9\nconfidence = \"high\"\n")
    find(probs, "campaign.toml", "unknown analysis setting", column="analysis.confidense")
    find(probs, "campaign.toml", "analysis settings must be numbers", column="analysis.confidence")
    # the ranges are the settings' own (screenlab.settings.setting_problem), with the line
    probs = problems(campaign_toml=GOOD_TOML + "confidence = 7\nconversion_window_pct = -5\n")
    find(probs, "campaign.toml", r"confidence = 7 is out of range", column="analysis.confidence")
    find(probs, "campaign.toml", r"conversion_window_pct = -5 is out of range", column="analysis.conversion_window_pct")


def test_table_that_is_not_a_table():
    find(problems(campaign_toml='units = "mM"\n' + GOOD_TOML.replace("[units]\n", "[unitz]\n")), "campaign.toml",
         "'units' must be a table")


# ----------------------------------------------------------------------------------- files and headers
def test_missing_files_are_all_listed():
    probs = problems(layout_csv=None, catalysts_csv=None)
    find(probs, "layout.csv", "missing file")
    find(probs, "catalysts.csv", "missing file")
    find(problems(campaign_toml=None), "campaign.toml", "missing file")
    find(problems(plates_csv=None), "plates.csv", "missing file")


def test_a_planned_campaign_without_readings_is_accepted():
    # the next-round folder has no readings yet: the layout imports, the readings frame is empty
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = read_campaign(files(readings_csv=None))
    assert res.data.readings.empty and list(res.data.readings.columns) == ["plate", "well", "analyte", "time_h", "value"]
    assert any("planned campaign" in n for n in res.notes)


def test_empty_file_and_header_only_file():
    find(problems(catalysts_csv=""), "catalysts.csv", "the file is empty")
    find(problems(catalysts_csv="\n\n  \n"), "catalysts.csv", "the file is empty")
    find(problems(plates_csv="plate,format,temperature_c\n"), "plates.csv", "header but no data rows")
    # a readings file without rows is refused too (it may be an export that went wrong), and the
    # message says how a round that has not run yet is imported
    (p,) = find(problems(readings_csv="plate,well,time,value\n"), "readings.csv", "header but no data rows")
    assert "leave the readings out" in p.message and "add-readings" in p.message


def test_missing_required_columns_listed_at_once():
    bad = "\n".join(",".join(c for i, c in enumerate(line.split(",")) if i not in (1, 6, 7))
                    for line in GOOD_LAYOUT.splitlines()) + "\n"
    (p,) = find(problems(layout_csv=bad), "layout.csv", "missing required columns: well, substrate_conc, volume")
    assert p.row == 1


def test_missing_catalyst_columns_when_samples_exist():
    bad = "\n".join(",".join(c for i, c in enumerate(line.split(",")) if i not in (4, 5))
                    for line in GOOD_LAYOUT.splitlines()) + "\n"
    find(problems(layout_csv=bad), "layout.csv", "sample and reference wells need the columns loading, loading_unit")


def test_duplicate_header_names():
    bad = GOOD_PLATES.replace("plate,format,temperature_c,run_date,notes", "plate,format,Temperature_C,run_date,temperature_c")
    find(problems(plates_csv=bad), "plates.csv", "duplicate header name", row=1, column="temperature_c")


def test_values_under_an_empty_header():
    bad = GOOD_PLATES.replace("run_date,notes", "run_date,notes,").replace("first", "first,oops")
    find(problems(plates_csv=bad), "plates.csv", "column 6 has values but no header name", row=2)


def test_unclosed_quote_names_its_row():
    rd = good_readings().splitlines()
    rd[4] = 'P1,A1,"40,3'
    find(problems(readings_csv="\n".join(rd) + "\n"), "readings.csv", "never closed", row=5)


def test_csv_and_xlsx_both_present():
    f = files()
    f["plates.xlsx"] = b"whatever"
    with pytest.raises(ValidationError, match="both plates.csv and plates.xlsx are present"):
        read_campaign(f)


def test_unreadable_workbook():
    f = files(plates_csv=None)
    f["plates.xlsx"] = b"this is not a zip workbook"
    with pytest.raises(ValidationError, match=r"plates.xlsx: cannot be read as an Excel workbook"):
        read_campaign(f)


# ----------------------------------------------------------------------------------- catalysts.csv
def test_catalyst_ids_missing_and_duplicate():
    probs = problems(catalysts_csv=add_lines(GOOD_CATALYSTS, "C1,again,,100,,,,", ",nameless,,100,,,,"))
    (p,) = find(probs, "catalysts.csv", r"duplicate catalyst id \(first on row 2\)", row=5, column="catalyst")
    assert p.value == "C1"
    find(probs, "catalysts.csv", "a catalyst id is required", row=6)


def test_the_background_row_name_is_reserved():
    # "(uncatalysed)" names the blanks' rows of the analysis tables; a catalyst of that id would
    # collide with them, so it is refused with file, row and column
    probs = problems(catalysts_csv=add_lines(GOOD_CATALYSTS, "(Uncatalysed),a clash,,100,,,,"))
    (p,) = find(probs, "catalysts.csv", r"'\(uncatalysed\)' is reserved", row=5, column="catalyst")
    assert p.value == "(Uncatalysed)"


def test_non_numeric_and_non_finite_numbers():
    probs = problems(catalysts_csv=replace_line(GOOD_CATALYSTS, 2, "C1,Proline,amino acid,abc,inf,,,"))
    find(probs, "catalysts.csv", "is not a number", row=2, column="molar_mass_g_mol")
    find(probs, "catalysts.csv", "is not a finite number", row=2, column="sites_per_unit")
    probs = problems(catalysts_csv=replace_line(GOOD_CATALYSTS, 2, "C1,Proline,amino acid,NaN,,,,"))
    find(probs, "catalysts.csv", "is not a finite number", column="molar_mass_g_mol")


def test_catalyst_number_ranges():
    probs = problems(catalysts_csv=replace_line(GOOD_CATALYSTS, 3, "C2,Pd/C,supported,-1,0,150,0,1.5"))
    find(probs, "catalysts.csv", "molar mass must be > 0", row=3)
    find(probs, "catalysts.csv", "sites_per_unit must be > 0", row=3)
    find(probs, "catalysts.csv", r"metal_wt_pct must be > 0 and <= 100", row=3)
    find(probs, "catalysts.csv", "metal molar mass must be > 0", row=3)
    find(probs, "catalysts.csv", r"dispersion must be in \(0, 1\]", row=3)
    probs = problems(catalysts_csv=replace_line(GOOD_CATALYSTS, 3, "C2,Pd/C,supported,,,5,,0"))
    find(probs, "catalysts.csv", r"dispersion must be in \(0, 1\]", row=3)


def test_metal_wt_pct_needs_metal_molar_mass():
    probs = problems(catalysts_csv=replace_line(GOOD_CATALYSTS, 3, "C2,Pd/C,supported,,,5,,0.3"))
    find(probs, "catalysts.csv", "metal_molar_mass_g_mol is needed too", row=3, column="metal_molar_mass_g_mol")


# ----------------------------------------------------------------------------------- plates.csv
def test_plate_ids_missing_and_duplicate():
    probs = problems(plates_csv=add_lines(GOOD_PLATES, "P1,96,60,,", ",96,60,,"))
    find(probs, "plates.csv", r"duplicate plate id \(first on row 2\)", row=4)
    find(probs, "plates.csv", "a plate id is required", row=5)


@pytest.mark.parametrize("fmt", ["12", "1536", "95.5", "ninety-six"])
def test_format_must_be_a_known_well_count(fmt):
    probs = problems(plates_csv=replace_line(GOOD_PLATES, 3, f"P2,{fmt},80,,"))
    hits = [p for p in probs if p.file == "plates.csv" and p.row == 3 and p.column == "format"]
    assert hits and re.search(r"format must be 24, 48, 96 or 384|is not a number", hits[0].message)


def test_plate_temperature_below_absolute_zero_and_implausible():
    probs = problems(plates_csv=replace_line(GOOD_PLATES, 2, "P1,96,-300,2026-03-01,x"))
    find(probs, "plates.csv", r"below absolute zero \(-273.15 degC\)", row=2)
    probs = problems(plates_csv=replace_line(GOOD_PLATES, 2, "P1,96,333.15,2026-03-01,x"))
    (p,) = find(probs, "plates.csv", "outside the plausible range", row=2)
    assert "-100 to 300 degC" in p.message  # the range is stated in the message
    find(problems(plates_csv=replace_line(GOOD_PLATES, 2, "P1,96,,2026-03-01,x")), "plates.csv",
         "plate temperature is required", row=2)


def test_run_date_must_be_iso():
    find(problems(plates_csv=replace_line(GOOD_PLATES, 2, "P1,96,60,03/31/2026,x")), "plates.csv",
         "run_date must be an ISO date", row=2, column="run_date")


# ----------------------------------------------------------------------------------- layout.csv
def L(line: int, new: str) -> dict:
    return {"layout_csv": replace_line(GOOD_LAYOUT, line, new)}


def test_unknown_and_missing_role():
    find(problems(**L(2, "P1,A1,catalyst,C1,1.5,umol,100,200,,DMSO")), "layout.csv", "unknown role", row=2)
    find(problems(**L(2, "P1,A1,,C1,1.5,umol,100,200,,DMSO")), "layout.csv", "a role is required", row=2)


def test_unknown_plate_in_layout():
    find(problems(**L(2, "P9,A1,sample,C1,1.5,umol,100,200,,DMSO")), "layout.csv", r"unknown plate \(not in plates.csv\)",
         row=2, column="plate")


def test_unparsable_well():
    for bad in ("Q1", "A0", "1A", "AA1", ""):
        find(problems(**L(2, f"P1,{bad},sample,C1,1.5,umol,100,200,,DMSO")), "layout.csv", "not a well name", row=2)


def test_well_outside_plate_format():
    (p,) = find(problems(**L(8, "P2,E1,sample,C1,1.5,umol,100,150,,DMSO")), "layout.csv", "outside the plate's 24-well",
                row=8, column="well")
    assert "rows A-D, columns 1-6" in p.message


def test_duplicate_wells_in_layout():
    # 'a01' is the same position as A1
    find(problems(layout_csv=add_lines(GOOD_LAYOUT, "P1,a01,blank,,,,100,200,,DMSO")), "layout.csv",
         r"duplicate well in the layout \(first on row 2\)", row=10)


def test_sample_needs_catalyst_loading_and_unit():
    probs = problems(**L(2, "P1,A1,sample,,,,100,200,,DMSO"))
    find(probs, "layout.csv", "needs a catalyst", row=2, column="catalyst")
    find(probs, "layout.csv", "needs a loading", row=2, column="loading")
    find(probs, "layout.csv", "needs a loading_unit", row=2, column="loading_unit")


def test_unknown_catalyst():
    find(problems(**L(2, "P1,A1,sample,C7,1.5,umol,100,200,,DMSO")), "layout.csv", "unknown catalyst", row=2)


def test_blank_with_a_catalyst():
    find(problems(**L(5, "P1,A4,blank,C1,,,100,200,,DMSO")), "layout.csv", "a blank well must not name a catalyst", row=5)


@pytest.mark.parametrize("word", ["-", "None", " n/a ", "(uncatalysed)", "no catalyst"])
def test_a_blank_saying_it_has_no_catalyst_is_read_as_empty(word):
    """What a chemist writes in a blank's catalyst cell to say "none" is read as empty."""
    res = read_campaign(files(layout_csv=replace_line(GOOD_LAYOUT, 5, f"P1,A4,blank,{word},,,100,200,,DMSO")))
    w = res.data.wells
    assert w.loc[(w["plate"] == "P1") & (w["well"] == "A4"), "catalyst"].isna().all()


def test_loading_must_be_positive_and_unit_known():
    probs = problems(**L(2, "P1,A1,sample,C1,0,mmol,100,200,,DMSO"))
    find(probs, "layout.csv", "loading must be > 0", row=2)
    find(probs, "layout.csv", "unknown loading unit", row=2, column="loading_unit")


def test_substrate_conc_and_volume_required_and_positive():
    probs = problems(**L(5, "P1,A4,blank,,,,,,,DMSO"))
    find(probs, "layout.csv", "substrate_conc is required for every well except empty ones", row=5)
    find(probs, "layout.csv", "volume is required for every well except empty ones", row=5)
    probs = problems(**L(2, "P1,A1,sample,C1,1.5,umol,-1,0,,DMSO"))
    find(probs, "layout.csv", "substrate_conc must be > 0", row=2)
    find(probs, "layout.csv", "volume must be > 0", row=2)


def test_mg_loading_without_molar_mass():
    cats = replace_line(GOOD_CATALYSTS, 2, "C1,Proline,amino acid,,1,,,")
    probs = problems(catalysts_csv=cats, layout_csv=replace_line(GOOD_LAYOUT, 2, "P1,A1,sample,C1,1.5,mg,100,200,,DMSO"))
    find(probs, "layout.csv", "an mg loading needs molar_mass_g_mol", row=2)


def test_mol_pct_loading_without_substrate():
    probs = problems(**L(4, "P1,A3,reference,REF,5,mol%,,200,,MeCN"))
    find(probs, "layout.csv", "a mol% loading needs a substrate_conc > 0", row=4)


def test_well_temperature_override_checked():
    find(problems(**L(7, "P1,H12,sample,C1,1.5,umol,50,200,-280,DMSO")), "layout.csv", "below absolute zero", row=7,
         column="temperature_c")
    find(problems(**L(7, "P1,H12,sample,C1,1.5,umol,50,200,350,DMSO")), "layout.csv", "plausible range", row=7)


def test_reserved_factor_name():
    bad = GOOD_LAYOUT.replace(",solvent\n", ",row\n", 1)
    find(problems(layout_csv=bad), "layout.csv", "cannot be a factor column name", column="row")


# ----------------------------------------------------------------------------------- readings.csv
def R(*extra: str) -> dict:
    return {"readings_csv": add_lines(good_readings(), *extra)}


def test_reading_unknown_plate_bad_well_and_not_in_layout():
    probs = problems(**R("P9,A1,0,1", "P1,Z9,0,1", "P1,B7,0,1"))
    find(probs, "readings.csv", "unknown plate", row=30)
    find(probs, "readings.csv", "not a well name", row=31)
    find(probs, "readings.csv", "reading for a well that is not in layout.csv", row=32)


def test_a_plate_id_in_the_wrong_letter_case_is_refused_with_the_id_meant():
    # plate ids match exactly (a readings file may name plates of several campaigns); the message
    # says which id of plates.csv differs only in case, in readings.csv and in layout.csv alike
    probs = problems(**R("p1,A1,5,1"))
    hit = find(probs, "readings.csv", r"unknown plate \(not in plates.csv; plates.csv has 'P1'", row=30, column="plate")
    assert hit[0].value == "p1"
    find(problems(**L(2, "p1,A1,sample,C1,1.5,umol,100,200,,DMSO")), "layout.csv", "plates.csv has 'P1'", row=2)
    # an id that matches none, in any case, keeps the plain message
    plain = find(problems(**R("P9,A1,0,1")), "readings.csv", "unknown plate", row=30)
    assert plain[0].message == "unknown plate (not in plates.csv)"


def test_reading_on_empty_well():
    find(problems(**R("P1,A5,0,1")), "readings.csv", "reading on a well marked empty", row=30)


def test_negative_and_non_finite_times():
    probs = problems(**R("P1,A1,-5,1", "P1,A1,inf,1", "P1,A1,,2"))
    find(probs, "readings.csv", "time must be >= 0", row=30)
    find(probs, "readings.csv", "is not a finite number", row=31, column="time")
    find(probs, "readings.csv", "a time is required", row=32)


def test_duplicate_readings():
    # 10 min written as 10.0 is the same time
    find(problems(**R("P1,a01,10.0,3")), "readings.csv", r"duplicate reading .* \(first on row 3\)", row=30)


def test_percent_over_full_scale_is_taken_as_measured_up_to_110():
    # GC / HPLC yields overshoot 100 % near full conversion (integration noise): up to 110 % of full
    # scale is a measurement (flagged by the kinetics), beyond it or clearly below zero it cannot be
    # right (common practice, no source)
    probs = problems(**R("P1,A1,50,102.2", "P1,A1,60,109.9", "P1,A1,70,-3", "P1,A1,80,110.5",
                         "P1,A1,90,-7"))
    rows = {p.row for p in probs if re.search(r"must lie in -5..110", p.message)}
    assert rows == {33, 34}


def test_fraction_out_of_range():
    t = toml_with('scale = "percent"', 'scale = "fraction"')
    probs = problems(campaign_toml=t)  # the good readings go up to 40 %, i.e. 40 as a fraction
    hits = find(probs, "readings.csv", r"fractional conversion must lie in -0.05..1.1")
    assert all(float(p.value) > 1.10 for p in hits)


def test_negative_product_concentration_beyond_noise():
    t = toml_with('kind = "conversion"\nscale = "percent"', 'kind = "product_conc"')
    # largest substrate 100 mM -> tolerance 2 mM
    probs = problems(campaign_toml=t, readings_csv=add_lines(good_readings(), "P1,A1,50,-1.5", "P1,A1,60,-2.5"))
    hits = find(probs, "readings.csv", "negative product concentration beyond noise")
    assert [p.row for p in hits] == [31]


def test_absorbance_out_of_range():
    t = toml_with('kind = "conversion"\nscale = "percent"', 'kind = "absorbance"\nepsilon_M_cm = 18000\npath_length_cm = 0.5')
    rd = "plate,well,time,value\nP1,A1,0,0.02\nP1,A1,10,-0.5\nP1,A1,20,12\nP1,A1,30,-0.05\n"
    hits = find(problems(campaign_toml=t, readings_csv=rd), "readings.csv", r"absorbance outside -0.1..10")
    assert [p.row for p in hits] == [3, 4]


def test_absorbance_linear_range_key():
    base = toml_with('kind = "conversion"\nscale = "percent"',
                     'kind = "absorbance"\nepsilon_M_cm = 18000\npath_length_cm = 0.5')
    rd = "plate,well,time,value\nP1,A1,0,0.02\nP1,A1,10,3.4\n"
    # above the linear range is still a measurement: imported (the kinetics flag and skip it)
    res = read_campaign(files(campaign_toml=base.replace("path_length_cm = 0.5",
                                                         "path_length_cm = 0.5\nlinear_range_max = 2.5"),
                              readings_csv=rd))
    assert res.data.manifest.linear_range_max == 2.5 and res.data.manifest.absorbance_linear_max == 2.5
    assert read_campaign(files(campaign_toml=base, readings_csv=rd)).data.manifest.absorbance_linear_max == 3.0
    bad = base.replace("path_length_cm = 0.5", "path_length_cm = 0.5\nlinear_range_max = -1")
    find(problems(campaign_toml=bad, readings_csv=rd), "campaign.toml", "'linear_range_max' must be an absorbance > 0",
         column="readout.linear_range_max")
    other = toml_with('scale = "percent"', 'scale = "percent"\nlinear_range_max = 2')
    find(problems(campaign_toml=other), "campaign.toml", "applies to an absorbance readout only")


def test_missing_value():
    find(problems(**R("P1,A1,50,")), "readings.csv", "a value is required", row=30)


def test_plate_without_blank_is_not_an_error():
    lay = "\n".join(line for line in GOOD_LAYOUT.splitlines() if "blank" not in line) + "\n"
    rd = "\n".join(line for line in good_readings().splitlines() if "A4" not in line and "D6" not in line) + "\n"
    res = read_campaign(files(layout_csv=lay, readings_csv=rd))
    assert (res.data.wells["role"] != "blank").all()


# ----------------------------------------------------------------------------------- analytes
ANALYTE_TOML = toml_with('kind = "conversion"\nscale = "percent"', 'kind = "yield"\nscale = "percent"') + \
    '\n[analytes]\nmain = "P"\nbyproducts = ["B1"]\n'


def analyte_readings(names=("P", "B1")) -> str:
    lines = ["plate,well,time,value,analyte"]
    for line in good_readings().splitlines()[1:]:
        for a in names:
            lines.append(f"{line},{a}")
    return "\n".join(lines) + "\n"


def test_analytes_read_when_declared():
    res = read_campaign(files(campaign_toml=ANALYTE_TOML, readings_csv=analyte_readings()))
    assert set(res.data.readings["analyte"]) == {"P", "B1"}
    assert res.data.manifest.analyte_main == "P" and res.data.manifest.byproducts == ("B1",)


def test_analyte_column_required_when_declared_and_vice_versa():
    find(problems(campaign_toml=ANALYTE_TOML), "readings.csv", "needs an analyte column", column="analyte")
    t = toml_with('kind = "conversion"\nscale = "percent"', 'kind = "yield"\nscale = "percent"')
    find(problems(campaign_toml=t, readings_csv=analyte_readings()), "readings.csv",
         "declares no \\[analytes\\] table")


def test_unknown_and_missing_analyte_names():
    rd = add_lines(analyte_readings(), "P1,A1,50,3,B2", "P1,A1,60,3,")
    probs = problems(campaign_toml=ANALYTE_TOML, readings_csv=rd)
    find(probs, "readings.csv", "unknown analyte; campaign.toml \\[analytes\\] declares B1, P", row=58, column="analyte")
    find(probs, "readings.csv", "an analyte name is required", row=59)


ENANT_TOML = ANALYTE_TOML.replace('byproducts = ["B1"]', 'byproducts = ["B1"]\nenantiomers = ["P_R", "P_S"]')


def test_enantiomers_declared_but_not_read_and_main_read():
    probs = problems(campaign_toml=ENANT_TOML, readings_csv=analyte_readings(("P", "P_R", "B1")))
    find(probs, "readings.csv", "enantiomer 'P_S' is declared in campaign.toml but never read")
    hits = find(probs, "readings.csv", "is the sum of the enantiomers")
    assert hits[0].row == 2
    res = read_campaign(files(campaign_toml=ENANT_TOML, readings_csv=analyte_readings(("P_R", "P_S", "B1"))))
    assert res.data.manifest.enantiomers == ("P_R", "P_S")


def test_enantiomers_must_be_two_distinct_names():
    find(problems(campaign_toml=ANALYTE_TOML.replace('byproducts = ["B1"]', 'enantiomers = ["R"]'),
                  readings_csv=analyte_readings(("P",))), "campaign.toml", "exactly two")
    find(problems(campaign_toml=ANALYTE_TOML.replace('["B1"]', '["P"]'), readings_csv=analyte_readings(("P",))),
         "campaign.toml", "must all differ")
    find(problems(campaign_toml=ANALYTE_TOML.replace('["B1"]', '"B1"'), readings_csv=analyte_readings()),
         "campaign.toml", "must be a list of analyte names")


def test_conversion_readout_with_several_analytes():
    t = ANALYTE_TOML.replace('kind = "yield"', 'kind = "conversion"')
    find(problems(campaign_toml=t, readings_csv=analyte_readings()), "campaign.toml",
         "several analytes need a yield or product_conc readout")
    t = toml_with('kind = "conversion"\nscale = "percent"', 'kind = "absorbance"\nepsilon_M_cm = 1e4\npath_length_cm = 1')
    find(problems(campaign_toml=t, readings_csv=analyte_readings()), "readings.csv",
         "a absorbance readout gives one value per well and time")


# ----------------------------------------------------------------------------------- all at once
def test_every_problem_is_reported_and_message_capped_at_50():
    # 70 different bad values (the same value on many rows would be one line with its rows)
    rd = add_lines(good_readings(), *[f"P1,A1,{100 + i},{-50 - i}" for i in range(70)])
    with pytest.raises(ValidationError) as ei:
        read_campaign(files(readings_csv=rd, plates_csv=replace_line(GOOD_PLATES, 2, "P1,97,60,,")))
    err = ei.value
    assert len(err.problems) >= 71
    assert "... and" in str(err) and str(err).count("\n  - ") == 50
    assert any(p.file == "plates.csv" for p in err.problems)


# ----------------------------------------------------------------------------------- rules on random tables
# The layout and readings checks on random tables (hypothesis) against each rule stated in a few
# plain pandas lines: which rows a problem names, and the frame the check builds (rows, order and
# values). The references are pandas (``isin``, ``duplicated``, ``merge``, ``to_numeric``,
# ``sort_values``) and screenlab.plates.parse_wells for well names (tested in test_units_plates.py).

RULE_PLATES = "plate,format,temperature_c\nP1,96,40\nP2,24,50\nP 3,384,60\n"
RULE_CATALYSTS = "catalyst,molar_mass_g_mol\nC1,350\nC2,410\nREF,412.5\n"
NUMBERS = ["1", "0.5", "2,5", "-1", "0", "", "na", "N/A", "nan", "inf", "x", "1e3", " 3 "]


def _rows(problems, message: str) -> set[int]:
    """Rows (file row numbers) of the problems whose message starts with ``message``."""
    return {p.row for p in problems if p.message.startswith(message)}


def _numbers(raw: pd.Series, decimal_comma: bool) -> np.ndarray:
    """A numeric cell as pandas reads it (NaN for blank words, text and non-finite values)."""
    text = raw.str.replace(",", ".", regex=False) if decimal_comma else raw
    x = pd.to_numeric(text.where(~raw.str.lower().isin(v.NA_WORDS)), errors="coerce").to_numpy(dtype=float)
    return np.where(np.isfinite(x), x, np.nan)


def _plates_and_catalysts():
    plates, _ = v.check_plates(read_table("plates.csv", RULE_PLATES.encode(), []), [])
    catalysts, _ = v.check_catalysts(read_table("catalysts.csv", RULE_CATALYSTS.encode(), []), [])
    return plates, catalysts


_LAYOUT_ROW = st.fixed_dictionaries({
    "plate": st.sampled_from(["P1", "P2", "P 3", "PX", "", "p1"]),
    "well": st.sampled_from(["A1", "A2", "B3", "H12", "a01", " b2 ", "Z99", "", "H13", "P24", "A 1"]),
    "role": st.sampled_from(["sample", "Sample", "blank", "BLANK", "reference", "empty", "", "smaple"]),
    "catalyst": st.sampled_from(["C1", "C2", "REF", "CX", "", "-", "None", "(uncatalysed)"]),
    "loading": st.sampled_from(NUMBERS),
    "loading_unit": st.sampled_from(["umol", "µmol", "mg", "mol%", "kg", ""]),
    "substrate_conc": st.sampled_from(NUMBERS),
    "volume": st.sampled_from(NUMBERS),
    "temperature_c": st.sampled_from(["", "45", "x"]),
    "solvent": st.sampled_from(["toluene", "THF", ""]),
})


@given(rows=st.lists(_LAYOUT_ROW, max_size=40), delim=st.sampled_from([",", ";"]), presorted=st.booleans())
@settings(max_examples=80, deadline=None)
def test_layout_rules_on_random_tables(rows, delim, presorted):
    header = ["plate", "well", "role", "catalyst", "loading", "loading_unit", "substrate_conc", "volume",
              "temperature_c", "solvent"]
    lines = [delim.join(r[c].replace(delim, ".") for c in header) for r in rows]  # "2,5" only with ";"
    if presorted:  # as a writer would: plate by plate
        lines.sort()
    data = (delim.join(header) + "\n" + "\n".join(lines) + "\n").encode()
    plates, catalysts = _plates_and_catalysts()
    problems: list = []
    t = read_table("layout.csv", data, problems)
    wells, factors = v.check_layout(t, problems, plates=plates, catalysts=catalysts, conc_factor=1.0,
                                    volume_factor=1e3)
    f, rowno = t.frame, t.rows
    role = f["role"].str.lower()
    parsed = platelib.parse_wells(f["well"].to_numpy(dtype=object))
    known = f["plate"].isin(plates["plate"])
    cat = role.isin(["sample", "reference"])
    at = lambda mask: set(rowno[np.asarray(mask, dtype=bool)].tolist())  # noqa: E731
    # which rows each rule names
    assert _rows(problems, "a role is required") == at(role == "")
    assert _rows(problems, "unknown role") == at((role != "") & ~role.isin(ROLES))
    assert _rows(problems, "a plate id is required") == at(f["plate"] == "")
    assert _rows(problems, "unknown plate") == at((f["plate"] != "") & ~known)
    assert _rows(problems, "not a well name") == at(parsed["well"].isna())
    # a blank may say it has no catalyst in words ("-", "none", the background's own name)
    says_none = f["catalyst"].str.strip().str.lower().isin(["-", "none", "(uncatalysed)"])
    assert _rows(problems, "a blank well must not name a catalyst") == at((role == "blank") & (f["catalyst"] != "")
                                                                          & ~says_none)
    known_cat = f["catalyst"].isin(["C1", "C2", "REF"])
    assert _rows(problems, "unknown catalyst") == at(cat & (f["catalyst"] != "") & ~known_cat)
    valid = parsed["well"].notna().to_numpy() & (f["plate"] != "").to_numpy()
    keyed = pd.DataFrame({"plate": f["plate"], "well": parsed["well"], "row": rowno})[valid]
    dup = keyed.duplicated(["plate", "well"], keep="first")
    first = keyed.groupby(["plate", "well"])["row"].transform("first")
    want = {(int(r), f"duplicate well in the layout (first on row {int(fr)})")
            for r, fr in zip(keyed["row"][dup], first[dup])}
    assert {(p.row, p.message) for p in problems if p.message.startswith("duplicate well")} == want
    assert factors == ("solvent",)
    # the frame: every row, sorted by plate (text), row and column; numbers in canonical units; a
    # well's own temperature, else its plate's
    own_t = _numbers(f["temperature_c"], t.decimal_comma)
    plate_t = f["plate"].map(dict(zip(plates["plate"], plates["temperature_c"]))).to_numpy(dtype=float)
    ref = pd.DataFrame({"plate": f["plate"], "well": parsed["well"], "row": parsed["row"], "col": parsed["col"],
                        "role": role,
                        "conc": np.where(role == "empty", np.nan, _numbers(f["substrate_conc"], t.decimal_comma)),
                        "vol": np.where(role == "empty", np.nan, _numbers(f["volume"], t.decimal_comma) * 1e3),
                        "loading": np.where(cat, _numbers(f["loading"], t.decimal_comma), np.nan),
                        "solvent": f["solvent"], "temperature_c": np.where(np.isfinite(own_t), own_t, plate_t)})
    ref = ref.sort_values(["plate", "row", "col"], kind="stable").reset_index(drop=True)
    assert wells["plate"].tolist() == ref["plate"].tolist() and wells["role"].tolist() == ref["role"].tolist()
    assert wells["well"].astype(object).where(wells["well"].notna(), None).tolist() == \
        ref["well"].astype(object).where(ref["well"].notna(), None).tolist()
    np.testing.assert_array_equal(wells[["row", "col"]].to_numpy(), ref[["row", "col"]].to_numpy())
    np.testing.assert_array_equal(wells["substrate_conc_mM"].to_numpy(), ref["conc"].to_numpy())
    np.testing.assert_array_equal(wells["volume_uL"].to_numpy(), ref["vol"].to_numpy())
    np.testing.assert_array_equal(wells["loading"].to_numpy(), ref["loading"].to_numpy())
    assert wells["solvent"].tolist() == ref["solvent"].tolist()
    np.testing.assert_array_equal(wells["temperature_c"].to_numpy(), ref["temperature_c"].to_numpy())


_LAYOUT = (b"plate,well,role,catalyst,loading,loading_unit,substrate_conc,volume\n"
           b"P1,A1,sample,C1,1,umol,10,100\nP1,B2,empty,,,,,\nP2,a01,blank,,,,10,100\n"
           b"P1,H12,reference,REF,1,umol,10,100\nP1,A1,blank,,,,10,100\n")
_READING_ROW = st.tuples(st.sampled_from(["P1", "P2", "PX", "", "P 3"]),
                         st.sampled_from(["A1", "a01", "B2", "H12", "Z9", "", "A2"]),
                         st.sampled_from(["0", "1", "1.0", "2.5", "", "x", "-1", "inf"]),
                         st.sampled_from(["1", "50", "101", "", "nan", "0.5", "-3", "x"]),
                         st.sampled_from(["P", "B1", ""]))


@given(rows=st.lists(_READING_ROW, max_size=50), analyte=st.booleans(), presorted=st.booleans(),
       cross=st.booleans())
@settings(max_examples=80, deadline=None)
def test_readings_rules_on_random_tables(rows, analyte, presorted, cross):
    plates, catalysts = _plates_and_catalysts()
    wells, _ = v.check_layout(read_table("layout.csv", _LAYOUT, []), [], plates=plates, catalysts=catalysts,
                              conc_factor=1.0, volume_factor=1.0)
    header = ["plate", "well", "time", "value"] + (["analyte"] if analyte else [])
    lines = [",".join(r[:len(header)]) for r in rows]
    if presorted:
        lines.sort()
    problems: list = []
    t = read_table("readings.csv", ("\n".join([",".join(header)] + lines) + "\n").encode(), problems)
    info = {"kind": "yield", "scale": "percent", "time_factor": 1 / 60, "analytes_declared": analyte,
            "main": "P", "byproducts": ("B1",)}
    out, _ = v.check_readings(t, problems, wells=wells if cross else None, plates=plates if cross else None,
                              info=info)
    f, rowno = t.frame, t.rows
    at = lambda mask: set(rowno[np.asarray(mask, dtype=bool)].tolist())  # noqa: E731
    canon = platelib.parse_wells(f["well"].to_numpy(dtype=object))["well"]
    time_h = _numbers(f["time"], False) / 60
    value = _numbers(f["value"], False)
    an = f["analyte"] if analyte else pd.Series("product", index=f.index)
    assert _rows(problems, "a plate id is required") == at(f["plate"] == "")
    assert _rows(problems, "not a well name") == at(canon.isna())
    assert _rows(problems, "a time is required") == at(f["time"] == "")
    assert _rows(problems, "time must be >= 0") == at(time_h < 0)
    assert _rows(problems, "a percent yield must lie in") == at((value < -5) | (value > 110))
    known = f["plate"].isin(plates["plate"])
    if cross:
        assert _rows(problems, "unknown plate") == at((f["plate"] != "") & ~known)
        first = wells.drop_duplicates(["plate", "well"])  # a repeated layout key: its first row counts
        hit = pd.DataFrame({"plate": f["plate"], "well": canon}).merge(first[["plate", "well", "role"]],
                                                                        on=["plate", "well"], how="left")
        placed = known & canon.notna()
        assert _rows(problems, "reading for a well that is not in layout.csv") == at(placed & hit["role"].isna())
        assert _rows(problems, "reading on a well marked empty") == at(placed & (hit["role"] == "empty"))
    else:
        assert not _rows(problems, "unknown plate") and not _rows(problems, "reading for a well")
    valid = np.isfinite(time_h) & canon.notna().to_numpy() & (f["plate"] != "").to_numpy()
    keyed = pd.DataFrame({"plate": f["plate"], "well": canon, "analyte": an, "time": time_h, "row": rowno})[valid]
    dup = keyed.duplicated(["plate", "well", "analyte", "time"], keep="first")
    assert _rows(problems, "duplicate reading") == set(keyed["row"][dup].tolist())
    # the frame: every row, sorted by plate, well, analyte and time (text in code-point order, missing last)
    ref = pd.DataFrame({"plate": f["plate"], "well": canon, "analyte": an, "time_h": time_h, "value": value})
    ref = ref.astype({"plate": "str", "well": "str", "analyte": "str"})
    ref = ref.sort_values(["plate", "well", "analyte", "time_h"], kind="stable").reset_index(drop=True)
    pd.testing.assert_frame_equal(out, ref)


_CELLS = st.sampled_from(["1", "2.5", "-0", "1e-3", "1,5", "", "na", "N/A", "null", "None", "nan", "+nan", "-NaN",
                          "inf", "-Infinity", "x", "1.2.3", "0x10", " 4", "1_000", "7"])


@given(cells=st.lists(_CELLS, max_size=30), decimal_comma=st.booleans(), need=st.booleans())
@settings(max_examples=200, deadline=None)
def test_a_number_cell_reads_as_pandas_reads_it(cells, decimal_comma, need):
    """``Checker.number``: pandas ``to_numeric`` is the reference for what a cell holds; blank words
    are no value (reported only where required), non-finite values and text are reported."""
    frame = pd.DataFrame({"x": pd.array(cells, dtype="str")})
    table = RawTable("t.csv", frame, np.arange(len(cells), dtype=np.int64) + 2, decimal_comma=decimal_comma)
    problems: list = []
    got, ok = v.Checker(table, problems).number("x", required=need, what="needed")
    raw = frame["x"]
    blank = raw.str.lower().isin(v.NA_WORDS).to_numpy()
    text = raw.str.replace(",", ".", regex=False) if decimal_comma else raw
    x = pd.to_numeric(text.where(~blank), errors="coerce").to_numpy(dtype=float)
    nan_word = raw.str.lower().isin(["nan", "+nan", "-nan"]).to_numpy()
    np.testing.assert_array_equal(got, np.where(np.isfinite(x), x, np.nan))
    np.testing.assert_array_equal(ok, np.isfinite(x))
    rows = np.arange(len(cells)) + 2
    assert _rows(problems, "is not a number") == set(rows[~blank & np.isnan(x) & ~nan_word].tolist())
    assert _rows(problems, "is not a finite number") == set(rows[~blank & (np.isinf(x) | nan_word)].tolist())
    assert _rows(problems, "needed") == (set(rows[blank].tolist()) if need else set())


@given(cells=st.lists(st.sampled_from(["a", "b", "B", "", "ü", "a b"]), max_size=30), missing_first=st.booleans(),
       items=st.lists(st.sampled_from(["a", "b", "B", "", "ü", "a b"]), max_size=4))
@settings(max_examples=150, deadline=None)
def test_distinct_values_give_what_pandas_gives_per_row(cells, missing_first, items):
    """``Distinct`` works once per distinct text and spreads to the rows: the same as pandas
    ``Series.isin`` and ``Series.map`` on every row."""
    s = pd.Series(pd.array(cells, dtype="str"))
    if len(s) and missing_first:
        s.iloc[0] = None
    d = v.Distinct(s)
    for given_ in (items, set(items), pd.Series(items, dtype="str"), pd.Index(items, dtype="str"), items + [None]):
        np.testing.assert_array_equal(d.spread(d.isin(given_)), s.isin(list(given_)).to_numpy())
    keys = pd.Index(sorted(set(items)), dtype="str")
    mapping = pd.Series(np.arange(len(keys), dtype=float) + 0.5, index=keys)
    np.testing.assert_array_equal(d.spread(d.lookup(mapping)), s.map(mapping).to_numpy(dtype=float))
    pd.testing.assert_extension_array_equal(d.take(d.values), pd.array(s.array, dtype="str"))
