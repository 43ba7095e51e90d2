"""What an import writes (screenlab.store.writer): every row of the plates it writes, tagged with
its campaign and import id, and nothing else; a large import commits straight into the file.

Reference: the incoming frames themselves, compared with the store's tables read back with plain
DuckDB SQL as pandas frames (rows ordered by their key columns)."""
from __future__ import annotations

import dataclasses
import warnings
from pathlib import Path

import duckdb
import pandas as pd
import pytest

from screenlab.ingest import read_campaign
from screenlab.store import Store
from screenlab.store import queries as Q
from screenlab.store import writer
from screenlab.synthetic import SyntheticSpec, synthetic_campaign

DEMO = Path(__file__).resolve().parent.parent / "demo_campaign"
KEY = ["plate", "well", "analyte", "time_h"]


def _table(path: Path, sql: str) -> pd.DataFrame:
    con = duckdb.connect(str(path), read_only=True)
    try:
        return con.execute(sql).df()
    finally:
        con.close()


def _readings(frame: pd.DataFrame) -> pd.DataFrame:
    out = frame[[*KEY, "value"]].astype({"plate": str, "well": str, "analyte": str})
    return out.sort_values(KEY).reset_index(drop=True)


def _subset(data, plates):
    keep = lambda f: f.loc[f["plate"].isin(plates)].reset_index(drop=True)  # noqa: E731
    return dataclasses.replace(data, plates=keep(data.plates), wells=keep(data.wells), readings=keep(data.readings))


def _scaled(data, plates):
    r = data.readings.copy()
    hit = r["plate"].isin(plates).to_numpy()
    r.loc[hit, "value"] = r.loc[hit, "value"] * 0.5
    return dataclasses.replace(data, readings=r)


def test_each_import_writes_the_rows_of_its_plates_under_its_tag(tmp_path):
    path = tmp_path / "s.duckdb"
    store = Store(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        demo = read_campaign(DEMO / "th-screen-2026")
    big = synthetic_campaign(SyntheticSpec(n_plates=12, fmt=96, n_times=5, name="big"))
    names = big.plates["plate"].tolist()
    steps = [(demo.data, names, None), (demo.data, names, None),               # new, then unchanged
             (_subset(big, names[:8]), names[:8], None), (big, names[8:], None),  # new, then 4 plates added
             (_scaled(big, names[2:5]), names[2:5], True)]                      # 3 plates replaced
    reports = []
    for data, _, replace in steps:
        reports.append(store.import_campaign(data, replace=bool(replace)))
    assert [r.status for r in reports] == ["imported", "unchanged", "imported", "added_plates", "replaced"]
    assert reports[1].import_id is None
    readings = _table(path, "SELECT campaign, import_id, plate, well, analyte, time_h, value FROM readings")
    plates = _table(path, "SELECT campaign, import_id, plate FROM plates")
    for (data, written, _), rep in zip(steps, reports):
        if rep.import_id is None:
            continue
        mine = readings[readings["import_id"] == rep.import_id]
        assert (mine["campaign"] == data.name).all()
        want = _readings(data.readings) if rep.status == "imported" else \
            _readings(data.readings[data.readings["plate"].isin(written)])
        pd.testing.assert_frame_equal(_readings(mine), want, check_dtype=False)
        assert rep.n_readings == len(want)
        assert sorted(plates.loc[plates["import_id"] == rep.import_id, "plate"]) == sorted(want["plate"].unique())
    # what a reader sees: exactly the last data of each campaign
    pd.testing.assert_frame_equal(_readings(store.load_campaign("big").readings), _readings(steps[-1][0].readings))
    pd.testing.assert_frame_equal(_readings(store.load_campaign("th-screen-2026").readings),
                                  _readings(demo.data.readings))
    assert set(readings["import_id"]) == {r.import_id for r in reports if r.import_id is not None}


@pytest.mark.parametrize("table", sorted(Q.BULK_INSERT))
def test_every_bulk_insert_takes_the_tag_as_parameters(table):
    sql = Q.BULK_INSERT[table]
    if table == "import_files":
        assert "$campaign" not in sql and "$import_id" not in sql
    else:
        assert "$campaign::VARCHAR" in sql and "$import_id::BIGINT" in sql


def test_large_import_commits_into_the_file(tmp_path):
    data = synthetic_campaign(SyntheticSpec(n_plates=8, fmt=384, n_times=20, seed=2, name="big"))
    assert len(data.readings) >= writer.CHECKPOINT_READINGS
    store = Store(tmp_path / "s.duckdb")
    rep = store.import_campaign(data)
    assert rep.status == "imported" and rep.n_readings == len(data.readings)
    assert not (tmp_path / "s.duckdb.wal").exists()
    assert store.table_counts()["readings"] == len(data.readings)
    assert store.import_campaign(data).status == "unchanged"
