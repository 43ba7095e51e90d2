"""screenlab.ingest: accepted spreadsheet quirks, XLSX and zip input, zip safety, find_campaigns,
plate formats, unit conversion, robustness (hypothesis) and a speed sanity check."""
from __future__ import annotations

import hashlib
import io
import time
import zipfile

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import constants

from screenlab import plates as platelib
from screenlab.errors import DataQualityWarning, ValidationError
from screenlab.ingest import extract_zip, find_campaigns, read_campaign
from screenlab.ingest import sources
from screenlab.model import DEFAULT_ANALYTE, CampaignData
from campaign_texts import GOOD_LAYOUT, GOOD_PLATES, GOOD_TOML, good_files, good_readings, write_campaign


def enc(d: dict[str, str]) -> dict[str, bytes]:
    return {k: v.encode() for k, v in d.items()}


def baseline() -> CampaignData:
    return read_campaign(enc(good_files())).data


def same_data(a: CampaignData, b: CampaignData) -> None:
    for name in ("catalysts", "plates", "wells", "readings"):
        pd.testing.assert_frame_equal(getattr(a, name), getattr(b, name), check_dtype=False, obj=name)
    assert a.factor_names == b.factor_names


# ----------------------------------------------------------------------------------- output frames
def test_output_frames_follow_the_contract():
    d = baseline()
    assert list(d.catalysts.columns) == ["catalyst", "name", "family", "molar_mass_g_mol", "sites_per_unit",
                                         "metal_wt_pct", "metal_molar_mass_g_mol", "dispersion"]
    assert list(d.plates.columns) == ["plate", "format", "n_rows", "n_cols", "temperature_c", "run_date", "notes"]
    assert list(d.wells.columns)[:11] == ["plate", "well", "row", "col", "role", "catalyst", "loading", "loading_unit",
                                          "substrate_conc_mM", "volume_uL", "temperature_c"]
    assert list(d.readings.columns) == ["plate", "well", "analyte", "time_h", "value"]
    assert d.factor_names == ("solvent",) and "solvent" in d.wells.columns
    # defaults: sites_per_unit and dispersion 1 when absent
    c = d.catalysts.set_index("catalyst")
    assert c.loc["C1", "dispersion"] == 1.0 and c.loc["C2", "sites_per_unit"] == 1.0
    assert c.loc["C2", "dispersion"] == 0.3 and np.isnan(c.loc["C1", "metal_wt_pct"])
    w = d.wells.set_index(["plate", "well"])
    # effective temperature: the well override, else the plate's
    assert w.loc[("P1", "H12"), "temperature_c"] == 65.0 and w.loc[("P1", "A1"), "temperature_c"] == 60.0
    assert w.loc[("P2", "A1"), "temperature_c"] == 80.0
    assert pd.isna(w.loc[("P1", "A4"), "catalyst"]) and pd.isna(w.loc[("P1", "A4"), "loading_unit"])
    assert np.isnan(w.loc[("P1", "A5"), "substrate_conc_mM"]) and np.isnan(w.loc[("P1", "A5"), "volume_uL"])
    assert w.loc[("P1", "H12"), ["row", "col"]].tolist() == [7, 11]
    assert (d.readings["analyte"] == DEFAULT_ANALYTE).all()
    r = d.readings
    assert r.equals(r.sort_values(["plate", "well", "analyte", "time_h"]).reset_index(drop=True))
    assert d.plates["format"].tolist() == [96, 24]


def test_unit_conversion_to_canonical_units():
    # time s -> h, concentration M -> mM, volume mL -> uL; factors from scipy.constants (SI definitions)
    t = GOOD_TOML.replace('time = "min"', 'time = "s"').replace('concentration = "mM"', 'concentration = "M"') \
        .replace('volume = "uL"', 'volume = "mL"')
    d = read_campaign(enc(good_files() | {"campaign.toml": t})).data
    b = baseline()
    secs = b.readings["time_h"] * 60.0  # the baseline numbers were minutes; now they are seconds
    np.testing.assert_allclose(d.readings["time_h"], secs / constants.hour, rtol=1e-12)
    # 100 (M) -> 100 * 1000 mM, since 1 mM = 1e-3 mol/L
    np.testing.assert_allclose(d.wells["substrate_conc_mM"], b.wells["substrate_conc_mM"] / constants.milli,
                               rtol=1e-12)
    # 200 (mL) -> 200 * 1000 uL (constants.milli / constants.micro)
    np.testing.assert_allclose(d.wells["volume_uL"], b.wells["volume_uL"] * constants.milli / constants.micro,
                               rtol=1e-12)
    t2 = GOOD_TOML.replace('time = "min"', 'time = "h"').replace('concentration = "mM"', 'concentration = "µM"')
    d2 = read_campaign(enc(good_files() | {"campaign.toml": t2})).data
    np.testing.assert_allclose(d2.readings["time_h"], b.readings["time_h"] * 60.0, rtol=1e-12)
    np.testing.assert_allclose(d2.wells["substrate_conc_mM"], b.wells["substrate_conc_mM"] * constants.micro
                               / constants.milli, rtol=1e-12)
    assert read_campaign(enc(good_files() | {"campaign.toml": t2})).data.manifest.concentration_unit == "uM"


def test_file_records_hash_the_bytes_as_read():
    f = enc(good_files())
    res = read_campaign(f)
    recs = {r.name: r for r in res.files}
    assert set(recs) == set(f)
    for name, data in f.items():
        assert recs[name].sha256 == hashlib.sha256(data).hexdigest()
    assert recs["layout.csv"].n_rows == 8 and recs["readings.csv"].n_rows == 28
    assert res.source == "upload"


# ----------------------------------------------------------------------------------- spreadsheet quirks
def test_utf8_bom_on_every_file():
    bom = {k: b"\xef\xbb\xbf" + v.encode() for k, v in good_files().items()}
    same_data(read_campaign(bom).data, baseline())


def test_cp1252_file_is_read_and_said_so():
    lay = GOOD_LAYOUT.replace("DMSO", "Ethanol–water 1:1").replace("1.5,umol", "1.5,µmol")
    f = enc(good_files())
    f["layout.csv"] = lay.encode("cp1252")
    with pytest.warns(DataQualityWarning, match="cp1252"):
        res = read_campaign(f)
    assert any("layout.csv: not UTF-8; read as Windows-1252" in n for n in res.notes)
    assert (res.data.wells["solvent"] == "Ethanol–water 1:1").sum() == 6
    assert set(res.data.wells["loading_unit"].dropna()) == {"umol", "mg", "mol%"}


def test_utf16_export_is_read_and_said_so():
    """Excel's "Unicode text" export: UTF-16 with its byte-order mark (here tab-separated), read as
    the UTF-8 file it stands for, with a note; before, its NUL bytes read as mojibake headers."""
    f = enc(good_files())
    f["readings.csv"] = good_readings().replace(",", "\t").encode("utf-16")      # BOM + UTF-16 (LE here)
    assert f["readings.csv"][:2] in (b"\xff\xfe", b"\xfe\xff")
    with pytest.warns(DataQualityWarning, match="UTF-16"):
        res = read_campaign(f)
    assert any("readings.csv: read as UTF-16" in n for n in res.notes)
    same_data(res.data, baseline())


def test_excel_sep_line_names_the_delimiter_and_is_not_a_row():
    """A first line ``sep=;`` (Excel writes and reads it) gives the delimiter; rows are counted from
    the header, as Excel shows the file (a problem on the first data row is at row 2)."""
    f = {k: (to_semicolon(v) if k.endswith(".csv") else v) for k, v in good_files().items()}
    f["readings.csv"] = "sep=;\n" + f["readings.csv"]
    with pytest.warns(DataQualityWarning, match="delimiter line"):
        res = read_campaign(enc(f))
    assert any("Excel's delimiter line" in n for n in res.notes)
    same_data(res.data, baseline())
    lines = f["readings.csv"].splitlines()
    lines[2] = ";".join(lines[2].split(";")[:-1] + ["x"])                        # the first data row
    f["readings.csv"] = "\n".join(lines) + "\n"
    with pytest.raises(ValidationError) as exc:
        read_campaign(enc(f))
    assert [(p.file, p.row, p.column) for p in exc.value.problems] == [("readings.csv", 2, "value")]


def to_semicolon(text: str) -> str:
    """European export: ';' between cells, ',' as decimal mark."""
    return "\n".join(line.replace(".", ",").replace(",", ";") if False else
                     ";".join(c.replace(".", ",") for c in line.split(",")) for line in text.splitlines()) + "\n"


def test_semicolon_delimited_with_decimal_commas():
    f = {k: (to_semicolon(v) if k.endswith(".csv") else v) for k, v in good_files().items()}
    assert "1,5" in f["layout.csv"] and ";" in f["layout.csv"]
    same_data(read_campaign(enc(f)).data, baseline())


def test_tab_delimited_crlf_with_decimal_commas():
    f = {k: ("\r\n".join("\t".join(c.replace(".", ",") for c in line.split(",")) for line in v.splitlines()) + "\r\n"
             if k.endswith(".csv") else v.replace("\n", "\r\n")) for k, v in good_files().items()}
    same_data(read_campaign(enc(f)).data, baseline())


def test_crlf_comma_files():
    f = {k: v.replace("\n", "\r\n") for k, v in good_files().items()}
    same_data(read_campaign(enc(f)).data, baseline())


def test_padded_cells_headers_and_case_of_headers_roles_and_units():
    lay = GOOD_LAYOUT.splitlines()
    header = " Plate , WELL ,Role, Catalyst ,Loading, Loading_Unit , Substrate Conc ,VOLUME, Temperature_C ,Solvent"
    body = []
    for line in lay[1:]:
        cells = [f"  {c}  " for c in line.split(",")]
        body.append(",".join(cells))
    text = "\n".join([header, *body]) + "\n"
    text = text.replace("sample", "SAMPLE").replace("blank", "Blank").replace("reference", "Reference")
    text = text.replace("  umol  ", " uMol ", 1).replace("  umol  ", " µmol ", 1).replace("  mol%  ", " mol % ")
    text = text.replace("  mg  ", " MG ")
    res = read_campaign(enc(good_files() | {"layout.csv": text}))
    same_data(res.data, baseline())


def test_trailing_empty_rows_and_columns_and_blank_lines():
    rd = good_readings().splitlines()
    rd = [rd[0] + ",,"] + [r + ",," for r in rd[1:4]] + ["", ",,,,"] + rd[4:] + [",,,", ",,,,,,", "", ""]
    lay = GOOD_LAYOUT.replace("\n", ";\n").replace(",", ";")  # trailing delimiter on every row
    f = good_files() | {"readings.csv": "\n".join(rd) + "\n", "layout.csv": lay}
    res = read_campaign(enc(f))
    same_data(res.data, baseline())
    # row numbers still follow the spreadsheet after skipped blank lines
    rd_bad = list(rd)
    rd_bad.insert(len(rd_bad) - 3, "P1,A1,-1,0")
    with pytest.raises(ValidationError) as ei:
        read_campaign(enc(f | {"readings.csv": "\n".join(rd_bad) + "\n"}))
    (p,) = ei.value.problems
    assert p.row == len(rd_bad) - 3 and p.column == "time"


def test_well_names_like_a01():
    lay = GOOD_LAYOUT.replace("P1,A1,", "P1,a01,").replace("P1,H12,", "P1,h12,").replace("P2,D6,", "P2,D06,")
    rd = good_readings().replace("P1,A2,", "P1,A02,")
    same_data(read_campaign(enc(good_files() | {"layout.csv": lay, "readings.csv": rd})).data, baseline())


def test_extra_layout_columns_become_named_factors():
    lay = GOOD_LAYOUT.splitlines()
    lay = [lay[0] + ", Base Equiv ,Additive"] + [line + ",  2 ,  LiCl " for line in lay[1:]]
    d = read_campaign(enc(good_files() | {"layout.csv": "\n".join(lay) + "\n"})).data
    assert d.factor_names == ("solvent", "base_equiv", "additive")
    assert set(d.wells["base_equiv"]) == {"2"} and set(d.wells["additive"]) == {"LiCl"}


def test_unused_columns_elsewhere_give_a_note():
    cats = good_files()["catalysts.csv"].splitlines()
    cats = [cats[0] + ",supplier"] + [c + ",ACME" for c in cats[1:]]
    with pytest.warns(DataQualityWarning, match="supplier not used"):
        res = read_campaign(enc(good_files() | {"catalysts.csv": "\n".join(cats) + "\n"}))
    assert "supplier" not in res.data.catalysts.columns


def test_ragged_row_is_reported_not_raised():
    rd = good_readings() + "P1,A1,50,3,extra\n"
    with pytest.raises(ValidationError, match="column 5 has values but no header name"):
        read_campaign(enc(good_files() | {"readings.csv": rd}))


# ----------------------------------------------------------------------------------- xlsx
def _xlsx(text: str) -> bytes:
    rows = [line.split(",") for line in text.splitlines()]
    frame = pd.DataFrame(rows[1:], columns=rows[0])
    for c in frame.columns:  # numbers as numbers, the way a spreadsheet stores them
        num = pd.to_numeric(frame[c], errors="coerce")
        if num.notna().any() and (num.notna() | (frame[c] == "")).all():
            frame[c] = num
    if "run_date" in frame.columns:
        frame["run_date"] = pd.to_datetime(frame["run_date"], errors="coerce")
    buf = io.BytesIO()
    frame.to_excel(buf, index=False, engine="openpyxl")
    return buf.getvalue()


def test_xlsx_tables_read_like_csv(tmp_path):
    f = enc(good_files())
    for name in ("catalysts.csv", "plates.csv", "layout.csv", "readings.csv"):
        f[name.replace(".csv", ".xlsx")] = _xlsx(f.pop(name).decode())
    res = read_campaign(f)
    same_data(res.data, baseline())
    assert res.data.plates["run_date"].iloc[0] == "2026-03-01"
    folder = write_campaign(tmp_path / "x", {k: v for k, v in f.items()})
    same_data(read_campaign(folder).data, baseline())


def test_bad_cell_in_xlsx_names_its_row():
    plates = GOOD_PLATES.replace("P2,24,80", "P2,24,hot")
    f = enc(good_files())
    f.pop("plates.csv")
    f["plates.xlsx"] = _xlsx(plates)
    with pytest.raises(ValidationError) as ei:
        read_campaign(f)
    (p,) = ei.value.problems
    assert (p.file, p.row, p.column, p.value) == ("plates.xlsx", 3, "temperature_c", "hot")


# ----------------------------------------------------------------------------------- folders, zips, uploads
def _zip(files: dict[str, bytes], prefix: str = "") -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for k, v in files.items():
            zf.writestr(prefix + k, v)
    return buf.getvalue()


def test_folder_zip_and_upload_give_the_same_data(tmp_path):
    base = baseline()
    folder = write_campaign(tmp_path / "camp")
    (folder / "README.txt").write_text("not part of the campaign")
    same_data(read_campaign(folder).data, base)
    same_data(read_campaign(str(folder / "campaign.toml")).data, base)
    for prefix in ("", "camp/"):
        z = tmp_path / f"c{len(prefix)}.zip"
        z.write_bytes(_zip(enc(good_files()) | {"__MACOSX/._x": b"junk"}, prefix))
        res = read_campaign(z)
        same_data(res.data, base)
        same_data(read_campaign({"upload.zip": z.read_bytes()}).data, base)
    same_data(read_campaign({f"some/dir/{k}": v for k, v in enc(good_files()).items()}).data, base)


def test_source_errors_are_validation_errors(tmp_path):
    with pytest.raises(ValidationError, match="does not exist"):
        read_campaign(tmp_path / "nope")
    (tmp_path / "x.txt").write_text("x")
    with pytest.raises(ValidationError, match="neither a campaign folder"):
        read_campaign(tmp_path / "x.txt")
    with pytest.raises(ValidationError, match="not a readable zip"):
        read_campaign({"c.zip": b"PK\x03\x04 broken"})
    with pytest.raises(ValidationError, match="either one .zip"):
        read_campaign({"c.zip": _zip(enc(good_files())), "layout.csv": b"x"})
    with pytest.raises(ValidationError, match="missing file"):
        read_campaign({"c.zip": _zip(enc(good_files()), "a/b/")})  # two folders deep: not found


def test_zip_refuses_dot_dot_and_absolute_paths():
    for bad in ("../evil.csv", "/etc/evil.csv", "camp/../../evil.csv"):
        with pytest.raises(ValidationError, match="absolute path or '..' refused"):
            extract_zip(_zip({bad: b"x"}))


def test_zip_refuses_symlinks():
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        info = zipfile.ZipInfo("link.csv")
        info.external_attr = (0o120777 << 16)
        zf.writestr(info, "/etc/passwd")
    with pytest.raises(ValidationError, match="symbolic link"):
        read_campaign({"c.zip": buf.getvalue()})


def test_zip_refuses_too_many_entries():
    with pytest.raises(ValidationError, match="has 201 entries; at most 200"):
        extract_zip(_zip({f"f{i}.txt": b"x" for i in range(201)}))
    assert len(extract_zip(_zip({f"f{i}.txt": b"x" for i in range(200)}))) == 200


def test_zip_refuses_bombs_and_oversize(monkeypatch):
    bomb = _zip({"readings.csv": b"0" * (5 * 2**20)})  # 5 MB of one character deflates ~1000x
    with pytest.raises(ValidationError, match="inflates .* times"):
        extract_zip(bomb, "bomb.zip")
    monkeypatch.setattr(sources, "MAX_UNCOMPRESSED_BYTES", 1000)
    with pytest.raises(ValidationError, match="at most 0 MB are accepted"):
        extract_zip(_zip({"a.csv": bytes(range(256)) * 8}), "big.zip")


def test_find_campaigns(tmp_path):
    one = write_campaign(tmp_path / "single")
    assert find_campaigns(one) == [one]
    root = tmp_path / "root"
    b = write_campaign(root / "b_run")
    a = write_campaign(root / "a_run")
    (root / "c_run.zip").write_bytes(_zip(enc(good_files()), "c_run/"))
    (root / "notes").mkdir()
    (root / "other.zip").write_bytes(_zip({"x.txt": b"x"}))
    assert find_campaigns(root) == [a, b, root / "c_run.zip"]
    with pytest.raises(ValidationError, match="holds no campaign"):
        find_campaigns(root / "notes")
    assert [read_campaign(p).data.name for p in find_campaigns(root)] == ["aldol test"] * 3


# ----------------------------------------------------------------------------------- plate formats
# ANSI/SLAS 4-2004 (Well Positions) and the plate configs listed in docs/check-values.md §9:
# 24 = 4 x 6 (A-D, 1-6), 48 = 6 x 8 (A-F, 1-8; from memory there), 96 = 8 x 12 (A-H, 1-12),
# 384 = 16 x 24 (A-P, 1-24).
@pytest.mark.parametrize("fmt,rows,cols", [(24, 4, 6), (48, 6, 8), (96, 8, 12), (384, 16, 24)])
def test_plate_formats_and_well_bounds(fmt, rows, cols):
    last = "ABCDEFGHIJKLMNOP"[rows - 1]
    plates = f"plate,format,temperature_c\nP1,{fmt},25\n"
    inside = [f"A{cols}", f"{last}1", f"{last}{cols}"]
    lay = "plate,well,role,substrate_conc,volume\n" + "".join(f"P1,{w},blank,10,100\n" for w in inside)
    rd = "plate,well,time,value\n" + "".join(f"P1,{w},0,0\n" for w in inside)
    f = good_files() | {"plates.csv": plates, "layout.csv": lay, "readings.csv": rd}
    d = read_campaign(enc(f)).data
    assert d.plates[["format", "n_rows", "n_cols"]].iloc[0].tolist() == [fmt, rows, cols]
    assert (d.wells["row"].max(), d.wells["col"].max()) == (rows - 1, cols - 1)
    nxt = "ABCDEFGHIJKLMNOPQ"[rows]
    outside = [f"A{cols + 1}", f"{nxt}1"] if rows < 16 else [f"A{cols + 1}"]
    bad = lay + "".join(f"P1,{w},blank,10,100\n" for w in outside)
    with pytest.raises(ValidationError) as ei:
        read_campaign(enc(f | {"layout.csv": bad}))
    probs = ei.value.problems
    assert len(probs) == len(outside)
    for p in probs:
        assert p.message.startswith(f"well outside the plate's {fmt}-well format (rows A-{last}, columns 1-{cols})") \
            or p.message.startswith("not a well name")
    # 96-well H12 is index 95 in row-major order (check-values.md §9 test case)
    if fmt == 96:
        aw = platelib.all_wells(96)
        assert aw.index[aw["well"] == "H12"][0] == 95


# ----------------------------------------------------------------------------------- robustness
_GOOD = enc(good_files())
_NAMES = sorted(_GOOD)


@st.composite
def mutated(draw):
    f = dict(_GOOD)
    for _ in range(draw(st.integers(1, 4))):
        name = draw(st.sampled_from(_NAMES))
        data = f.get(name, b"")
        op = draw(st.sampled_from(["flip", "insert", "delete", "truncate", "dupline", "dropline", "cell", "remove"]))
        pos = draw(st.integers(0, max(len(data) - 1, 0)))
        if op == "flip" and data:
            data = data[:pos] + bytes([draw(st.integers(0, 255))]) + data[pos + 1:]
        elif op == "insert":
            data = data[:pos] + draw(st.binary(min_size=1, max_size=8)) + data[pos:]
        elif op == "delete":
            data = data[:pos] + data[pos + draw(st.integers(1, 20)):]
        elif op == "truncate":
            data = data[:pos]
        elif op in ("dupline", "dropline") and data:
            lines = data.split(b"\n")
            i = draw(st.integers(0, len(lines) - 1))
            lines = lines[:i] + ([lines[i], lines[i]] if op == "dupline" else []) + lines[i + 1:]
            data = b"\n".join(lines)
        elif op == "cell" and data:
            word = draw(st.sampled_from([b"", b"-1", b"nan", b"inf", b"1e999", b"Z99", b"x", b";", b'"', b"0",
                                         b"1,5", b"\xff\xfe", b"empty", b"mol%", b"384", b"[x]", b"= 1"]))
            lines = data.split(b"\n")
            i = draw(st.integers(0, len(lines) - 1))
            cells = lines[i].split(b",")
            cells[draw(st.integers(0, len(cells) - 1))] = word
            lines[i] = b",".join(cells)
            data = b"\n".join(lines)
        elif op == "remove":
            f.pop(name, None)
            continue
        f[name] = data
    return f


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore::screenlab.errors.DataQualityWarning")
@settings(max_examples=50, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutated())
def test_mutations_give_a_result_or_a_validation_error(f):
    try:
        res = read_campaign(f)
    except ValidationError as exc:
        assert exc.problems and all(p.file for p in exc.problems)
        str(exc)
    else:
        assert isinstance(res.data, CampaignData)
        assert res.data.readings["time_h"].ge(0).all() and np.isfinite(res.data.readings["value"]).all()


# ----------------------------------------------------------------------------------- speed
@pytest.mark.slow
def test_speed_260k_readings():
    rng = np.random.default_rng(1)
    n_plates, n_times = 7, 97  # 7 x 384 wells x 97 times = 260,736 readings
    aw = platelib.all_wells(384)
    plates = "plate,format,temperature_c\n" + "".join(f"P{i},384,{40 + 10 * (i % 4)}\n" for i in range(n_plates))
    pw = pd.DataFrame({"plate": np.repeat([f"P{i}" for i in range(n_plates)], 384),
                       "well": np.tile(aw["well"].to_numpy(), n_plates)})
    pw["role"] = np.where(np.tile(aw["col"].to_numpy(), n_plates) == 0, "blank", "sample")
    pw["catalyst"] = np.where(pw["role"] == "sample", "C1", "")
    pw["loading"] = np.where(pw["role"] == "sample", "1.5", "")
    pw["loading_unit"] = np.where(pw["role"] == "sample", "umol", "")
    pw["substrate_conc"] = "100"
    pw["volume"] = "200"
    lay = pw.to_csv(index=False)
    t = np.arange(n_times) * 2.5
    rd = pd.DataFrame({"plate": np.repeat(pw["plate"].to_numpy(), n_times),
                       "well": np.repeat(pw["well"].to_numpy(), n_times),
                       "time": np.tile(t, len(pw)),
                       "value": np.round(rng.uniform(0, 100, len(pw) * n_times), 3)})
    assert len(rd) >= 260_000
    f = enc(good_files() | {"plates.csv": plates, "layout.csv": lay})
    f["readings.csv"] = rd.to_csv(index=False).encode()
    t0 = time.perf_counter()
    res = read_campaign(f)
    dt = time.perf_counter() - t0
    print(f"\nread + validated {len(res.data.readings):,} readings in {dt:.2f} s")
    assert len(res.data.readings) == len(rd)
    # the same with one bad reading: still every row checked, still one problem
    lines = f["readings.csv"].split(b"\n")
    cells = lines[12345 + 1].split(b",")
    lines[12345 + 1] = b",".join([cells[0], cells[1], b"-1", cells[3]])
    f["readings.csv"] = b"\n".join(lines)
    t0 = time.perf_counter()
    with pytest.raises(ValidationError) as ei:
        read_campaign(f)
    print(f"found the bad reading in {time.perf_counter() - t0:.2f} s")
    assert [p.row for p in ei.value.problems] == [12345 + 2]


def test_the_shared_good_campaign_reads(tmp_path):
    from screenlab.ingest import read_campaign

    res = read_campaign(write_campaign(tmp_path / "c"))
    assert len(res.data.wells) == 8
    assert len(res.data.readings) == 28
