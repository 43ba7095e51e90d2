"""Storage form (screenlab.store.storage): the store's own check of frames built in code, the long
form of the factor columns, the Arrow tables handed to DuckDB, and dtypes back on load.

References: pandas (``DataFrame.duplicated``, ``isna``, ``Series.isin``, ``melt`` + ``merge``: the
rules stated in a few plain lines each) and pyarrow (``Table.from_pandas``).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from screenlab.errors import Problem, ValidationError
from screenlab.model import CampaignData
from screenlab.store import storage


def _replace(data, **frames):
    parts = {k: getattr(data, k) for k in ("catalysts", "plates", "wells", "readings")}
    parts.update(frames)
    return CampaignData(manifest=data.manifest, factor_names=data.factor_names, **parts)


def _problems(data) -> list[Problem] | None:
    try:
        storage.check_campaign_frames(data)
    except ValidationError as exc:
        return exc.problems
    return None


def _rule(data) -> list[Problem]:
    """The store's key rules in plain pandas: a key cell missing or repeating an earlier row's key,
    and a wells / readings row whose plate is not in the plates table; at most 20 rows each."""
    out = []
    for name, keys in (("catalysts", ["catalyst"]), ("plates", ["plate"]), ("wells", ["plate", "well"])):
        frame = getattr(data, name)
        bad = (frame[keys].isna().any(axis=1) | frame.duplicated(keys, keep="first")).to_numpy()
        out += [Problem(name, int(i) + 2, keys[-1], ", ".join(str(frame[k].iloc[i]) for k in keys),
                        f"{'/'.join(keys)} missing or not unique") for i in np.flatnonzero(bad)[:20]]
    known = set(data.plates["plate"].dropna().astype(str))
    for name in ("wells", "readings"):
        frame = getattr(data, name)
        bad = ~frame["plate"].astype("string").isin(known).fillna(False).to_numpy(dtype=bool)
        out += [Problem(name, int(i) + 2, "plate", str(frame["plate"].iloc[i]), "plate is not in the plates table")
                for i in np.flatnonzero(bad)[:20]]
    return out


_EDITS = st.lists(st.tuples(st.sampled_from(["well_dup", "well_na", "reading_plate", "reading_na", "plate_dup",
                                             "catalyst_dup", "many"]),
                            st.integers(0, 10 ** 6), st.integers(0, 10 ** 6)), max_size=5)


@given(edits=_EDITS)
@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
def test_frame_check_names_the_rows_pandas_finds(make_data, edits):
    base = make_data("val", plates=("P1", "P2", "P3"))
    wells, readings, plates, cats = (base.wells.copy(), base.readings.copy(), base.plates.copy(),
                                     base.catalysts.copy())
    for kind, i, j in edits:
        if kind == "well_dup":
            wells.loc[i % len(wells), ["plate", "well"]] = wells.loc[j % len(wells), ["plate", "well"]].to_numpy()
        elif kind == "well_na":
            wells.loc[i % len(wells), "well"] = None
        elif kind == "reading_plate":
            readings.loc[i % len(readings), "plate"] = ["PX", "p1"][j % 2]
        elif kind == "reading_na":
            readings.loc[i % len(readings), "plate"] = None
        elif kind == "plate_dup":
            plates.loc[len(plates) - 1, "plate"] = plates.loc[0, "plate"]
        elif kind == "catalyst_dup":
            cats.loc[1, "catalyst"] = cats.loc[0, "catalyst"]
        else:  # many bad rows: only the first 20 of each kind are named
            readings.loc[readings.index[:40], "plate"] = "PX"
    data = _replace(base, wells=wells, readings=readings, plates=plates, catalysts=cats)
    want = _rule(data)
    assert _problems(data) == (want or None)


def test_frame_check_refuses_unknown_and_missing_columns_before_the_keys(make_data):
    data = make_data("cols")
    bad = _replace(data, readings=data.readings.assign(extra=1.0), plates=data.plates.drop(columns="plate"),
                   catalysts=[1, 2])
    got = [str(p) for p in _problems(bad)]
    assert got == ["catalysts: is not a table (pandas DataFrame)", "plates, column 'plate': required column is missing",
                   "readings, column 'extra': column the store does not know; expected only plate, well, analyte, "
                   "time_h, value"]
    assert _problems(_replace(data, wells=data.wells.assign(colour="red"))) is None  # extra wells columns: factors


def test_factor_long_form_is_the_pandas_melt(make_data):
    """Named factors are kept as (plate, seq, well, factor, value) rows of the non-missing cells:
    pandas ``melt`` of the factor columns joined to the wells' plate and well by position."""
    rng = np.random.default_rng(4)
    data = make_data("fac", plates=("P1", "P2"))
    wells = data.wells.copy()
    wells["solvent"] = rng.choice(np.array(["toluene", "THF", None, "MeCN ✓"], dtype=object), len(wells))
    wells["additive"] = pd.array(rng.choice(["LiCl", "", "none"], len(wells)), dtype="str")
    wells.loc[wells.index[::5], "additive"] = None
    wells["day"] = pd.to_datetime("2026-01-05") + pd.to_timedelta(rng.integers(0, 3, len(wells)), unit="D")
    prep = storage.prepare(_replace(data, wells=wells))

    factors = ["solvent", "additive", "day"]
    wide = wells[factors].reset_index(drop=True).apply(storage.text)
    long = wide.assign(seq=np.arange(len(wide), dtype=np.int64)).melt(id_vars="seq", var_name="factor",
                                                                     value_name="value")
    long = long[long["value"].notna()].merge(prep.wells[["seq", "plate", "well"]], on="seq", how="left")
    want = long[["plate", "seq", "well", "factor", "value"]].reset_index(drop=True).astype(
        {"factor": "string", "value": "string"})
    pd.testing.assert_frame_equal(prep.factors, want)
    assert prep.factor_columns == tuple(factors)
    assert prep.factors.loc[prep.factors["factor"] == "day", "value"].str.fullmatch(r"2026-01-0[567]").all()


def test_arrow_tables_equal_the_pyarrow_conversion(make_data):
    frame = pd.DataFrame({
        "s": pd.array(["a", None, "ü"], dtype="string"), "t": pd.array(["x", "y", None], dtype="str"),
        "f": [1.0, np.nan, -0.0], "i": np.array([1, 2, 3], dtype=np.int64),
        "n": pd.array([1, None, 3], dtype="Int64"), "b": [True, False, True]})
    for f in (frame, frame.iloc[[2, 0]], frame.iloc[:0], frame.assign(o=pd.Series(["1", "x", None], dtype=object))):
        a, b = pa.Table.from_pandas(f, preserve_index=False), storage.to_arrow(f)
        assert a.schema.names == b.schema.names and a.schema.types == b.schema.types
        assert a.equals(b)
    prep = storage.prepare(make_data("arrow", plates=("P1",)))
    for f in (prep.catalysts, prep.plates, prep.wells, prep.factors, prep.readings):
        a, b = pa.Table.from_pandas(f, preserve_index=False), storage.to_arrow(f)
        assert a.schema.types == b.schema.types and a.equals(b)


@pytest.mark.parametrize("values, kind, want", [
    (pd.Series([1.0, -0.0, np.nan]), "f", [1.0, 0.0, np.nan]),          # -0.0 stored as 0.0
    (pd.Series(["3", "x", None], dtype=object), "i", [3, pd.NA, pd.NA]),  # not a number: missing
    (pd.to_datetime(pd.Series(["2026-03-01", "2026-03-01 12:30"]), format="ISO8601"), "s",
     ["2026-03-01", "2026-03-01 12:30:00"]),
])
def test_storage_form_of_a_column(values, kind, want):
    got = storage.storage_form(pd.DataFrame({"c": values}), {"c": kind, "absent": "s"})
    assert got["absent"].isna().all() and str(got["absent"].dtype) == "string"
    expect = pd.Series(want, name="c", dtype={"f": "float64", "i": "Int64", "s": "string"}[kind])
    pd.testing.assert_series_equal(got["c"], expect)
    if kind == "f":
        assert not np.signbit(got["c"].to_numpy()[1])


def test_restore_gives_back_the_recorded_dtypes():
    frame = pd.DataFrame({"a": pd.array(["x", None], dtype="string"), "b": [1.5, np.nan],
                          "c": pd.array(["p", None], dtype="str")})
    spec = [[c, storage.dtype_spec(frame[c].dtype)] for c in frame.columns] + [["gone", "float64"]]
    stored = pd.DataFrame({"a": pd.array(["x", None], dtype="string"), "b": [1.5, np.nan],
                           "c": pd.array(["p", None], dtype="string")})
    back = storage.restore(stored, spec)
    pd.testing.assert_frame_equal(back[["a", "b", "c"]], frame)
    assert back["gone"].isna().all() and list(back.columns) == ["a", "b", "c", "gone"]
