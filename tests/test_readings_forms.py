"""Readings in the forms instruments write (plate grids, workbooks of grids, sample-named tables)
and readings added to a planned campaign give exactly what the long readings.csv gives.

The reference is the long form read by the existing reader (the form the import contract started
with, docs/campaign-format.md). The conversions below are written here with the csv module and
openpyxl, independently of screenlab.ingest, from the rules of the contract's section "Other
forms of readings". Every campaign is invented (screenlab.synthetic, the demo generator).
"""
from __future__ import annotations

import io
import shutil
import warnings
import zipfile
from pathlib import Path

import numpy as np
import openpyxl
import pandas as pd
import pytest

from screenlab.cli import main
from screenlab.errors import ValidationError
from screenlab.ingest import read_campaign
from screenlab.store import Store
from screenlab.synthetic import SyntheticSpec, write_campaign_folder

from grid_forms import (_csv_rows, copy_without_readings, grid_lines, plate_formats, to_grid_folder, to_planned,
                        to_sample_form, write_grid_csv, write_workbook)

REPO = Path(__file__).resolve().parent.parent


# ----------------------------------------------------------------------------------------------
# conversions written from the contract's rules (plain csv / openpyxl)


def to_workbook(src: Path, dst: Path) -> Path:
    """The campaign with readings.xlsx, one sheet per plate."""
    copy_without_readings(src, dst)
    rows = _csv_rows(src / "readings.csv")
    write_workbook(dst / "readings.xlsx", {p: grid_lines(rows, p, f) for p, f in plate_formats(src).items()})
    return dst


# ----------------------------------------------------------------------------------------------
# fixtures: two invented campaigns, one plain (96 and 384 wells) and one with four analytes

@pytest.fixture(scope="module")
def campaigns(tmp_path_factory) -> dict[str, Path]:
    root = tmp_path_factory.mktemp("forms")
    out = {}
    out["syn96"] = write_campaign_folder(root / "syn96", SyntheticSpec(n_plates=4, seed=11, name="syn-96"))
    out["syn384"] = write_campaign_folder(root / "syn384", SyntheticSpec(n_plates=2, fmt=384, n_times=5, seed=12,
                                                                          name="syn-384"))
    from screenlab.demo import generate_demo

    demo = root / "demo"
    generate_demo(demo)
    out["henry"] = demo / "henry-chiral-2026"
    return out


def _quiet_read(folder):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return read_campaign(folder)


def _stored(store_path: Path, name: str):
    d = Store(store_path, read_only=True).load_campaign(name)
    return d.plates, d.wells.drop(columns=["sample"], errors="ignore"), d.readings


def _rates(store_path: Path, name: str, capsys) -> str:
    capsys.readouterr()
    assert main(["rates", "--campaign", name, "--store", str(store_path), "--format", "csv"]) == 0
    return capsys.readouterr().out


def _assert_same_store(a: Path, b: Path, name: str, capsys) -> None:
    for fa, fb in zip(_stored(a, name), _stored(b, name)):
        pd.testing.assert_frame_equal(fa, fb)
    assert _rates(a, name, capsys) == _rates(b, name, capsys)


def _ingest(folder: Path, store: Path, capsys) -> str:
    capsys.readouterr()
    code = main(["ingest", str(folder), "--store", str(store)])
    out = capsys.readouterr()
    assert code == 0, out.err
    return out.out


FORMS = {
    "grid csv per plate": lambda s, d: to_grid_folder(s, d),
    "grid csv, semicolons and decimal commas, lower-case letters": lambda s, d: to_grid_folder(
        s, d, semicolon_plates=set(plate_formats(s)), lower=True),
    "grid xlsx per plate (one plate as csv)": lambda s, d: to_grid_folder(s, d, xlsx_plates=set(list(plate_formats(s))[1:])),
    "one workbook, a sheet per plate": to_workbook,
    "sample-named readings": to_sample_form,
}


@pytest.mark.parametrize("campaign", ["syn96", "syn384", "henry"])
@pytest.mark.parametrize("form", list(FORMS))
def test_each_form_stores_what_the_long_form_stores(campaigns, campaign, form, tmp_path, capsys):
    src = campaigns[campaign]
    name = _quiet_read(src).data.name
    converted = FORMS[form](src, tmp_path / "converted")
    assert not (converted / "readings.csv").exists() or form == "sample-named readings"
    long_store, form_store = tmp_path / "long.duckdb", tmp_path / "form.duckdb"
    _ingest(src, long_store, capsys)
    _ingest(converted, form_store, capsys)
    _assert_same_store(long_store, form_store, name, capsys)
    # the frames read from the folder are the long form's too (readings sorted the same way)
    a, b = _quiet_read(src).data, _quiet_read(converted).data
    pd.testing.assert_frame_equal(a.readings, b.readings)
    pd.testing.assert_frame_equal(a.wells, b.wells.drop(columns=["sample"], errors="ignore"))


@pytest.mark.parametrize("campaign", ["syn96", "henry"])
@pytest.mark.parametrize("delivery", ["grid folder", "workbook", "sample table", "long table"])
def test_planned_campaign_plus_add_readings_is_the_long_form(campaigns, campaign, delivery, tmp_path, capsys):
    src = campaigns[campaign]
    name = _quiet_read(src).data.name
    planned = to_planned(src, tmp_path / "planned")
    complete = src
    if delivery == "sample table":  # the planned layout carries the sample codes
        sample = to_sample_form(src, tmp_path / "sample")
        shutil.copy2(sample / "layout.csv", planned / "layout.csv")
        path = sample / "readings.csv"
        complete = sample
    elif delivery == "grid folder":
        path = to_grid_folder(src, tmp_path / "grids") / "readings"
    elif delivery == "workbook":
        path = to_workbook(src, tmp_path / "wb") / "readings.xlsx"
    else:
        path = src / "readings.csv"
    long_store, store = tmp_path / "long.duckdb", tmp_path / "planned.duckdb"
    _ingest(src, long_store, capsys)
    out = _ingest(planned, store, capsys)
    assert "0 readings" in out
    before = Store(store).table_counts()
    assert main(["add-readings", "--campaign", name, str(path), "--store", str(store), "--dry-run"]) == 0
    assert Store(store).table_counts() == before  # a dry run writes nothing
    capsys.readouterr()
    assert main(["add-readings", "--campaign", name, str(path), "--store", str(store)]) == 0
    out = capsys.readouterr().out
    assert "readings added to" in out and "expected but missing" in out
    _assert_same_store(long_store, store, name, capsys)
    # the history has the planned import and the added readings; the planned plates are kept
    hist = Store(store).imports(name)
    assert list(hist["status"]) == ["imported", "readings_added"]
    assert hist["n_readings"].iloc[-1] == len(_csv_rows(src / "readings.csv"))
    counts = Store(store).table_counts()
    assert counts["plates"] == 2 * before["plates"]          # each plate: planned version + completed version
    # importing the completed folder afterwards changes nothing (same fingerprints)
    assert "unchanged" in _ingest(complete, store, capsys)
    # and the same readings cannot be added twice
    assert main(["add-readings", "--campaign", name, str(path), "--store", str(store)]) == 1
    assert "already has" in capsys.readouterr().err
    assert Store(store).table_counts() == counts


def test_add_readings_plate_by_plate(campaigns, tmp_path, capsys):
    """Plates run on different days: each delivery fills the plates it brings; the rest wait."""
    src = campaigns["syn96"]
    name = _quiet_read(src).data.name
    grids = to_grid_folder(src, tmp_path / "grids") / "readings"
    store = tmp_path / "s.duckdb"
    _ingest(to_planned(src, tmp_path / "planned"), store, capsys)
    files = sorted(grids.iterdir())
    assert main(["add-readings", "--campaign", name, str(files[0]), "--store", str(store)]) == 0
    assert "3 plates still without readings" in capsys.readouterr().out
    assert main(["add-readings", "--campaign", name, *map(str, files[1:]), "--store", str(store)]) == 0
    long_store = tmp_path / "long.duckdb"
    _ingest(src, long_store, capsys)
    a = Store(store, read_only=True).load_campaign(name)
    b = Store(long_store, read_only=True).load_campaign(name)
    key = ["plate", "well", "analyte", "time_h"]
    pd.testing.assert_frame_equal(a.readings.sort_values(key).reset_index(drop=True),
                                  b.readings.sort_values(key).reset_index(drop=True))
    assert _rates(store, name, capsys) == _rates(long_store, name, capsys)


# ----------------------------------------------------------------------------------------------
# refusals: each names the file (and sheet), row and column, and nothing is written

@pytest.fixture()
def grid_campaign(campaigns, tmp_path) -> Path:
    return to_grid_folder(campaigns["syn96"], tmp_path / "g")


def _grid_file(folder: Path) -> Path:
    return sorted((folder / "readings").iterdir())[0]


def _edit(path: Path, fn) -> list[str]:
    lines = path.read_text(encoding="utf-8").splitlines()
    lines = fn(lines)
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return lines


def _problems(folder: Path) -> list:
    with pytest.raises(ValidationError) as exc:
        _quiet_read(folder)
    return exc.value.problems


def _line_of(lines: list[str], prefix: str, nth: int = 0) -> int:
    """1-based line number of the nth line starting with ``prefix``."""
    hits = [i + 1 for i, ln in enumerate(lines) if ln.startswith(prefix)]
    return hits[nth]


def test_missing_row_letter_refused_with_file_and_row_store_unchanged(grid_campaign, tmp_path, capsys):
    f = _grid_file(grid_campaign)
    lines = f.read_text().splitlines()
    drop = _line_of(lines, "D,")               # the first block's row D
    label = _line_of(lines, "time,")           # its label row
    _edit(f, lambda L: [x for i, x in enumerate(L) if i != drop - 1])
    store = tmp_path / "s.duckdb"
    _ingest(REPO / "demo_campaign" / "th-screen-2026", store, capsys)
    before = Store(store).table_counts()
    assert main(["ingest", str(grid_campaign), "--store", str(store)]) == 1
    err = capsys.readouterr().err
    assert f"readings/{f.name}, row {label}" in err and "has no row D" in err and "nothing was written" in err
    assert Store(store).table_counts() == before
    (p,) = _problems(grid_campaign)
    assert (p.file, p.row, p.value) == (f"readings/{f.name}", label, "D")


@pytest.mark.parametrize("what", ["repeated letter", "letter outside the format", "column out of range",
                                  "text in a value cell", "block without a time", "duplicate block",
                                  "column missing", "value beside the header", "no header row"])
def test_grid_problems_name_file_row_and_column(grid_campaign, what):
    f = _grid_file(grid_campaign)
    lines = f.read_text().splitlines()
    c_row, d_row = _line_of(lines, "C,"), _line_of(lines, "D,")
    label, header = _line_of(lines, "time,"), _line_of(lines, ",1,2")
    label2 = _line_of(lines, "time,", 1)
    name = f"readings/{f.name}"
    if what == "repeated letter":
        _edit(f, lambda L: [("C" + x[1:]) if i == d_row - 1 else x for i, x in enumerate(L)])
        expect = {(name, d_row, "row letter", "C"), (name, label, None, "D")}
    elif what == "letter outside the format":
        _edit(f, lambda L: [("I" + x[1:]) if i == d_row - 1 else x for i, x in enumerate(L)])
        expect = {(name, d_row, "row letter", "I"), (name, label, None, "D")}
    elif what == "column out of range":
        _edit(f, lambda L: [x.replace(",12", ",13") if i == header - 1 else x for i, x in enumerate(L)])
        expect = {(name, header, "13", "13"), (name, header, None, "12")}
    elif what == "text in a value cell":
        cells = lines[c_row - 1].split(",")
        col = next(j for j in range(1, len(cells)) if cells[j])
        cells[col] = "OVRFLW"
        _edit(f, lambda L: [",".join(cells) if i == c_row - 1 else x for i, x in enumerate(L)])
        expect = {(name, c_row, str(col), "OVRFLW")}
    elif what == "block without a time":
        _edit(f, lambda L: ["time," if i == label - 1 else x for i, x in enumerate(L)])
        expect = {(name, label, "time", None)}
    elif what == "duplicate block":
        t1 = lines[label - 1]
        _edit(f, lambda L: [t1 if i == label2 - 1 else x for i, x in enumerate(L)])
        expect = {(name, label2, "time", t1.split(",")[1])}
    elif what == "column missing":
        _edit(f, lambda L: [x.replace(",7,", ",,") if i == header - 1 else x for i, x in enumerate(L)])
        problems = _problems(grid_campaign)
        assert any(p.row == header and p.value == "7" and "lacks column 7" in p.message for p in problems)
        return
    elif what == "value beside the header":
        _edit(f, lambda L: [(x + ",0.5") if i == c_row - 1 else x for i, x in enumerate(L)])
        expect = {(name, c_row, "right of 12", "0.5")}         # no number above it: named by its place
    else:
        _edit(f, lambda L: [x for i, x in enumerate(L) if i != header - 1])
        expect = {(name, header, None, "A")}
    problems = _problems(grid_campaign)
    assert {(p.file, p.row, p.column, p.value) for p in problems} == expect, problems


def test_unknown_plate_file_and_sheet_refused(campaigns, tmp_path):
    g = to_grid_folder(campaigns["syn96"], tmp_path / "g")
    f = _grid_file(g)
    f.rename(f.with_name("NOPLATE.csv"))
    (p,) = _problems(g)
    assert p.file == "readings/NOPLATE.csv" and "unknown plate" in p.message and p.value == "NOPLATE"
    wb = to_workbook(campaigns["syn96"], tmp_path / "w")
    book = openpyxl.load_workbook(wb / "readings.xlsx")
    book.worksheets[1].title = "P-99"
    book.save(wb / "readings.xlsx")
    (p,) = _problems(wb)
    assert p.file == "readings.xlsx [sheet P-99]" and "unknown plate" in p.message


def test_workbook_problem_names_the_sheet(campaigns, tmp_path):
    wb = to_workbook(campaigns["syn96"], tmp_path / "w")
    book = openpyxl.load_workbook(wb / "readings.xlsx")
    ws = book.worksheets[0]
    plate = ws.title
    ws.cell(row=8, column=3, value="n.d.")        # row 8 holds plate row C (4 header lines, label, header, A, B)
    book.save(wb / "readings.xlsx")
    problems = _problems(wb)
    assert [(p.file, p.row, p.column, p.value) for p in problems] == [(f"readings.xlsx [sheet {plate}]", 8, "2", "n.d.")]


def test_spreadsheet_error_cells_are_reported_as_what_they_are(campaigns, tmp_path):
    """A cell holding a spreadsheet error (#DIV/0!, #N/A: a formula that failed) is given by the
    workbook reader as empty; it is reported with its error text, on its sheet, row and column,
    not as 'a value is required (value '')'. Also on a sheet that is not the workbook's first."""
    wb = to_workbook(campaigns["syn96"], tmp_path / "w")
    book = openpyxl.load_workbook(wb / "readings.xlsx")
    ws = book.worksheets[1]
    ws.cell(row=8, column=5, value="#DIV/0!")
    assert ws.cell(row=8, column=5).data_type == "e"              # stored as an error cell (t="e")
    book.save(wb / "readings.xlsx")
    problems = _problems(wb)
    assert [(p.file, p.row, p.column, p.value) for p in problems] == [
        (f"readings.xlsx [sheet {ws.title}]", 8, "4", "#DIV/0!")]
    # the long form as a workbook: the value cell of one reading is #N/A
    lf = tmp_path / "long"
    shutil.copytree(campaigns["syn96"], lf)
    rows = [line.split(",") for line in (lf / "readings.csv").read_text().splitlines()]
    (lf / "readings.csv").unlink()
    book = openpyxl.Workbook()
    for r in rows:
        book.active.append([float(c) if c.replace(".", "", 1).replace("-", "", 1).isdigit() else c for c in r])
    book.active.cell(row=5, column=len(rows[0]), value="#N/A")
    book.save(lf / "readings.xlsx")
    problems = _problems(lf)
    assert [(p.file, p.row, p.value) for p in problems] == [("readings.xlsx", 5, "#N/A")]


def test_a_long_table_with_excels_sep_line_in_the_readings_folder(campaigns, tmp_path, capsys):
    """readings/ holding the long table as Excel saves it for a semicolon locale (first line
    ``sep=;``, decimal commas): classified as the table it is, and stored as the plain folder is."""
    src = campaigns["syn96"]
    dst = tmp_path / "sep"
    copy_without_readings(src, dst)
    (dst / "readings").mkdir()
    lines = (src / "readings.csv").read_text().splitlines()
    body = "\n".join(";".join(c.replace(".", ",") for c in ln.split(",")) for ln in lines)
    (dst / "readings" / "export.csv").write_text("sep=;\n" + body + "\n")
    a = _ingest_store(src, tmp_path / "a.duckdb", capsys)
    b = _ingest_store(dst, tmp_path / "b.duckdb", capsys)
    _assert_same_store(a, b, _quiet_read(src).data.manifest.name, capsys)


def _ingest_store(folder: Path, store: Path, capsys) -> Path:
    _ingest(folder, store, capsys)
    return store


def test_both_readings_csv_and_folder_refused(campaigns, tmp_path):
    g = to_grid_folder(campaigns["syn96"], tmp_path / "g")
    shutil.copy2(campaigns["syn96"] / "readings.csv", g / "readings.csv")
    (p,) = _problems(g)
    assert "readings/ folder" in p.message


def test_skipped_header_and_values_on_empty_positions_are_reported(campaigns, tmp_path):
    """A reader reads the whole plate: values on positions the layout leaves empty are left out
    (and said so); the lines above the first block are skipped (and said so)."""
    src = campaigns["syn96"]
    g = to_grid_folder(src, tmp_path / "g")
    layout = pd.read_csv(src / "layout.csv")
    f = _grid_file(g)
    plate = f.stem
    empty = layout[(layout["plate"] == plate) & (layout["role"] == "empty")]["well"].tolist()
    assert empty
    row, col = empty[0][0], int(empty[0][1:])
    _edit(f, lambda L: [x if not x.startswith(row + ",") else
                        ",".join(c if j != col else "0.0" for j, c in enumerate(x.split(","))) for x in L])
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = read_campaign(g)
    notes = " | ".join(res.notes)
    assert f"readings/{f.name}: skipped 3 lines above the first block (rows 1-3" in notes
    assert f"on 1 position that layout.csv marks empty or does not list" in notes and empty[0] in notes
    assert caught
    pd.testing.assert_frame_equal(res.data.readings, _quiet_read(src).data.readings)


def test_sample_codes_refused_when_unknown_duplicated_or_absent(campaigns, tmp_path):
    s = to_sample_form(campaigns["syn96"], tmp_path / "s")
    rd = (s / "readings.csv").read_text().splitlines()
    rd[4] = "NO-SUCH" + rd[4][rd[4].index(","):]
    (s / "readings.csv").write_text("\n".join(rd) + "\n")
    (p,) = _problems(s)
    assert (p.file, p.row, p.column, p.value) == ("readings.csv", 5, "sample", "NO-SUCH")
    assert "unknown sample code" in p.message
    # a code given to two wells of the layout
    s2 = to_sample_form(campaigns["syn96"], tmp_path / "s2")
    lay = pd.read_csv(s2 / "layout.csv", dtype=str, keep_default_na=False)
    filled = lay.index[lay["sample"] != ""]
    lay.loc[filled[3], "sample"] = lay.loc[filled[0], "sample"]
    lay.to_csv(s2 / "layout.csv", index=False)
    problems = _problems(s2)
    dup = [p for p in problems if p.file == "layout.csv"]
    assert [(p.row, p.column, p.value) for p in dup] == [(int(filled[3]) + 2, "sample", lay.loc[filled[0], "sample"])]
    assert "duplicate sample code" in dup[0].message and f"first on row {int(filled[0]) + 2}" in dup[0].message
    # the same code read twice at one time: the long form's duplicate reading
    s3 = to_sample_form(campaigns["syn96"], tmp_path / "s3")
    rd = (s3 / "readings.csv").read_text().splitlines()
    (s3 / "readings.csv").write_text("\n".join(rd + [rd[1]]) + "\n")
    (p,) = _problems(s3)
    assert p.row == len(rd) + 1 and "duplicate reading" in p.message
    # readings by sample code but a layout without codes
    s4 = to_sample_form(campaigns["syn96"], tmp_path / "s4")
    shutil.copy2(campaigns["syn96"] / "layout.csv", s4 / "layout.csv")
    (p,) = _problems(s4)
    assert p.file == "readings.csv" and p.column == "sample" and "no 'sample' column" in p.message


def test_sample_column_is_a_label_not_a_factor(campaigns, tmp_path):
    s = to_sample_form(campaigns["syn96"], tmp_path / "s")
    data = _quiet_read(s).data
    assert "sample" in data.wells.columns and "sample" not in data.factor_names
    assert data.wells.loc[data.wells["role"] == "empty", "sample"].isna().all()
    assert data.wells["sample"].dropna().is_unique


def test_what_imported_before_imports_the_same(campaigns, tmp_path):
    """A long readings.xlsx and a readings.csv carrying an extra 'sample' column beside plate and
    well read as before (long form; the extra column is noted as unused)."""
    src = campaigns["syn96"]
    ref = _quiet_read(src).data
    x = copy_without_readings(src, tmp_path / "x")
    pd.read_csv(src / "readings.csv", dtype=str).to_excel(x / "readings.xlsx", index=False, engine="openpyxl")
    pd.testing.assert_frame_equal(_quiet_read(x).data.readings, ref.readings)
    y = copy_without_readings(src, tmp_path / "y")
    rd = pd.read_csv(src / "readings.csv", dtype=str)
    rd.assign(sample="run-7").to_csv(y / "readings.csv", index=False)
    res = _quiet_read(y)
    pd.testing.assert_frame_equal(res.data.readings, ref.readings)
    assert any("sample not used" in n for n in res.notes)


def test_grid_folder_inside_zip_and_upload(campaigns, tmp_path):
    src = campaigns["syn96"]
    g = to_grid_folder(src, tmp_path / "g")
    ref = _quiet_read(src).data.readings
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        for p in sorted(g.rglob("*")):
            if p.is_file():
                zf.write(p, f"campaign/{p.relative_to(g).as_posix()}")
    pd.testing.assert_frame_equal(_quiet_read(buf.getvalue()).data.readings, ref)
    upload = {p.relative_to(g).as_posix(): p.read_bytes() for p in g.rglob("*") if p.is_file()}
    assert any(k.startswith("readings/") for k in upload)
    pd.testing.assert_frame_equal(_quiet_read(upload).data.readings, ref)


def test_add_readings_refusals(campaigns, tmp_path, capsys):
    src = campaigns["syn96"]
    name = _quiet_read(src).data.name
    store = tmp_path / "s.duckdb"
    _ingest(to_planned(src, tmp_path / "planned"), store, capsys)
    before = Store(store).table_counts()
    g = to_grid_folder(src, tmp_path / "g")
    f = _grid_file(g)
    lines = f.read_text().splitlines()
    drop = _line_of(lines, "D,")
    _edit(f, lambda L: [x for i, x in enumerate(L) if i != drop - 1])
    assert main(["add-readings", "--campaign", name, str(g / "readings"), "--store", str(store)]) == 1
    err = capsys.readouterr().err
    assert f"{f}, row {_line_of(lines, 'time,')}" in err and "has no row D" in err
    assert main(["add-readings", "--campaign", "no-such", str(g / "readings"), "--store", str(store)]) == 1
    assert "not in" in capsys.readouterr().err
    assert main(["add-readings", "--campaign", name, str(tmp_path / "nothing-here"), "--store", str(store)]) == 2
    assert Store(store).table_counts() == before


def test_add_readings_refuses_when_the_store_changed_meanwhile(campaigns, tmp_path, capsys):
    from screenlab.ingest.addreadings import read_new_readings, readings_files
    from screenlab.store import ImportRefusedError, add_readings

    src = campaigns["syn96"]
    store_path = tmp_path / "s.duckdb"
    _ingest(to_planned(src, tmp_path / "planned"), store_path, capsys)
    store = Store(store_path)
    version = store.data_version()
    name = _quiet_read(src).data.name
    data = store.load_campaign(name)
    new = read_new_readings(readings_files([src / "readings.csv"]), data)
    assert new.ok and len(new.plates) == 4
    _ingest(REPO / "demo_campaign" / "th-screen-2026", store_path, capsys)   # another write in between
    before = store.table_counts()
    with pytest.raises(ImportRefusedError, match="store changed"):
        add_readings(store, data, new, data_version=version)
    assert store.table_counts() == before
    report = add_readings(store, data, new, data_version=store.data_version())
    assert report.status == "readings_added" and report.n_readings == len(_csv_rows(src / "readings.csv"))


def test_arrival_map_says_what_arrived(campaigns, tmp_path):
    """Wells with readings, expected but missing, extra (values where the layout has nothing)."""
    from screenlab.ingest.addreadings import read_new_readings

    src = campaigns["syn96"]
    data = _quiet_read(to_planned(src, tmp_path / "planned")).data
    rows = _csv_rows(src / "readings.csv")
    plates = list(plate_formats(src))
    layout = pd.read_csv(src / "layout.csv")
    p0 = layout[layout["plate"] == plates[0]]
    gone = p0.loc[p0["role"] != "empty", "well"].iloc[0]            # one expected well left out
    extra = p0.loc[p0["role"] == "empty", "well"].iloc[0]           # one empty position read
    keep = [r for r in rows if r["plate"] == plates[0] and r["well"] != gone]
    lines = grid_lines(keep, plates[0], 96)
    for line in lines:
        if line[:1] == [extra[0]]:
            line[int(extra[1:])] = "0.01"
    path = tmp_path / f"{plates[0]}.csv"
    write_grid_csv(path, lines)
    new = read_new_readings({str(path): path.read_bytes()}, data)
    assert new.ok, new.problems
    a = new.arrival.set_index(["plate", "well"])["status"]
    assert a[(plates[0], gone)] == "missing" and a[(plates[0], extra)] == "extra"
    n_filled = int((p0["role"] != "empty").sum())
    assert (a.loc[plates[0]] == "read").sum() == n_filled - 1
    # the plates that got nothing are all "missing" where the layout has a well
    other = layout[layout["plate"] == plates[1]]
    assert (a.loc[plates[1]] == "missing").sum() == int((other["role"] != "empty").sum())
    assert new.plates == (plates[0],)
    assert set(np.unique(new.readings["plate"])) == {plates[0]}


def test_add_readings_takes_a_campaign_folder_or_a_zip(campaigns, tmp_path, capsys):
    """PATH may be the completed campaign folder (its readings/ grids are used) or a .zip of it."""
    src = campaigns["syn96"]
    name = _quiet_read(src).data.name
    g = to_grid_folder(src, tmp_path / "g")
    blob = tmp_path / "delivery.zip"
    with zipfile.ZipFile(blob, "w") as zf:
        for p in sorted(g.rglob("*")):
            if p.is_file():
                zf.write(p, f"round/{p.relative_to(g).as_posix()}")
    long_store = tmp_path / "long.duckdb"
    _ingest(src, long_store, capsys)
    for k, path in enumerate((g, blob)):
        store = tmp_path / f"s{k}.duckdb"
        _ingest(to_planned(src, tmp_path / f"planned{k}"), store, capsys)
        assert main(["add-readings", "--campaign", name, str(path), "--store", str(store)]) == 0
        files = Store(store).import_files(name)
        files = files[files["import_id"] == files["import_id"].max()]     # the files of the added readings
        assert sorted(files["name"].str.rsplit("/", n=1).str[-1]) == sorted(p.name for p in (g / "readings").iterdir())
        _assert_same_store(long_store, store, name, capsys)
