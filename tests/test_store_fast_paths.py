"""Store internals made faster, each against the plain computation it replaces:

* ``_validate`` (row checks on factor codes) against the previous implementation, kept below
  verbatim (``DataFrame.duplicated`` and ``Series.isin`` on every row);
* the long form of the factor columns against the previous melt + merge;
* ``_arrow`` against ``pyarrow.Table.from_pandas``;
* ``_lex_sorted`` (the test that lets the fingerprint skip its sort) against comparing
  ``np.lexsort`` with the identity;
* a large import commits straight into the file (no WAL left behind) and keeps every row.
"""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

sys.path.insert(0, str(Path(__file__).parent))
from store_samples import make_data  # noqa: E402

from screenlab.errors import Problem, ValidationError  # noqa: E402
from screenlab.model import CampaignData  # noqa: E402
from screenlab.store import Store  # noqa: E402
from screenlab.store import db  # noqa: E402


# ------------------------------------------------------------------ the previous code, verbatim
def old_validate(data: CampaignData) -> None:
    problems: list[Problem] = []
    frames = {"catalysts": data.catalysts, "plates": data.plates, "wells": data.wells, "readings": data.readings}
    for name, frame in frames.items():
        if not isinstance(frame, pd.DataFrame):
            problems.append(Problem(name, None, None, None, "is not a table (pandas DataFrame)"))
            continue
        for col in db._REQUIRED[name]:
            if col not in frame.columns:
                problems.append(Problem(name, None, col, None, "required column is missing"))
        if name in ("catalysts", "plates", "readings"):
            extra = [c for c in frame.columns if c not in db._FRAME_COLS[name]]
            for c in extra:
                problems.append(Problem(name, None, str(c), None,
                                        f"column the store does not know; expected only {', '.join(db._FRAME_COLS[name])}"))
    if not str(data.manifest.name or "").strip():
        problems.append(Problem("campaign.toml", None, "name", None, "campaign name is empty"))
    if problems:
        raise ValidationError(problems, source=f"campaign {data.manifest.name!r}")

    def dupes(frame, keys, name):
        bad = frame[keys].isna().any(axis=1) | frame.duplicated(keys, keep="first")
        for pos in np.flatnonzero(bad.to_numpy())[:20]:
            vals = ", ".join(str(frame[k].iloc[pos]) for k in keys)
            problems.append(Problem(name, int(pos) + 2, keys[-1], vals, f"{'/'.join(keys)} missing or not unique"))

    dupes(data.catalysts, ["catalyst"], "catalysts")
    dupes(data.plates, ["plate"], "plates")
    dupes(data.wells, ["plate", "well"], "wells")
    known = set(data.plates["plate"].dropna().astype(str))
    for name in ("wells", "readings"):
        frame = getattr(data, name)
        bad = ~frame["plate"].astype("string").isin(known).fillna(False).to_numpy(dtype=bool)
        for pos in np.flatnonzero(bad)[:20]:
            problems.append(Problem(name, int(pos) + 2, "plate", str(frame["plate"].iloc[pos]),
                                    "plate is not in the plates table"))
    if problems:
        raise ValidationError(problems, source=f"campaign {data.manifest.name!r}")


def old_factors(wells: pd.DataFrame, wel: pd.DataFrame, factor_columns) -> pd.DataFrame:
    wide = wells[list(factor_columns)].reset_index(drop=True)
    wide = wide.apply(db._text)
    long = wide.assign(seq=np.arange(len(wide), dtype=np.int64)).melt(
        id_vars="seq", var_name="factor", value_name="value")
    long = long[long["value"].notna()]
    long = long.merge(wel[["seq", "plate", "well"]], on="seq", how="left")
    factors = long[["plate", "seq", "well", "factor", "value"]].reset_index(drop=True)
    factors["factor"] = factors["factor"].astype("string")
    factors["value"] = factors["value"].astype("string")
    return factors


# ------------------------------------------------------------------ helpers
def _replace(data, **frames):
    parts = {k: getattr(data, k) for k in ("catalysts", "plates", "wells", "readings")}
    parts.update(frames)
    return CampaignData(manifest=data.manifest, factor_names=data.factor_names, **parts)


def _problems(fn, data):
    try:
        fn(data)
    except ValidationError as exc:
        return [str(p) for p in exc.problems]
    return None


def _damaged(rng, data):
    wells, readings, plates, cats = (data.wells.copy(), data.readings.copy(), data.plates.copy(),
                                     data.catalysts.copy())
    n = len(wells)
    for _ in range(int(rng.integers(0, 4))):  # repeated (plate, well) and missing keys
        i, j = (int(x) for x in rng.integers(0, n, 2))
        wells.loc[i, ["plate", "well"]] = wells.loc[j, ["plate", "well"]].to_numpy()
    if rng.random() < 0.3:
        wells.loc[int(rng.integers(0, n)), "well"] = None
    for _ in range(int(rng.integers(0, 3))):  # rows of a plate the plates table does not have
        readings.loc[int(rng.integers(0, len(readings))), "plate"] = str(rng.choice(["PX", "p1"]))
    if rng.random() < 0.3:
        readings.loc[int(rng.integers(0, len(readings))), "plate"] = None
    if rng.random() < 0.3:
        plates.loc[len(plates) - 1, "plate"] = plates.loc[0, "plate"]
    if rng.random() < 0.3:
        cats.loc[1, "catalyst"] = cats.loc[0, "catalyst"]
    if rng.random() < 0.2:  # many bad rows: only the first 20 of each kind are named
        readings.loc[readings.index[:40], "plate"] = "PX"
    return _replace(data, wells=wells, readings=readings, plates=plates, catalysts=cats)


# ------------------------------------------------------------------ tests
def test_validate_matches_the_previous_implementation():
    rng = np.random.default_rng(17)
    base = make_data("val", plates=("P1", "P2", "P3"))
    assert _problems(db._validate, base) is None and _problems(old_validate, base) is None
    seen = 0
    for _ in range(60):
        data = _damaged(rng, base)
        got, want = _problems(db._validate, data), _problems(old_validate, data)
        assert got == want
        seen += want is not None
    assert seen > 30


def test_factor_long_form_matches_the_previous_melt():
    rng = np.random.default_rng(4)
    data = make_data("fac", plates=("P1", "P2"))
    wells = data.wells.copy()
    wells["solvent"] = rng.choice(np.array(["toluene", "THF", None, "MeCN ✓"], dtype=object), len(wells))
    wells["additive"] = pd.array(rng.choice(["LiCl", "", "none"], len(wells)), dtype="str")
    wells.loc[wells.index[::5], "additive"] = None
    wells["day"] = pd.to_datetime("2026-01-05") + pd.to_timedelta(rng.integers(0, 3, len(wells)), unit="D")
    data = _replace(data, wells=wells)
    prep = db._prepare(data)
    want = old_factors(data.wells, prep.wells, prep.factor_columns)
    pd.testing.assert_frame_equal(prep.factors, want)
    assert set(prep.factors["factor"]) == {"solvent", "additive", "day"}


def test_arrow_tables_equal_pandas_conversion():
    frame = pd.DataFrame({
        "s": pd.array(["a", None, "ü"], dtype="string"), "t": pd.array(["x", "y", None], dtype="str"),
        "f": [1.0, np.nan, -0.0], "i": np.array([1, 2, 3], dtype=np.int64),
        "n": pd.array([1, None, 3], dtype="Int64"), "b": [True, False, True]})
    for f in (frame, frame.iloc[[2, 0]], frame.iloc[:0], frame.assign(o=pd.Series(["1", "x", None], dtype=object))):
        a, b = pa.Table.from_pandas(f, preserve_index=False), db._arrow(f)
        assert a.schema.names == b.schema.names and a.schema.types == b.schema.types
        assert a.equals(b)
    prep = db._prepare(make_data("arrow", plates=("P1",)))
    for f in (prep.catalysts, prep.plates, prep.wells, prep.factors, prep.readings):
        a, b = pa.Table.from_pandas(f, preserve_index=False), db._arrow(f)
        assert a.schema.types == b.schema.types and a.equals(b)


def test_lex_sorted_agrees_with_lexsort():
    rng = np.random.default_rng(8)
    for _ in range(300):
        n = int(rng.integers(0, 12))
        keys = [rng.integers(0, 3, n).astype(np.int64), rng.choice([0.0, 1.0, np.nan, -0.0], n)]
        if rng.random() < 0.5:  # mostly sorted inputs, where the shortcut matters
            order = np.lexsort(keys[::-1])
            keys = [k[order] for k in keys]
            if n > 1 and rng.random() < 0.3:
                i = int(rng.integers(0, n - 1))
                keys = [np.concatenate([k[:i], k[i + 1:i + 2], k[i:i + 1], k[i + 2:]]) for k in keys]
        identity = np.array_equal(np.lexsort(keys[::-1]), np.arange(n)) if n else True
        assert db._lex_sorted(keys) == identity


def test_large_import_commits_into_the_file(tmp_path):
    from screenlab.synthetic import SyntheticSpec, synthetic_campaign

    data = synthetic_campaign(SyntheticSpec(n_plates=8, fmt=384, n_times=20, seed=2, name="big"))
    assert len(data.readings) >= db.CHECKPOINT_READINGS
    store = Store(tmp_path / "s.duckdb")
    rep = store.import_campaign(data)
    assert rep.status == "imported" and rep.n_readings == len(data.readings)
    assert not (tmp_path / "s.duckdb.wal").exists()
    assert store.table_counts()["readings"] == len(data.readings)
    assert store.import_campaign(data).status == "unchanged"
