"""Plate fingerprints (definition version 2) and the upgrade of stores written with version 1.

* The vectorised :func:`screenlab.store.db.plate_fingerprints` is compared with a plain
  per-plate, per-row Python reference of the same definition (``_ref_fingerprints`` below) on
  small random campaigns with missing cells, unicode text, factors and shuffled rows.
* The fixture store tests/fixtures/stores/schema_1.duckdb.gz was written by the previous code
  (version 1 fingerprints, before this change); re-importing its own data must be "unchanged",
  and its stored fingerprints must equal the version 1 definition kept here (``_v1_fingerprints``,
  the removed code, verbatim).
* splitmix64 constants: Steele, Lea & Flood (2014), "Fast splittable pseudorandom number
  generators", OOPSLA; the reference below is the textbook finaliser written with Python ints.
"""
from __future__ import annotations

import gzip
import hashlib
import math
import shutil
import struct
import sys
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from store_samples import make_data  # noqa: E402

from screenlab.store import Store  # noqa: E402
from screenlab.store import db  # noqa: E402

M64 = (1 << 64) - 1
NA = 0x9E3779B97F4A7C15
FIXTURE = Path(__file__).parent / "fixtures" / "stores" / "schema_1.duckdb.gz"


# ------------------------------------------------------------------ reference, version 2 (plain Python)
def _mix(x: int) -> int:
    x ^= x >> 30
    x = (x * 0xBF58476D1CE4E5B9) & M64
    x ^= x >> 27
    x = (x * 0x94D049BB133111EB) & M64
    return x ^ (x >> 31)


def _blake(t: str) -> int:
    return int.from_bytes(hashlib.blake2b(t.encode("utf-8", "surrogatepass"), digest_size=8).digest(), "little")


def _missing(v) -> bool:
    return v is None or v is pd.NA or (isinstance(v, float) and math.isnan(v))


def _cell(v, kind: str) -> int:
    if _missing(v):
        return NA
    if kind == "s":
        return _blake(str(v))
    if kind == "i":
        return _mix((int(v) & M64) ^ 1)
    return _mix(struct.unpack("<Q", struct.pack("<d", float(v) + 0.0))[0] ^ 2)


def _row(rec: dict, cols: list[str], kinds: dict[str, str]) -> int:
    h = 0
    for c in cols:
        h = _mix(((h * 0x100000001B3) & M64) ^ _mix(_cell(rec[c], kinds[c]) ^ _blake(c)))
    return h


def _key(v, kind):
    if _missing(v):
        return (0, "") if kind == "s" else (1, 0.0)   # text: missing first; numbers: NaN last
    return (1, str(v)) if kind == "s" else (0, float(v))


def _ref_digest(records: list[dict], keys, cols, kinds) -> str:
    records = sorted(records, key=lambda r: tuple(_key(r[k], kinds[k]) for k in keys))
    return hashlib.sha256(b"".join(_row(r, cols, kinds).to_bytes(8, "little") for r in records)).hexdigest()


def _ref_fingerprints(plates, wells, factors, readings) -> pd.DataFrame:
    kinds = {**db.PLATE_COLS, **db.WELL_COLS, **db.READING_COLS, "factor": "s", "value": "f"}
    fkinds = {"well": "s", "factor": "s", "value": "s"}
    out = []
    for rec in plates.to_dict("records"):  # reference: one plate at a time, one row at a time
        name = rec["plate"]
        pc = [c for c in db.PLATE_COLS if c != "plate"]
        fp_plate = hashlib.sha256(_row(rec, pc, kinds).to_bytes(8, "little")).hexdigest()
        w = [r for r in wells.to_dict("records") if r["plate"] == name]
        f = [r for r in factors.to_dict("records") if r["plate"] == name]
        rr = [r for r in readings.to_dict("records") if r["plate"] == name]
        wl = _ref_digest(w, ["well"], [c for c in db.WELL_COLS if c != "plate"], kinds)
        fl = _ref_digest(f, ["well", "factor"], ["well", "factor", "value"], fkinds)
        rcols = ["well", "analyte", "time_h", "value"]
        out.append((name, fp_plate, hashlib.sha256((wl + fl).encode()).hexdigest(),
                    _ref_digest(rr, rcols, rcols, kinds)))
    return pd.DataFrame(out, columns=["plate", "fp_plate", "fp_layout", "fp_readings"])


# ------------------------------------------------------------------ version 1 (the previous code, verbatim)
def _v1_column_bytes(s: pd.Series) -> bytes:
    if isinstance(s.dtype, pd.StringDtype) or s.dtype == object:
        vals = s.astype(object).where(s.notna(), "\x00").tolist()
        return ("\x1f".join(map(str, vals)) + "\x1e").encode()
    if isinstance(s.dtype, pd.Int64Dtype):
        return s.fillna(-(2**62)).to_numpy(dtype=np.int64).tobytes() + b"\x1e"
    v = s.to_numpy(dtype=np.float64)
    v = np.where(np.isnan(v), np.nan, v)
    return np.ascontiguousarray(v).tobytes() + b"\x1e"


def _v1_digest(frame, positions, cols) -> str:
    h = hashlib.sha256()
    if positions is not None and len(positions):
        part = frame.iloc[positions]
        for c in cols:
            h.update(c.encode() + b"=")
            h.update(_v1_column_bytes(part[c]))
    return h.hexdigest()


def _v1_fingerprints(plates, wells, factors, readings) -> pd.DataFrame:
    def slices(s):
        return {k: np.asarray(v) for k, v in s.groupby(s, sort=False).indices.items()}

    w = wells.sort_values(["plate", "well"], kind="stable").reset_index(drop=True)
    f = factors.sort_values(["plate", "well", "factor"], kind="stable").reset_index(drop=True)
    r = readings.sort_values(["plate", "well", "analyte", "time_h", "value"], kind="stable").reset_index(drop=True)
    p = plates.reset_index(drop=True)
    ws, fs, rs = slices(w["plate"]), slices(f["plate"]), slices(r["plate"])
    rows = []
    for i, name in enumerate(p["plate"].tolist()):
        fp_plate = _v1_digest(p, np.array([i]), [c for c in db.PLATE_COLS if c != "plate"])
        layout = hashlib.sha256()
        layout.update(_v1_digest(w, ws.get(name), [c for c in db.WELL_COLS if c != "plate"]).encode())
        layout.update(_v1_digest(f, fs.get(name), ["well", "factor", "value"]).encode())
        rows.append((name, fp_plate, layout.hexdigest(),
                     _v1_digest(r, rs.get(name), ["well", "analyte", "time_h", "value"])))
    return pd.DataFrame(rows, columns=["plate", "fp_plate", "fp_layout", "fp_readings"])


# ------------------------------------------------------------------ helpers
def _random_data(seed: int):
    """A small CampaignData with random gaps: missing notes / loadings / factor cells, unicode."""
    rng = np.random.default_rng(seed)
    data = make_data(f"fp-{seed}", plates=("P1", "P2", "Pü 3"))
    wells = data.wells.copy()
    wells["solvent"] = rng.choice(np.array(["toluene", "THF", "MeCN ✓", None], dtype=object), len(wells))
    wells["additive"] = rng.choice(np.array(["none", "LiCl", None], dtype=object), len(wells))
    wells.loc[rng.random(len(wells)) < 0.1, "loading"] = np.nan
    plates = data.plates.copy()
    plates["notes"] = np.array([None, "β block", ""], dtype=object)[: len(plates)]
    readings = data.readings.copy()
    readings["value"] = readings["value"] + rng.normal(0, 0.5, len(readings))
    readings.loc[rng.random(len(readings)) < 0.05, "value"] = np.nan
    readings.loc[readings.index[:3], "value"] = -0.0
    return type(data)(manifest=data.manifest, catalysts=data.catalysts, plates=plates, wells=wells,
                      readings=readings, factor_names=("solvent", "additive"))


def _shuffled(data, seed):
    rng = np.random.default_rng(seed)
    return type(data)(manifest=data.manifest, catalysts=data.catalysts,
                      plates=data.plates.iloc[rng.permutation(len(data.plates))].reset_index(drop=True),
                      wells=data.wells.iloc[rng.permutation(len(data.wells))].reset_index(drop=True),
                      readings=data.readings.iloc[rng.permutation(len(data.readings))].reset_index(drop=True),
                      factor_names=data.factor_names)


# ------------------------------------------------------------------ tests
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_vectorised_fingerprints_equal_the_plain_reference(seed):
    prep = db._prepare(_random_data(seed))
    got = db.plate_fingerprints(prep.plates, prep.wells, prep.factors, prep.readings)
    want = _ref_fingerprints(prep.plates, prep.wells, prep.factors, prep.readings)
    pd.testing.assert_frame_equal(got.reset_index(drop=True), want, check_dtype=False)
    assert got["fp_readings"].nunique() == len(got)  # plates with different readings differ


def test_fingerprints_ignore_row_order_and_name_what_changed():
    data = _random_data(4)
    a = db._prepare(data).fingerprints.set_index("plate")
    b = db._prepare(_shuffled(data, 9)).fingerprints.set_index("plate")
    pd.testing.assert_frame_equal(a, b.loc[a.index])
    r = data.readings.copy()
    pos = int(np.flatnonzero((r["plate"] == "P2").to_numpy())[5])
    r.loc[pos, "value"] = r.loc[pos, "value"] + 1e-9 if pd.notna(r.loc[pos, "value"]) else 1.0
    w = data.wells.copy()
    w.loc[int(np.flatnonzero((w["plate"] == "P1").to_numpy())[0]), "solvent"] = "dioxane"
    c = db._prepare(type(data)(manifest=data.manifest, catalysts=data.catalysts, plates=data.plates, wells=w,
                               readings=r, factor_names=data.factor_names)).fingerprints.set_index("plate")
    diff = (a != c.loc[a.index])
    assert diff.loc["P2"].tolist() == [False, False, True]      # readings only
    assert diff.loc["P1"].tolist() == [False, True, False]      # layout (a factor value) only
    assert not diff.loc["Pü 3"].any()


def test_fingerprint_version_is_recorded_in_a_new_store(tmp_path):
    store = Store(tmp_path / "s.duckdb")
    store.import_campaign(make_data("new-store"))
    assert store.metadata()["fingerprint_version"] == db.FINGERPRINT_VERSION


def test_store_written_by_the_previous_code_sees_an_unchanged_reimport(tmp_path):
    path = tmp_path / "old.duckdb"
    with gzip.open(FIXTURE, "rb") as src, open(path, "wb") as out:
        shutil.copyfileobj(src, out)
    con = duckdb.connect(str(path))
    try:  # the fixture as the old code left it: no version key, version 1 fingerprints
        assert con.execute("SELECT count(*) FROM metadata WHERE key = 'fingerprint_version'").fetchall()[0][0] == 0
        old_fp = dict(con.execute("SELECT campaign || '/' || plate, fingerprint FROM plates "
                                  "WHERE superseded_by IS NULL").fetchall())
    finally:
        con.close()
    store = Store(path)
    assert store.metadata()["fingerprint_version"] == db.FINGERPRINT_VERSION
    for name in store.campaign_names():
        data = store.load_campaign(name)
        prep = db._prepare(data)
        v1 = _v1_fingerprints(prep.plates, prep.wells, prep.factors, prep.readings)
        for row in v1.itertuples():  # the kept version 1 code reproduces what the old store holds
            assert old_fp[f"{name}/{row.plate}"] == db._fp_text(row)
        rep = store.import_campaign(data)
        assert rep.status == "unchanged", rep.message
        assert sorted(rep.plates_unchanged) == sorted(data.plates["plate"])
    # a real change is still seen after the upgrade, and named
    name = "fixture-plain"
    data = store.load_campaign(name)
    r = data.readings.copy()
    r.loc[0, "value"] = r.loc[0, "value"] + 0.5
    changed = type(data)(manifest=data.manifest, catalysts=data.catalysts, plates=data.plates, wells=data.wells,
                         readings=r, factor_names=data.factor_names)
    rep = store.import_campaign(changed, dry_run=True, replace=True)
    assert rep.plates_replaced == (str(r.loc[0, "plate"]),)


def test_upgrade_recomputes_superseded_versions_too(tmp_path):
    path = tmp_path / "s.duckdb"
    store = Store(path)
    store.import_campaign(make_data("hist", plates=("P1", "P2")))
    d2 = make_data("hist", plates=("P1", "P2"), k_scale=1.5)
    store.import_campaign(d2, replace=True)
    con = duckdb.connect(str(path))
    try:
        want = con.execute("SELECT plate, import_id, fingerprint FROM plates ORDER BY plate, import_id").fetchall()
        con.execute("UPDATE plates SET fingerprint = 'stale'")
        con.execute("DELETE FROM metadata WHERE key = 'fingerprint_version'")
    finally:
        con.close()
    again = Store(path)
    assert again.import_campaign(d2).status == "unchanged"
    con = duckdb.connect(str(path), read_only=True)
    try:
        got = con.execute("SELECT plate, import_id, fingerprint FROM plates ORDER BY plate, import_id").fetchall()
    finally:
        con.close()
    assert got == want and len(got) == 4
