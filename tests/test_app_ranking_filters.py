"""AppTest of the Ranking page's ee, Ea and requirement controls and of the plate-quality page's
separation columns (issue 14), on the demo store."""
from __future__ import annotations

import json

from apptest_pages import _page, _texts


def test_ranking_ee_either_way_and_a_requirement(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "ranking", campaign="henry-chiral-2026")
    at.selectbox(key="rank_metric").set_value("ee").run()
    assert not at.exception, [e.value for e in at.exception]
    radio = at.radio(key="rank_enantiomer")
    assert radio.options == ["either enantiomer (|ee|)", "P_R", "P_S"]
    table = at.dataframe[0].value
    assert {"favours", "shown", "ee_pct"} <= set(table.columns)
    assert set(table["favours"]) == {"P_R", "P_S"}
    assert "either enantiomer" in _texts(at)
    radio.set_value("P_S").run()
    assert not at.exception
    assert at.dataframe[0].value["catalyst"].iloc[0] == "CU-DA2"     # the one favouring P_S
    at.text_input(key="rank_require").input("selectivity_pct>=90").run()
    assert not at.exception
    t = at.dataframe[0].value
    assert t["reason"].astype(str).str.contains("is below 90").any()
    assert "Required: selectivity_pct>=90" in _texts(at)
    at.text_input(key="rank_require").input("selectivity_pct>90").run()
    assert any("COLUMN>=VALUE" in e.value for e in at.error)


def test_ranking_ea_transport_toggle(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "ranking")
    at.selectbox(key="rank_metric").set_value("ea").run()
    assert not at.exception
    t = at.dataframe[0].value.set_index("catalyst")
    assert "transport" in str(t.loc["S-PT-AL", "reason"])
    assert "lower apparent barrier first" in _texts(at)
    at.toggle(key="rank_transport").set_value(True).run()
    assert not at.exception
    assert at.dataframe[0].value["catalyst"].iloc[0] == "S-PT-AL"


def test_plate_quality_shows_the_sample_separation(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "quality")
    q = at.dataframe[0].value
    assert {"robust_zprime", "ssmd", "blank_lod_mM_per_h", "sample_active_pct"} <= set(q.columns)
    fig = [t.get("name") for t in json.loads(at.get("plotly_chart")[0].proto.spec)["data"]]
    assert "robust Z' (samples vs blanks)" in fig
