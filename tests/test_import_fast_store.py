"""Bulk inserts with the campaign and import id as statement parameters, against the code they
replace (kept below verbatim: ``old_tag`` appended both as per-row Arrow columns and the INSERT
selected them from the frame).

The same imports (new campaigns, an unchanged re-import, a replacing import with changed plates,
an import adding plates) run once with the current code and once with the old bulk insert; every
table of the two stores (all versions, ordered by all columns; timestamps left out), the reports
and the frames ``load_campaign`` gives back must be identical.
"""
from __future__ import annotations

import warnings
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

from screenlab.ingest import read_campaign
from screenlab.store import Store
from screenlab.store import db
from screenlab.synthetic import SyntheticSpec, synthetic_campaign

DEMO = Path(__file__).resolve().parent.parent / "demo_campaign"


# ------------------------------------------------------------------ the previous code, verbatim
def old_tag(table: pa.Table, *, campaign: str, import_id: int) -> pa.Table:
    """``table`` plus the constant ``campaign`` and ``import_id`` columns (built in Arrow, not as
    per-row Python values)."""
    n = table.num_rows
    return (table.append_column("campaign", pa.array([campaign], pa.large_string()).take(
                pa.array(np.zeros(n, dtype=np.int32))))
            .append_column("import_id", pa.array(np.full(n, import_id, dtype=np.int64))))


OLD_BULK_INSERT = {
    "import_files": """
INSERT INTO import_files (import_id, seq, name, sha256, n_rows)
SELECT import_id, seq, name, sha256, n_rows FROM incoming_import_files""",
    "catalysts": """
INSERT INTO catalysts (campaign, import_id, seq, catalyst, name, family, molar_mass_g_mol, sites_per_unit,
                       metal_wt_pct, metal_molar_mass_g_mol, dispersion)
SELECT campaign, import_id, seq, catalyst, name, family, molar_mass_g_mol, sites_per_unit,
       metal_wt_pct, metal_molar_mass_g_mol, dispersion FROM incoming_catalysts""",
    "plates": """
INSERT INTO plates (campaign, plate, import_id, superseded_by, seq, fingerprint, format, n_rows, n_cols,
                    temperature_c, run_date, notes)
SELECT campaign, plate, import_id, NULL, seq, fingerprint, format, n_rows, n_cols, temperature_c,
       run_date, notes FROM incoming_plates""",
    "wells": """
INSERT INTO wells (campaign, plate, import_id, seq, well, "row", col, role, catalyst, loading, loading_unit,
                   substrate_conc_mM, volume_uL, temperature_c)
SELECT campaign, plate, import_id, seq, well, "row", col, role, catalyst, loading, loading_unit,
       substrate_conc_mM, volume_uL, temperature_c FROM incoming_wells""",
    "well_factors": """
INSERT INTO well_factors (campaign, plate, import_id, seq, well, factor, value)
SELECT campaign, plate, import_id, seq, well, factor, value FROM incoming_well_factors""",
    "readings": """
INSERT INTO readings (campaign, plate, import_id, seq, well, analyte, time_h, value)
SELECT campaign, plate, import_id, seq, well, analyte, time_h, value FROM incoming_readings""",
}


def old_bulk_insert(con, table: str, rows) -> None:
    """The previous ``_bulk_insert`` fed the previous way: the tag appended as columns."""
    if isinstance(rows, db._Tagged):
        rows = old_tag(rows.rows, campaign=rows.campaign, import_id=rows.import_id)
    data = rows if isinstance(rows, pa.Table) else pa.Table.from_pandas(rows, preserve_index=False)
    if data.num_rows == 0:
        return
    data = data.combine_chunks()
    view = f"incoming_{table}"
    con.register(view, data)
    try:
        con.execute(OLD_BULK_INSERT[table])
    finally:
        con.unregister(view)


# ------------------------------------------------------------------ helpers
def dump(path: Path) -> dict[str, pd.DataFrame]:
    """Every table of a store, rows ordered by all columns, import timestamps left out."""
    con = duckdb.connect(str(path), read_only=True)
    try:
        out = {}
        for (t,) in con.execute("SELECT table_name FROM duckdb_tables() ORDER BY 1").fetchall():
            frame = con.execute(f'SELECT * FROM "{t}" ORDER BY ALL').df()
            out[t] = frame.drop(columns=[c for c in ("imported_at", "applied_at") if c in frame.columns])
        return out
    finally:
        con.close()


def _changed(data, plates: list[str]):
    """``data`` with the readings of ``plates`` scaled, so a re-import sees them changed."""
    r = data.readings.copy()
    hit = r["plate"].isin(plates).to_numpy()
    r.loc[hit, "value"] = r.loc[hit, "value"] * 0.5
    return type(data)(manifest=data.manifest, catalysts=data.catalysts, plates=data.plates, wells=data.wells,
                      readings=r, factor_names=data.factor_names)


def _subset(data, plates: list[str]):
    keep = lambda f: f.loc[f["plate"].isin(plates)].reset_index(drop=True)  # noqa: E731
    return type(data)(manifest=data.manifest, catalysts=data.catalysts, plates=keep(data.plates),
                      wells=keep(data.wells), readings=keep(data.readings), factor_names=data.factor_names)


def _scenario(path: Path) -> tuple[list, dict]:
    """Imports into a new store at ``path``; returns the reports and the loaded campaigns."""
    store = Store(path)
    reports = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for name in ("th-screen-2026", "ester-hydrolysis-uv", "henry-chiral-2026"):
            result = read_campaign(DEMO / name)
            reports.append(store.import_campaign(result))
            reports.append(store.import_campaign(result))  # unchanged
    big = synthetic_campaign(SyntheticSpec(n_plates=400))
    names = big.plates["plate"].tolist()
    reports.append(store.import_campaign(_subset(big, names[:300]), files=[("readings.csv", "0" * 64, 1)]))
    reports.append(store.import_campaign(big))  # adds 100 plates
    reports.append(store.import_campaign(_changed(big, names[5:8]), replace=True))  # replaces three
    loaded = {n: store.load_campaign(n) for n in store.campaign_names()}
    return reports, loaded


def test_parameter_tag_stores_what_tag_columns_stored(tmp_path, monkeypatch):
    new_reports, new_loaded = _scenario(tmp_path / "new.duckdb")
    with monkeypatch.context() as m:
        m.setattr(db, "_bulk_insert", old_bulk_insert)
        old_reports, old_loaded = _scenario(tmp_path / "old.duckdb")
    assert new_reports == old_reports
    assert [r.status for r in new_reports][-3:] == ["imported", "added_plates", "replaced"]
    new_tables, old_tables = dump(tmp_path / "new.duckdb"), dump(tmp_path / "old.duckdb")
    assert list(new_tables) == list(old_tables)
    for t in new_tables:
        pd.testing.assert_frame_equal(new_tables[t], old_tables[t], obj=t)
    assert len(new_tables["readings"]) > 400 * 96 * 8
    assert list(new_loaded) == list(old_loaded)
    for name in new_loaded:
        a, b = new_loaded[name], old_loaded[name]
        assert a.manifest == b.manifest and a.factor_names == b.factor_names
        for frame in ("catalysts", "plates", "wells", "readings"):
            pd.testing.assert_frame_equal(getattr(a, frame), getattr(b, frame), obj=f"{name}.{frame}")


@pytest.mark.parametrize("table", sorted(OLD_BULK_INSERT))
def test_every_bulk_insert_takes_the_tag_as_parameters(table):
    sql = db.Q.BULK_INSERT[table]
    if table == "import_files":
        assert "$campaign" not in sql and "$import_id" not in sql
    else:
        assert "$campaign::VARCHAR" in sql and "$import_id::BIGINT" in sql
