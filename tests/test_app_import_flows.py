"""AppTest of the Import page's two new flows: readings onto a planned campaign, and a campaign
built from separate files (manifest form, tables, readings in any form, .zip download, commit).

The numbers are checked in tests/test_readings_forms.py; here the page's wiring: what it shows
before anything is written, that a problem blocks the commit, and what the commit writes.
"""
from __future__ import annotations

import io
import warnings
import zipfile
from pathlib import Path

import pandas as pd
import pytest
from streamlit.testing.v1 import AppTest

from grid_forms import to_grid_folder, to_planned, to_sample_form

from screenlab.ingest import read_campaign
from screenlab.store import Store
from screenlab.synthetic import SyntheticSpec, write_campaign_folder

ENTRY = str(Path(__file__).resolve().parent.parent / "screenlab" / "app" / "streamlit_app.py")


@pytest.fixture()
def setup(tmp_path, monkeypatch):
    src = write_campaign_folder(tmp_path / "src", SyntheticSpec(n_plates=2, seed=21, name="round-3"))
    store = tmp_path / "s.duckdb"
    monkeypatch.setenv("SCREENLAB_STORE", str(store))
    monkeypatch.setenv("SCREENLAB_READ_ONLY", "0")
    return src, store


def _import_page(mode: str) -> AppTest:
    at = AppTest.from_file(ENTRY, default_timeout=60)
    at.run()
    at.switch_page("app_pages/import_data.py").run()
    assert not at.exception, [e.value for e in at.exception]
    at.radio(key="import_mode").set_value(mode).run()
    assert not at.exception, [e.value for e in at.exception]
    return at


def _upload(at: AppTest, key: str, paths) -> None:
    up = next(u for u in at.get("file_uploader") if u.proto.id.endswith(key) or getattr(u, "key", None) == key)
    up.set_value([(Path(p).name, Path(p).read_bytes(), "text/csv") for p in paths]).run()
    assert not at.exception, [e.value for e in at.exception]


def test_readings_flow_previews_then_commits(setup, tmp_path):
    src, store = setup
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        Store(store).import_campaign(read_campaign(to_planned(src, tmp_path / "planned")))
        expected = read_campaign(src).data.readings
    at = _import_page("readings")
    assert at.selectbox(key="addr_campaign").value == "round-3"
    grids = sorted((to_grid_folder(src, tmp_path / "g") / "readings").iterdir())
    _upload(at, "addr_files", grids[:1])
    assert any("No problems found" in s.value for s in at.success)
    summary = next(d.value for d in at.dataframe if "wells_with_readings" in d.value.columns)
    assert list(summary["plate"]) == ["P0001", "P0002"]
    # the plate that got nothing shows every layout well as expected but missing
    n_layout = int((pd.read_csv(src / "layout.csv").query("plate == 'P0002'")["role"] != "empty").sum())
    assert summary.set_index("plate").loc["P0002", "expected_but_missing"] == n_layout
    assert at.get("plotly_chart")
    assert len(Store(store).load_campaign("round-3").readings) == 0       # nothing written yet
    at.button(key="addr_commit").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert any("Readings added" in s.value for s in at.success)
    got = Store(store).load_campaign("round-3").readings
    pd.testing.assert_frame_equal(got, expected[expected["plate"] == "P0001"].reset_index(drop=True))
    assert list(Store(store).imports("round-3")["status"]) == ["imported", "readings_added"]


def test_readings_flow_refuses_and_writes_nothing(setup, tmp_path):
    src, store = setup
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        Store(store).import_campaign(read_campaign(to_planned(src, tmp_path / "planned")))
    before = Store(store).table_counts()
    at = _import_page("readings")
    bad = tmp_path / "P0001.csv"
    rd = pd.read_csv(src / "readings.csv", dtype=str)
    rd.loc[3, "value"] = "n.d."
    rd.to_csv(bad, index=False)
    _upload(at, "addr_files", [bad])
    problems = next(d.value for d in at.dataframe if "problem" in d.value.columns)
    assert list(problems["rows"]) == ["5"] and list(problems["column"]) == ["value"]
    assert not [b for b in at.button if b.key == "addr_commit"]
    assert Store(store).table_counts() == before


def test_build_flow_assembles_checks_downloads_and_commits(setup, tmp_path):
    src, store = setup
    sample = to_sample_form(src, tmp_path / "sample")       # readings by sample code, layout with codes
    at = _import_page("build")
    at.text_input(key="build_name").set_value("built-in-app").run()
    at.selectbox(key="build_kind").set_value("yield").run()
    at.number_input(key="build_tref").set_value(60.0).run()
    _upload(at, "build_catalysts", [src / "catalysts.csv"])
    _upload(at, "build_plates", [src / "plates.csv"])
    # a layout with a problem first: every problem listed, no commit button
    lay = pd.read_csv(sample / "layout.csv", dtype=str, keep_default_na=False)
    lay.loc[2, "well"] = "Q1"
    bad = tmp_path / "bad" / "my layout.csv"
    bad.parent.mkdir()
    lay.to_csv(bad, index=False)
    _upload(at, "build_layout", [bad])
    _upload(at, "build_readings", [sample / "readings.csv"])
    problems = next(d.value for d in at.dataframe if "problem" in d.value.columns)
    assert ("layout.csv", "4", "well") in set(zip(problems["file"], problems["rows"], problems["column"]))
    assert not [b for b in at.button if b.key == "build_commit"]
    assert not Path(store).exists() or "built-in-app" not in Store(store).campaign_names()
    # the good layout: no problem, the zip holds the assembled folder, the commit imports it
    _upload(at, "build_layout", [sample / "layout.csv"])
    assert any("No problems found" in s.value for s in at.success), [e.value for e in at.error]
    data = at.get("download_button")
    zbytes = next(d for d in data if d.proto.label.startswith("Download the campaign folder"))
    at.button(key="build_commit").click().run()
    assert not at.exception, [e.value for e in at.exception]
    stored = Store(store).load_campaign("built-in-app")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = read_campaign(src).data
    pd.testing.assert_frame_equal(stored.readings, ref.readings)
    assert stored.manifest.readout_kind == "yield" and stored.manifest.readout_scale == "percent"
    assert zbytes is not None


def test_assembled_zip_reads_back(setup, tmp_path):
    """The builder's .zip is a campaign folder the reader takes back unchanged."""
    from screenlab.ingest.assemble import assemble_campaign, campaign_zip, manifest_text

    src, _ = setup
    grids = sorted((to_grid_folder(src, tmp_path / "g") / "readings").iterdir())
    toml = manifest_text(name="zipped", time_unit="min", concentration_unit="mM", volume_unit="uL", kind="yield",
                         scale="percent", reference_temperature_c=60)
    tables = {t: (f"{t}-export.csv", (src / f"{t}.csv").read_bytes()) for t in ("catalysts", "plates", "layout")}
    files, problems = assemble_campaign(manifest=toml.encode(), tables=tables,
                                        readings={g.name: g.read_bytes() for g in grids})
    assert not problems
    assert sorted(files) == ["campaign.toml", "catalysts.csv", "layout.csv", "plates.csv",
                             "readings/P0001.csv", "readings/P0002.csv"]
    name, blob = campaign_zip(files)
    assert name == "zipped.zip"
    assert sorted(zipfile.ZipFile(io.BytesIO(blob)).namelist())[0] == "zipped/campaign.toml"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        back = read_campaign(blob).data
        ref = read_campaign(src).data
    pd.testing.assert_frame_equal(back.readings, ref.readings)
    # two readings tables, or grids with a table, cannot make one folder
    _, problems = assemble_campaign(manifest=None, tables={}, readings={
        "a.csv": (src / "readings.csv").read_bytes(), "b.csv": (src / "readings.csv").read_bytes()})
    assert problems and "one readings table" in problems[0].message
