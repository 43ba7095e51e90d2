"""Hostile input end to end: fuzzed CSV / TOML / XLSX through the reader, the store and the CLI;
zip archives on disk through ``screenlab ingest``; odd names through store and exports; formula
text neutralised in every exported CSV / XLSX cell.

Outside references used here:
* Python's stdlib ``csv``, ``json`` and ``zipfile`` modules and ``openpyxl`` read what the
  exports wrote, independently of screenlab.
* OWASP "CSV Injection" guidance (https://owasp.org/www-community/attacks/CSV_Injection): cells
  starting with ``=``, ``+``, ``-``, ``@``, tab or carriage return are run as formulas by
  spreadsheets; prefixing a single quote keeps them text.
* TOML 1.0 (https://toml.io/en/v1.0.0): basic strings use the JSON escapes, so ``json.dumps``
  of a name is a valid TOML string.
* Zip format: APPNOTE.TXT (PKWARE) external attributes; the upper 16 bits hold the Unix mode
  (S_IFLNK = 0o120000 for a symbolic link).
"""
from __future__ import annotations

import csv
import io
import json
import zipfile
from pathlib import Path

import openpyxl
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from campaign_texts import GOOD_TOML, good_files

from screenlab.cli import main
from screenlab.errors import ValidationError
from screenlab.ingest import read_campaign
from screenlab.model import CampaignData
from screenlab.store import ImportRefusedError, Store
from screenlab.synthetic import SyntheticSpec, write_campaign_folder

TRIGGERS = ("=", "+", "-", "@", "\t", "\r")


def is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def unsafe(cell) -> bool:
    """A text cell a spreadsheet would run as a formula (OWASP CSV Injection)."""
    return isinstance(cell, str) and cell.startswith(TRIGGERS) and not is_number(cell.strip())


# ---------------------------------------------------------------------------------- fuzzing

GOOD = {k: v.encode() for k, v in good_files().items()}
TOML_VALUES = ['"x"', "5", "-1", "0", "1e999", "nan", "inf", "-inf", "true", "[1, \"a\"]", "{a = 1}", "[]",
               "1979-05-27T07:32:00Z", '"""multi\nline"""', "'lit'", '"\\u0000"', '"=cmd"', '""', "[[x]]",
               '"mM"', '"percent"', '"absorbance"', "-0.0", "1_000", "0x1F"]


@st.composite
def toml_mutation(draw) -> bytes:
    lines = GOOD_TOML.splitlines()
    for _ in range(draw(st.integers(1, 3))):
        i = draw(st.integers(0, len(lines) - 1))
        op = draw(st.sampled_from(["value", "drop", "dup", "text", "header"]))
        if op == "value" and "=" in lines[i]:
            lines[i] = lines[i].split("=", 1)[0] + "= " + draw(st.sampled_from(TOML_VALUES))
        elif op == "drop":
            del lines[i]
        elif op == "dup":
            lines.insert(i, lines[i])
        elif op == "text":
            lines[i] = draw(st.text(max_size=30))
        else:
            lines.insert(i, draw(st.sampled_from(["[campaign]", "[units]", "[analysis.x]", "[[readout]]", "[]"])))
        if not lines:
            break
    return "\n".join(lines).encode("utf-8", "surrogatepass")


# control characters cannot be stored in a worksheet cell at all (openpyxl refuses them)
CELL = st.one_of(st.text(alphabet=st.characters(exclude_categories=("Cc", "Cs")), max_size=12), st.integers(-10**20, 10**20), st.floats(allow_nan=True, allow_infinity=True),
                 st.booleans(), st.none(), st.sampled_from(["=1/0", "=A1", "@SUM(A1)", "#N/A", "1,5", "2026-13-45"]))


def _xlsx(rows: list[list]) -> bytes:
    wb = openpyxl.Workbook()
    ws = wb.active
    for r in rows:
        ws.append(r)
    buf = io.BytesIO()
    wb.save(buf)
    return buf.getvalue()


@st.composite
def xlsx_mutation(draw) -> tuple[str, bytes]:
    table = draw(st.sampled_from(["catalysts", "plates", "layout", "readings"]))
    rows = list(csv.reader(io.StringIO(GOOD[f"{table}.csv"].decode())))
    kind = draw(st.sampled_from(["cells", "bytes", "empty", "header"]))
    if kind == "bytes":
        raw = _xlsx(rows)  # its bytes carry a timestamp: draw a relative position, not a byte index
        pos = min(len(raw) - 1, int(draw(st.floats(0.0, 1.0)) * len(raw)))
        return table, raw[:pos] + draw(st.binary(min_size=1, max_size=16)) + raw[pos + 1:]
    if kind == "empty":
        return table, _xlsx([])
    if kind == "header":
        rows[0][draw(st.integers(0, len(rows[0]) - 1))] = draw(CELL)
    for _ in range(draw(st.integers(1, 4))):
        r = draw(st.integers(1, len(rows) - 1))
        rows[r][draw(st.integers(0, len(rows[r]) - 1))] = draw(CELL)
    return table, _xlsx(rows)


@st.composite
def hostile_campaign(draw) -> dict[str, bytes]:
    f = dict(GOOD)
    kind = draw(st.sampled_from(["toml", "xlsx", "csv_text", "random_bytes"]))
    if kind == "toml":
        f["campaign.toml"] = draw(toml_mutation())
    elif kind == "xlsx":
        table, data = draw(xlsx_mutation())
        f.pop(f"{table}.csv")
        f[f"{table}.xlsx"] = data
    elif kind == "csv_text":
        name = draw(st.sampled_from(["catalysts.csv", "plates.csv", "layout.csv", "readings.csv"]))
        lines = f[name].decode().splitlines()
        i = draw(st.integers(0, len(lines) - 1))
        lines[i] = draw(st.text(alphabet=st.characters(codec="utf-8"), max_size=40))
        f[name] = "\n".join(lines).encode("utf-8", "surrogatepass")
    else:
        name = draw(st.sampled_from(sorted(f)))
        f[name] = draw(st.binary(max_size=200))
    return f


@pytest.fixture(scope="module")
def fuzz_store(tmp_path_factory):
    path = tmp_path_factory.mktemp("fuzz") / "fuzz.duckdb"
    store = Store(path)
    store.import_campaign(read_campaign(dict(GOOD)))  # the good version is stored; changes must be refused
    return store


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore::screenlab.errors.DataQualityWarning")
@settings(max_examples=30, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                 HealthCheck.function_scoped_fixture])
@given(files=hostile_campaign())
def test_hostile_files_give_an_import_or_a_clear_error_and_errors_leave_the_store_unchanged(fuzz_store, files):
    before = fuzz_store.table_counts()
    try:
        res = read_campaign(files)
    except ValidationError as exc:
        assert exc.problems and all(p.file and p.message for p in exc.problems)
        assert "nothing was written" in str(exc)
        assert fuzz_store.table_counts() == before
        return
    assert isinstance(res.data, CampaignData)
    try:
        rep = fuzz_store.import_campaign(res, dry_run=False)
    except (ValidationError, ImportRefusedError) as exc:
        assert str(exc)
        assert fuzz_store.table_counts() == before
        return
    assert rep.status in ("imported", "unchanged", "added_plates")
    if rep.status == "unchanged":
        assert fuzz_store.table_counts() == before


@pytest.mark.slow
@pytest.mark.filterwarnings("ignore::screenlab.errors.DataQualityWarning")
@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                 HealthCheck.function_scoped_fixture])
@given(files=hostile_campaign())
def test_hostile_files_through_the_cli_never_raise(tmp_path_factory, capsys, files):
    tmp = tmp_path_factory.mktemp("cli")
    folder = tmp / "c"
    folder.mkdir()
    for name, data in files.items():
        (folder / name).write_bytes(data)
    code = main(["ingest", str(folder), "--store", str(tmp / "s.duckdb")])  # an exception fails the test
    out, err = capsys.readouterr()
    assert code in (0, 1)
    assert "Traceback" not in err
    if code == 1:
        assert "nothing was written" in err or "could not be read" in err or "refused" in err
        if (tmp / "s.duckdb").exists():
            assert Store(tmp / "s.duckdb").table_counts()["readings"] == 0


# ---------------------------------------------------------------------------------- zips on disk

def _zip_file(path: Path, entries: dict[str, bytes], symlink: str | None = None) -> Path:
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        for k, v in entries.items():
            zf.writestr("camp/" + k if not k.startswith(("/", "..", "C:")) and "/" not in k else k, v)
        if symlink:
            info = zipfile.ZipInfo(symlink)
            info.external_attr = 0o120777 << 16  # S_IFLNK in the Unix mode bits (APPNOTE.TXT)
            zf.writestr(info, "/etc/passwd")
    return path


@pytest.mark.parametrize("case", ["dotdot", "absolute", "drive", "backslash", "symlink", "bomb", "entries"])
def test_hostile_zips_through_ingest_are_refused_with_a_message(tmp_path, capsys, case):
    good = dict(GOOD)
    extra: dict[str, bytes] = {}
    link = None
    if case == "dotdot":
        extra = {"camp/../../outside.csv": b"x"}
    elif case == "absolute":
        extra = {"/tmp/outside.csv": b"x"}
    elif case == "drive":
        extra = {"C:/outside.csv": b"x"}
    elif case == "backslash":
        extra = {"camp\\..\\..\\outside.csv": b"x"}
    elif case == "symlink":
        link = "camp/link.csv"
    elif case == "bomb":
        extra = {"camp/padding.csv": b"0" * (8 * 2**20)}  # 8 MB of one byte deflates about 1000 times
    else:
        extra = {f"camp/f{i}.txt": b"x" for i in range(250)}
    z = _zip_file(tmp_path / "c.zip", {**good, **extra}, symlink=link)
    db = tmp_path / "s.duckdb"
    Store(db).import_campaign(read_campaign(dict(GOOD)))
    before = Store(db).table_counts()
    code = main(["ingest", str(z), "--store", str(db)])
    _, err = capsys.readouterr()
    assert code == 1 and "c.zip" in err and "Traceback" not in err
    word = {"dotdot": "'..'", "absolute": "absolute path", "drive": "absolute path", "backslash": "'..'",
            "symlink": "symbolic link", "bomb": "inflates", "entries": "entries"}[case]
    assert word in err
    assert Store(db).table_counts() == before
    assert not (tmp_path / "outside.csv").exists() and not Path("/tmp/outside.csv").exists()


# ---------------------------------------------------------------------------------- odd names

ODD_CAMPAIGN = '=cmd "run"; 🧪 Müller'
ODD_IDS = {"C00001": '=HYPERLINK("http://x")', "C00002": "@SUM(A1)", "C00003": "+cmd|' /C calc'!A0",
           "C00004": 'Ni "q"; 🧪', "C00005": "Pd'ü,1 – β"}
ODD_NAMES = {"C00001": "-2+3", "C00002": "=1+1", "C00003": "-cmd", "C00004": "名前", "C00005": "; DROP TABLE x;--"}


def _rewrite_csv(path: Path, fn) -> None:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    fields = list(rows[0])
    for r in rows:
        fn(r)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.DictWriter(fh, fieldnames=fields)
        w.writeheader()
        w.writerows(rows)


@pytest.fixture(scope="module")
def odd_store(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("odd")
    folder = write_campaign_folder(tmp / "c", SyntheticSpec(n_plates=4, fmt=24, n_times=6, replicates=2,
                                                             n_blanks=3, n_reference=3, seed=5, name="tmp"))
    toml = (folder / "campaign.toml").read_text(encoding="utf-8").splitlines()
    toml = [f"name = {json.dumps(ODD_CAMPAIGN, ensure_ascii=False)}" if ln.startswith("name = ") else ln
            for ln in toml]
    (folder / "campaign.toml").write_text("\n".join(toml) + "\n", encoding="utf-8")

    def cat(r):
        c = r["catalyst"]
        r["name"] = ODD_NAMES.get(c, r["name"])
        r["family"] = "@family" if c in ODD_IDS else r["family"]
        r["catalyst"] = ODD_IDS.get(c, c)

    def lay(r):
        r["catalyst"] = ODD_IDS.get(r["catalyst"], r["catalyst"])
        r["solvent"] = "=DDE(\"x\")" if r["well"] == "A2" else r["solvent"]

    def pla(r):
        r["notes"] = '+notes "1"; ✓'

    _rewrite_csv(folder / "catalysts.csv", cat)
    _rewrite_csv(folder / "layout.csv", lay)
    _rewrite_csv(folder / "plates.csv", pla)
    db = tmp / "odd.duckdb"
    assert main(["ingest", str(folder), "--store", str(db)]) == 0
    return db, folder


def test_odd_names_round_trip_through_the_store(odd_store):
    db, folder = odd_store
    store = Store(db)
    assert store.campaign_names() == [ODD_CAMPAIGN]
    data = store.load_campaign(ODD_CAMPAIGN)
    with open(folder / "catalysts.csv", newline="", encoding="utf-8") as fh:  # stdlib csv reader
        want = {r["catalyst"]: r["name"] for r in csv.DictReader(fh)}
    got = dict(zip(data.catalysts["catalyst"].astype(str), data.catalysts["name"].astype(str)))
    for c in ODD_IDS.values():
        assert got[c] == want[c].strip()  # the reader trims padding around cells (campaign-format.md)
    assert set(ODD_IDS.values()) <= set(data.wells["catalyst"].dropna().astype(str))
    assert (data.plates["notes"] == '+notes "1"; ✓').all()
    assert '=DDE("x")' in set(data.wells["solvent"].astype(str))


def test_odd_names_in_cli_json_are_exact_and_in_csv_are_neutralised(odd_store, capsys):
    db, _ = odd_store
    assert main(["campaigns", "--store", str(db), "--format", "json"]) == 0
    rows = json.loads(capsys.readouterr().out)
    assert [r["campaign"] for r in rows] == [ODD_CAMPAIGN]  # JSON is data, kept exact
    assert main(["campaigns", "--store", str(db), "--format", "csv"]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert rows[0]["campaign"] == "'" + ODD_CAMPAIGN
    assert main(["rates", "--store", str(db), "--campaign", ODD_CAMPAIGN, "--format", "csv"]) == 0
    out = capsys.readouterr().out
    table = list(csv.reader(io.StringIO(out)))
    cells = [c for row in table for c in row]
    assert not [c for c in cells if unsafe(c)]
    for c in ODD_IDS.values():  # every odd id is there, neutralised when it looks like a formula
        assert (("'" + c) if unsafe(c) else c) in cells
    assert main(["rates", "--store", str(db), "--campaign", ODD_CAMPAIGN, "--format", "json"]) == 0
    ids = {r["catalyst"] for r in json.loads(capsys.readouterr().out)}
    assert set(ODD_IDS.values()) <= ids


@pytest.mark.slow
def test_every_shortlist_csv_and_xlsx_cell_is_neutralised(odd_store, tmp_path, capsys):
    db, _ = odd_store
    out = tmp_path / "sl"
    code = main(["shortlist", "--store", str(db), "--campaign", ODD_CAMPAIGN, "--top", "5", "--out", str(out),
                 "--draws", "2000"])
    _, err = capsys.readouterr()
    assert code == 0, err
    with open(out / "shortlist.csv", newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(fh))
    bad = [c for row in rows for c in row if unsafe(c)]
    assert not bad, bad
    n_cells = 0
    wb = openpyxl.load_workbook(out / "shortlist.xlsx")
    for ws in wb.worksheets:
        for row in ws.iter_rows():
            for cell in row:
                n_cells += 1
                assert cell.data_type != "f", (ws.title, cell.coordinate, cell.value)  # no formula cell
                assert not unsafe(cell.value), (ws.title, cell.coordinate, cell.value)
    assert n_cells > 100
    # the neutralised text is still the name: a reader strips the one quote and gets it back
    short = pd.read_csv(out / "shortlist.csv", dtype=str, keep_default_na=False)
    back = {s[1:] if s.startswith("'") else s for s in short["catalyst"]}
    assert back & set(ODD_IDS.values())
    # Parquet is not opened by spreadsheets: the names stay exact there
    assert set(pd.read_parquet(out / "shortlist.parquet")["catalyst"]) & set(ODD_IDS.values())
