"""Plate fingerprints (definition version 2; screenlab.store.fingerprints) and the upgrade of stores
written with version 1.

* The vectorised :func:`plate_fingerprints` is compared with the definition written out in plain
  Python below (one plate at a time, one row at a time; ``_ref_fingerprints``) on small random
  campaigns with missing cells, unicode text, factors and shuffled rows.
* splitmix64: the finaliser against its published reference sequence (seed 1234567; Vigna's
  splitmix64.c, the values from memory) and against the textbook finaliser with Python ints
  (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number generators", OOPSLA).
* The sort shortcut (``lex_sorted``) against ``np.lexsort`` (hypothesis).
* The fixture store tests/fixtures/stores/schema_1.duckdb.gz was written by the previous code
  (version 1 fingerprints); opened for writing, its fingerprints are recomputed, and re-importing
  its own data is "unchanged" while a real change is still seen and named.
"""
from __future__ import annotations

import gzip
import hashlib
import math
import shutil
import struct
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from screenlab.store import Store
from screenlab.store import fingerprints as F
from screenlab.store.storage import PLATE_COLS, READING_COLS, WELL_COLS, prepare

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
    kinds = {**PLATE_COLS, **WELL_COLS, **READING_COLS, "factor": "s", "value": "f"}
    fkinds = {"well": "s", "factor": "s", "value": "s"}
    out = []
    for rec in plates.to_dict("records"):  # reference: one plate at a time, one row at a time
        name = rec["plate"]
        pc = [c for c in PLATE_COLS if c != "plate"]
        fp_plate = hashlib.sha256(_row(rec, pc, kinds).to_bytes(8, "little")).hexdigest()
        w = [r for r in wells.to_dict("records") if r["plate"] == name]
        f = [r for r in factors.to_dict("records") if r["plate"] == name]
        rr = [r for r in readings.to_dict("records") if r["plate"] == name]
        wl = _ref_digest(w, ["well"], [c for c in WELL_COLS if c != "plate"], kinds)
        fl = _ref_digest(f, ["well", "factor"], ["well", "factor", "value"], fkinds)
        rcols = ["well", "analyte", "time_h", "value"]
        out.append((name, fp_plate, hashlib.sha256((wl + fl).encode()).hexdigest(),
                    _ref_digest(rr, rcols, rcols, kinds)))
    return pd.DataFrame(out, columns=["plate", "fp_plate", "fp_layout", "fp_readings"])


# ------------------------------------------------------------------ helpers
def _random_data(make_data, seed: int):
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
def test_vectorised_fingerprints_equal_the_plain_reference(make_data, seed):
    prep = prepare(_random_data(make_data, seed))
    got = F.plate_fingerprints(prep.plates, prep.wells, prep.factors, prep.readings)
    want = _ref_fingerprints(prep.plates, prep.wells, prep.factors, prep.readings)
    pd.testing.assert_frame_equal(got.reset_index(drop=True), want, check_dtype=False)
    assert got["fp_readings"].nunique() == len(got)  # plates with different readings differ


def _fps(data) -> pd.DataFrame:
    return F.of_prepared(prepare(data)).set_index("plate")


def test_fingerprints_ignore_row_order_and_name_what_changed(make_data):
    data = _random_data(make_data, 4)
    a = _fps(data)
    b = _fps(_shuffled(data, 9))
    pd.testing.assert_frame_equal(a, b.loc[a.index])
    r = data.readings.copy()
    pos = int(np.flatnonzero((r["plate"] == "P2").to_numpy())[5])
    r.loc[pos, "value"] = r.loc[pos, "value"] + 1e-9 if pd.notna(r.loc[pos, "value"]) else 1.0
    w = data.wells.copy()
    w.loc[int(np.flatnonzero((w["plate"] == "P1").to_numpy())[0]), "solvent"] = "dioxane"
    c = _fps(type(data)(manifest=data.manifest, catalysts=data.catalysts, plates=data.plates, wells=w,
                        readings=r, factor_names=data.factor_names))
    diff = (a != c.loc[a.index])
    assert diff.loc["P2"].tolist() == [False, False, True]      # readings only
    assert diff.loc["P1"].tolist() == [False, True, False]      # layout (a factor value) only
    assert not diff.loc["Pü 3"].any()


def test_fingerprint_version_is_recorded_in_a_new_store(tmp_path, make_data):
    store = Store(tmp_path / "s.duckdb")
    store.import_campaign(make_data("new-store"))
    assert store.metadata()["fingerprint_version"] == F.FINGERPRINT_VERSION


def test_store_written_by_the_previous_code_sees_an_unchanged_reimport(tmp_path):
    path = tmp_path / "old.duckdb"
    with gzip.open(FIXTURE, "rb") as src, open(path, "wb") as out:
        shutil.copyfileobj(src, out)
    con = duckdb.connect(str(path))
    try:  # the fixture as the old code left it: no version key, fingerprints of another definition
        assert con.execute("SELECT count(*) FROM metadata WHERE key = 'fingerprint_version'").fetchall()[0][0] == 0
        old_fp = dict(con.execute("SELECT campaign || '/' || plate, fingerprint FROM plates "
                                  "WHERE superseded_by IS NULL").fetchall())
    finally:
        con.close()
    store = Store(path)
    assert store.metadata()["fingerprint_version"] == F.FINGERPRINT_VERSION  # opened for writing: upgraded
    con = duckdb.connect(str(path), read_only=True)
    try:
        new_fp = dict(con.execute("SELECT campaign || '/' || plate, fingerprint FROM plates "
                                  "WHERE superseded_by IS NULL").fetchall())
    finally:
        con.close()
    assert set(new_fp) == set(old_fp)
    for name in store.campaign_names():
        data = store.load_campaign(name)
        now = F.with_text(F.of_prepared(prepare(data)))
        for row in now.itertuples():  # recomputed: the stored text is the current definition's
            key = f"{name}/{row.plate}"
            assert new_fp[key] == row.fp != old_fp[key]
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


def test_upgrade_recomputes_superseded_versions_too(tmp_path, make_data):
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


def test_splitmix64_gives_its_reference_sequence():
    """SplitMix64 with seed 1234567: state += 0x9E3779B97F4A7C15, output = finaliser(state); the
    reference outputs of splitmix64.c (from memory), and the finaliser with Python ints."""
    state = np.array([1234567], dtype=np.uint64)
    got = []
    for _ in range(3):
        state = state + np.uint64(0x9E3779B97F4A7C15)
        got.append(int(F.mix64(state.copy())[0]))
    assert got == [6457827717110365317, 3203168211198807973, 9817491932198370423]
    rng = np.random.default_rng(3)
    x = rng.integers(0, 2 ** 63, 200, dtype=np.uint64) * np.uint64(2) + rng.integers(0, 2, 200, dtype=np.uint64)
    assert [int(v) for v in F.mix64(x.copy())] == [_mix(int(v)) for v in x]


_KEY = st.lists(st.tuples(st.integers(0, 2), st.sampled_from([0.0, 1.0, -0.0, math.nan])), max_size=12)


@given(_KEY, st.booleans())
@settings(max_examples=300, deadline=None)
def test_lex_sorted_says_whether_lexsort_would_move_a_row(rows, presort):
    keys = [np.array([r[0] for r in rows], dtype=np.int64), np.array([r[1] for r in rows], dtype=float)]
    if presort and rows:  # mostly sorted inputs, where the shortcut matters
        order = np.lexsort(keys[::-1])
        keys = [k[order] for k in keys]
    identity = np.array_equal(np.lexsort(keys[::-1]), np.arange(len(rows))) if rows else True
    assert F.lex_sorted(keys) == identity
