"""The declared frame schemas (screenlab.schema): the frames the pipeline makes meet them, the
contributor guide shows them, check_frame refuses frames that do not, and the surfaces' column lists
come from them."""
from __future__ import annotations

import dataclasses
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screenlab import schema as S
from screenlab.errors import FrameError

ROOT = Path(__file__).resolve().parent.parent


def test_the_contributor_guide_shows_the_declared_schemas():
    """DEVELOPERS.md's frame tables are the schemas as declared (regenerate them with
    ``python -m screenlab.schema``)."""
    guide = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    a, b = guide.index(S.GUIDE_BEGIN), guide.index(S.GUIDE_END) + len(S.GUIDE_END)
    assert guide[a:b] == S.guide_tables()
    for frame in S.all_schemas():  # every schema has a table, every column a unit or a meaning
        assert f"`{frame.name}` (made by `{frame.made_by}`)" in guide
        assert all(c.meaning for c in frame.columns), frame.name


def _frames(name: str) -> dict[S.FrameSchema, pd.DataFrame]:
    import screenlab as sl
    from screenlab.kinetics.arrhenius import predict_tof
    from screenlab.kinetics.orders import order_points
    from screenlab.stats.quality import control_chart
    from screenlab.stats.ranking import rank_candidates

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        d = sl.read_campaign(ROOT / "demo_campaign" / name).data
        an = sl.analyse(d)
        k = an.kinetics
        return {S.CATALYSTS: d.catalysts, S.PLATES: d.plates, S.WELLS: d.wells, S.READINGS: d.readings,
                S.AMOUNTS: k.amounts, S.WELL_RATES: k.per_well, S.BLANKS: k.blanks, S.TURNOVER: k.wells,
                S.RATES: k.rates, S.ARRHENIUS: k.arrhenius, S.ORDERS: k.orders,
                S.ORDER_POINTS: order_points(k.wells, an.settings, d.factor_names), S.SELECTIVITY: k.selectivity,
                S.QUALITY: an.quality, S.CONTROL_CHART: control_chart(k, d),
                S.RANKING: rank_candidates(k, an.quality, metric="tof", top_k=3, draws=200, seed=0),
                S.PREDICTED_TOF: predict_tof(k.arrhenius, 55.0, 0.95)}, d.factor_names


@pytest.mark.parametrize("name", ["th-screen-2026", "henry-chiral-2026"])
def test_every_frame_of_the_pipeline_meets_its_schema(name):
    """On a demo campaign (one-analyte GC yields; several analytes with enantiomers) every frame
    has its declared columns, in the declared order, of the declared kinds; the only other columns
    are the campaign's named factors (and a wells frame's sample codes)."""
    frames, factors = _frames(name)
    assert set(frames) == set(S.all_schemas())
    for frame_schema, frame in frames.items():
        S.check_frame(frame, frame_schema)
        own = [c for c in frame.columns if c not in factors]
        assert [c for c in own if c in frame_schema.names] == [c for c in frame_schema.names if c in own]
        assert set(own) <= set(frame_schema.names), (frame_schema.name, set(own) - set(frame_schema.names))
        assert set(frame_schema.required) <= set(own)


def test_check_frame_names_every_missing_and_mistyped_column():
    frame = pd.DataFrame({"plate": ["P1"], "well": ["A1"], "analyte": ["product"], "time_h": ["1.0"]})
    with pytest.raises(FrameError) as err:
        S.check_frame(frame, S.READINGS, where="analyse_kinetics")
    text = str(err.value)
    assert text.startswith("analyse_kinetics: the readings frame does not meet its schema")
    assert "missing column value" in text and "column time_h holds str, expected float" in text
    with pytest.raises(FrameError, match="is a list, not a table"):
        S.check_frame([], S.READINGS)


def test_check_frame_kinds_follow_pandas_dtype_predicates():
    """A column meets a kind exactly when pandas' own dtype predicates say so (the reference):
    float <- any real number dtype but bool, int <- integer dtypes, bool <- bool dtypes,
    text <- string and object dtypes."""
    columns = {
        "f64": np.array([1.5]), "f32": np.array([1.5], dtype=np.float32), "i64": np.array([1]),
        "u8": np.array([1], dtype=np.uint8), "Int64": pd.array([1], dtype="Int64"),
        "Float64": pd.array([1.5], dtype="Float64"), "b": np.array([True]),
        "boolean": pd.array([True], dtype="boolean"),
        "str": pd.array(["x"], dtype="str"), "string": pd.array(["x"], dtype="string"),
        "obj": np.array(["x"], dtype=object), "dt": pd.to_datetime(["2026-01-01"]),
    }
    api = pd.api.types
    for label, values in columns.items():
        s = pd.Series(values)
        want = {
            "float": api.is_numeric_dtype(s) and not api.is_bool_dtype(s),
            "int": api.is_integer_dtype(s),
            "bool": api.is_bool_dtype(s),
            "text": api.is_string_dtype(s) or api.is_object_dtype(s),
        }
        for kind, ok in want.items():
            one = S.FrameSchema("t", "test", (S.Column("x", kind, "", "a value"),))
            assert (S.frame_problems(pd.DataFrame({"x": s}), one) == []) == ok, (label, kind)
    empty = pd.DataFrame({"x": pd.Series([], dtype=object)})  # an empty frame's columns have no kind of their own
    assert S.frame_problems(empty, S.FrameSchema("t", "test", (S.Column("x", "float", "", "v"),))) == []


def test_optional_and_extra_columns():
    cats = S.empty_frame(S.CATALYSTS)
    assert list(cats.columns) == [c for c in S.CATALYSTS.names if c != "alias"]   # optional: may be absent
    assert S.check_frame(cats.assign(note=pd.Series([], dtype="str")), S.CATALYSTS) is not None  # extras allowed
    assert [str(cats[c].dtype) for c in ("catalyst", "molar_mass_g_mol")] == ["str", "float64"]


def test_analyse_kinetics_refuses_a_campaign_frame_without_a_declared_column():
    from screenlab.kinetics import analyse_kinetics
    from screenlab.synthetic import synthetic_campaign

    data = synthetic_campaign(n_plates=1, fmt=24, n_times=3)
    broken = dataclasses.replace(data, wells=data.wells.drop(columns=["loading"]))
    with pytest.raises(FrameError, match=r"analyse_kinetics: the wells frame .*missing column loading"):
        analyse_kinetics(broken)


def test_the_cli_prints_only_declared_columns():
    from screenlab.cli import kinetics_cmd, stats_cmd

    for cols, frame in ((kinetics_cmd.RATES_COLUMNS, S.RATES), (kinetics_cmd.ARRHENIUS_COLUMNS, S.ARRHENIUS),
                        (kinetics_cmd.ORDERS_COLUMNS, S.ORDERS), (stats_cmd.QUALITY_COLUMNS, S.QUALITY),
                        (stats_cmd.RANK_TABLE_COLUMNS, S.RANKING)):
        assert set(cols) <= set(frame.names)
    assert set(kinetics_cmd.WELL_COLUMNS) <= set(S.TURNOVER.names) | set(S.SELECTIVITY.names)
    with pytest.raises(KeyError, match="tof_per_day: not declared in the 'rates' frame schema"):
        S.RATES.pick(["tof_per_h", "tof_per_day"])


def test_the_store_keeps_the_declared_columns_of_the_campaign_frames():
    from screenlab.store import storage

    for name, frame_schema in S.CAMPAIGN_FRAMES.items():
        assert list(storage.FRAME_COLS[name]) == list(frame_schema.names)
        assert set(storage.REQUIRED[name]) <= set(frame_schema.names)
