"""AppTest of every page of the browser app on the demo store.

AppTest (streamlit.testing.v1) runs the script in-process; it checks that each page renders
without an exception and shows its key elements, and drives a few interactions. The numbers
themselves are tested in the core's own tests.
"""
from __future__ import annotations

import json
import re

import pandas as pd
import pytest

from apptest_pages import CAMPAIGN, _app, _page, _texts


def _values(v) -> list:
    """A plotly JSON array: a list, or numbers packed as base64 (``{"dtype", "bdata"}``)."""
    if isinstance(v, dict) and "bdata" in v:
        import base64

        import numpy as np

        return list(np.frombuffer(base64.b64decode(v["bdata"]), dtype=v["dtype"]))
    return list(v)


def _figures(at) -> list[dict]:
    return [json.loads(el.proto.spec) for el in at.get("plotly_chart")]


def test_campaigns_overview(monkeypatch, demo_store):
    at = _app(monkeypatch, demo_store)
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    text = _texts(at)
    assert "Campaigns" in text and "Best candidates so far" in text and "Temperatures" in text
    assert {m.label for m in at.metric} >= {"Plates", "Catalysts", "Blank wells", "Benchmark wells"}
    # the campaign picker lists every stored campaign
    assert set(at.selectbox(key="sl_campaign").options) >= {CAMPAIGN, "ester-hydrolysis-uv", "henry-chiral-2026"}
    # a campaign without a parent (and its missing parent decision) shows blank cells there, not
    # the grid's 'None': every table of the app says a missing value with an empty placeholder
    listed = at.dataframe[0].value
    assert "parent" in listed and listed["parent"].isna().any() and listed["parent_decision"].isna().any()
    assert all(d.proto.HasField("placeholder") and d.proto.placeholder == "" for d in at.dataframe)


def test_read_only_hides_import(monkeypatch, demo_store):
    at = _app(monkeypatch, demo_store, read_only=True)
    at.run()
    assert not at.exception
    with pytest.raises(Exception):
        at.switch_page("app_pages/import_data.py").run()


def test_import_page_reports_every_problem_before_writing(monkeypatch, demo_store_copy):
    at = _page(monkeypatch, demo_store_copy, "import_data")
    assert "Import history" in _texts(at)
    # a campaign whose layout names a plate that does not exist and a reading with a bad time
    files = {
        "campaign.toml": b'[campaign]\nname = "broken"\n[units]\ntime = "min"\nconcentration = "mM"\n'
                         b'volume = "uL"\n[readout]\nkind = "conversion"\nscale = "percent"\n',
        "catalysts.csv": b"catalyst,name\nC1,cat one\n",
        "plates.csv": b"plate,format,temperature_c\nP1,96,60\n",
        "layout.csv": b"plate,well,role,catalyst,loading,loading_unit,substrate_conc,volume\n"
                      b"P1,A1,sample,C1,1,umol,100,200\nP9,A2,sample,C1,1,umol,100,200\n",
        "readings.csv": b"plate,well,time,value\nP1,A1,0,0\nP1,A1,minus five,3\n",
    }
    uploader = at.get("file_uploader")[0]
    uploader.set_value([(name, data, "text/plain") for name, data in files.items()]).run()
    assert not at.exception, [e.value for e in at.exception]
    assert any("problem" in e.value for e in at.error), [e.value for e in at.error]
    frames = [df.value for df in at.dataframe]
    problems = next(f for f in frames if "problem" in f.columns)
    assert {"layout.csv", "readings.csv"} <= set(problems["file"].astype(str))
    assert (problems["rows"].astype(str) != "").any()
    # nothing was written, and there is no commit button
    assert not [b for b in at.button if b.key == "import_commit"]


def test_plate_map(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "plate_map")
    text = _texts(at)
    assert "Plate map" in text and "Method" in text
    figs = _figures(at)
    heat = figs[0]
    assert heat["data"][0]["type"] == "heatmap" and heat["data"][0]["colorscale"]
    symbols = {t.get("marker", {}).get("symbol") for t in heat["data"][1:]}
    assert {"square", "star"} <= symbols  # blank and benchmark told apart by shape
    course = figs[1]
    assert course["layout"]["xaxis"]["title"]["text"] == "time / h"
    assert any(t.get("mode") == "lines" for t in course["data"])  # the fitted rate line
    # another quantity re-colours the map
    at.selectbox(key="platemap_quantity").set_value("tof_per_h").run()
    assert not at.exception
    assert "TOF / h⁻¹" in json.dumps(_figures(at)[0]["data"][0]["colorbar"], ensure_ascii=False)


def test_rates(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "rates")
    assert "Replicate time courses" in _texts(at)
    table = at.dataframe[0].value
    assert {"catalyst", "temperature_c", "tof_per_h", "tof_ci_low"} <= set(table.columns)
    # the bounds line counts each kind the table holds and leaves out a kind it has none of
    kinds = table["censored"].astype(str).value_counts() if "censored" in table else {}
    line = next(t for t in _texts(at).splitlines() if t.startswith("Bounds:"))
    for kind, words in (("lower", "faster than the first reading"), ("upper", "not distinguishable from the blank")):
        n_kind = int(kinds.get(kind, 0))
        assert (f"{n_kind} row" in line and words in line) if n_kind else words not in line, line
    assert not re.search(r"(?<!\d)0 row", line), line        # no kind counted zero times
    n = len(table)
    at.toggle(key="rates_standard").set_value(True).run()
    assert not at.exception
    assert len(at.dataframe[0].value) < n


def test_temperature_series(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "temperature")
    text = _texts(at)
    assert "Activation parameters" in text and "Activation-energy lowering" in text
    ea = next(df.value for df in at.dataframe if "ea_kj_mol" in df.value.columns)
    assert "(uncatalysed)" in set(ea["catalyst"].astype(str))
    fig = _figures(at)[0]
    assert fig["layout"]["xaxis"]["title"]["text"] == "1000/T / K⁻¹"
    assert any(t.get("fill") == "toself" for t in fig["data"])  # confidence bands
    assert any(t.get("yaxis") == "y2" for t in fig["data"])  # the uncatalysed line
    # its points are those the line is fitted to: one per plate x temperature at the main substrate
    # level (the gradient plate's scaled blanks at other levels are not on it), open where not fitted
    marks = [t for t in fig["data"] if t.get("yaxis") == "y2" and t.get("mode") == "markers"]
    shown = sum(len(_values(t["x"])) for t in marks)
    fitted = sum(len(_values(t["x"])) for t in marks if t["marker"]["symbol"] == "square")
    assert shown == 5 and fitted == 4, (shown, fitted)   # demo: 5 plates (two at 60 C), the 40 C blank below its LOD


def test_reaction_orders(monkeypatch, demo_store):
    # the transfer-hydrogenation demo has a substrate series (MN-01) and a loading series (RU-04) at
    # 60 C: the table lists both, the first is plotted on log-log axes with its wells, and the slope
    # of its drawn fit line is the table's order
    import numpy as np

    at = _page(monkeypatch, demo_store, "orders")
    text = _texts(at)
    assert "Reaction orders" in text and "MN-01 at 60 °C: order in substrate" in text
    table = next(df.value for df in at.dataframe if "order" in df.value.columns)
    assert sorted(table["catalyst"].astype(str)) == ["MN-01", "RU-04"]
    fig = _figures(at)[0]
    assert fig["layout"]["xaxis"]["type"] == "log" and fig["layout"]["yaxis"]["type"] == "log"
    assert fig["layout"]["xaxis"]["title"]["text"] == "substrate / mM"
    wells = next(t for t in fig["data"] if t.get("name") == "wells")
    points = next(df.value for df in at.dataframe if "in_fit" in df.value.columns)
    assert len(_values(wells["x"])) == int(points["in_fit"].sum()) == int(table["n_wells"].iloc[0])
    fit = next(t for t in fig["data"] if str(t.get("name", "")).startswith("fit: order"))
    x, y = np.log(_values(fit["x"])), np.log(_values(fit["y"]))
    assert (y[1] - y[0]) / (x[1] - x[0]) == pytest.approx(float(table["order"].iloc[0]), rel=1e-9)
    # and the wells drawn, fitted by scipy.stats.linregress on ln rate vs ln level (the outside
    # reference), give the table's order: the plot shows the points the order was fitted to
    from scipy import stats

    lr = stats.linregress(np.log(_values(wells["x"])), np.log(_values(wells["y"])))
    assert lr.slope == pytest.approx(float(table["order"].iloc[0]), rel=1e-9)


def test_reaction_orders_follow_the_row_picked_and_drop_a_stale_pick(monkeypatch, demo_store):
    # a click on the second row (the frontend's selection state) plots RU-04's loading series with
    # its own wells; a selection kept from a longer table (another campaign, other settings) falls
    # back to the first row instead of failing
    at = _page(monkeypatch, demo_store, "orders")
    at.session_state["orders_table"] = {"selection": {"rows": [1], "columns": [], "cells": []}}
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    assert "RU-04 at 60 °C: order in catalyst loading" in _texts(at)
    fig = _figures(at)[0]
    assert fig["layout"]["xaxis"]["title"]["text"] == "loading / µmol"
    points = next(df.value for df in at.dataframe if "in_fit" in df.value.columns)
    assert sorted(set(points["level"])) == [0.125, 0.25, 0.5, 1.0]
    assert "TOF slope" in _texts(at)
    at.session_state["orders_table"] = {"selection": {"rows": [7], "columns": [], "cells": []}}
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    assert "MN-01 at 60 °C: order in substrate" in _texts(at)


def test_reaction_orders_without_series_says_what_to_run(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "orders", campaign="ester-hydrolysis-uv")
    assert "there are no apparent orders" in _texts(at) and not _figures(at)


def test_ranking_metric_change(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "ranking")
    assert at.radio(key="rank_view").options == ["Ranking", "Pareto view"]
    before = at.dataframe[0].value
    box = at.selectbox(key="rank_metric")
    assert box.value == "tof" and len(box.options) >= 2
    other = "ea"  # activation energy: lower is better, so the order changes
    box.set_value(other).run()
    assert not at.exception, [e.value for e in at.exception]
    after = at.dataframe[0].value
    assert "tof_per_h" in before.columns and "ea_kj_mol" in after.columns  # the estimate carries its unit
    assert list(before["catalyst"]) != list(after["catalyst"])
    forest = _figures(at)[0]
    assert forest["data"][0]["error_x"]["array"] is not None


def test_ranking_pareto_view(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "ranking")
    at.radio(key="rank_view").set_value("Pareto view").run()
    assert not at.exception, [e.value for e in at.exception]
    assert "Pareto view" in _texts(at)
    assert at.multiselect(key="rank_pareto").value == ["tof", "ea"]
    fig = _figures(at)[0]
    names = {t.get("name") for t in fig["data"]}
    assert "Pareto front" in names
    front = at.dataframe[0].value
    assert {"catalyst", "on_front"} <= set(front.columns) and front["on_front"].any()


def test_plate_quality(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "quality")
    text = _texts(at)
    assert "Z' per plate" in text and "Benchmark control chart" in text and "Edge map" in text
    q = at.dataframe[0].value
    assert {"plate", "zprime", "status"} <= set(q.columns)
    assert "Blank trend" not in text                      # every plate checked against its blank line
    # the nitroaldol demo's blank line runs through two temperatures: the page says so
    hn = _page(monkeypatch, demo_store, "quality", campaign="henry-chiral-2026")
    assert "Blank trend (blank z, blank ratio) not checked on HN-25, HN-40: the blank Arrhenius line is drawn " \
           "through two temperatures only" in _texts(hn)


def test_shortlist_selection_to_download(monkeypatch, demo_store):
    import io
    import zipfile

    import openpyxl
    import pandas as pd
    from streamlit.runtime.media_file_manager import MediaFileManager

    served: dict[str, bytes] = {}
    original = MediaFileManager.add

    def spy(self, path_or_data, mimetype, coordinates, file_name=None, is_for_static_download=False):
        if file_name:
            served[file_name] = path_or_data if isinstance(path_or_data, bytes) else str(path_or_data).encode()
        return original(self, path_or_data, mimetype, coordinates, file_name, is_for_static_download)

    monkeypatch.setattr(MediaFileManager, "add", spy)
    at = _page(monkeypatch, demo_store, "shortlist")
    assert any("scale-up" in w.value for w in at.warning)  # the safety caution
    pick = at.multiselect(key="short_pick")
    chosen = [o for o in pick.options[1:3]]
    pick.set_value(chosen).run()
    at.text_area(key="short_note").input("repeat at 80 C").run()
    assert not at.exception, [e.value for e in at.exception]
    table = next(df.value for df in at.dataframe if "catalyst" in df.value.columns)
    assert list(table.loc[table["role"] != "reference", "catalyst"].astype(str)) == chosen
    assert (table["role"] == "reference").any()  # the benchmark comes along for comparison
    labels = {d.proto.label for d in at.get("download_button")}
    assert {"Download CSV", "Download XLSX", "Next-round campaign folder (.zip)"} <= labels
    # the downloads carry the selection
    csv = pd.read_csv(io.BytesIO(served[f"{CAMPAIGN}-shortlist.csv"]))
    assert list(csv.loc[csv["role"] != "reference", "catalyst"].astype(str)) == chosen
    book = openpyxl.load_workbook(io.BytesIO(served[f"{CAMPAIGN}-shortlist.xlsx"]), read_only=True)
    assert "shortlist" in book.sheetnames
    with zipfile.ZipFile(io.BytesIO(served[f"{CAMPAIGN}-next-round.zip"])) as zf:
        names = zf.namelist()
        assert any(n.endswith("campaign.toml") for n in names) and any(n.endswith("layout.csv") for n in names)
        layout = pd.read_csv(zf.open(next(n for n in names if n.endswith("layout.csv"))))
        assert set(chosen) <= set(layout["catalyst"].dropna().astype(str))
        assert zf.read(next(n for n in names if n.endswith("NOTE.txt"))).decode().strip() == "repeat at 80 C"


def test_a_table_selection_past_the_end_of_the_table_is_dropped():
    # the rule in plain words: the picked rows that the table still has, in the order picked
    from types import SimpleNamespace

    from screenlab.app import widgets

    picked = SimpleNamespace(selection=SimpleNamespace(rows=[3, 0, 7]))
    assert widgets.selected_rows(picked, 4) == [3, 0]
    assert widgets.selected_rows(picked, 0) == []
    assert widgets.selected_rows(None, 4) == [] and widgets.selected_rows(SimpleNamespace(), 4) == []
