"""AppTest of the decision parts: the Shortlist page records a decision and offers the report; the
Campaigns page of a next round shows the round before and what was decided there; the Catalyst
history page lists every campaign of a catalyst (reached with ?catalyst=ID)."""
from __future__ import annotations

import shutil
import tomllib
from pathlib import Path

import pytest
from streamlit.testing.v1 import AppTest

from rounds import NOTE, ROUND1, ROUND2, add_second_round

from screenlab.store import Store
from screenlab.store import decisions as D

ENTRY = str(Path(__file__).resolve().parent.parent / "screenlab" / "app" / "streamlit_app.py")
TIMEOUT = 90


@pytest.fixture(scope="module")
def rounds_store(demo_store, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("app-rounds")
    path = tmp / "store.duckdb"
    shutil.copy2(demo_store, path)
    number = add_second_round(path, tmp)
    return path, number


def _page(monkeypatch, store, page, campaign=ROUND1, read_only=False, query=None) -> AppTest:
    monkeypatch.setenv("SCREENLAB_STORE", str(store))
    monkeypatch.setenv("SCREENLAB_READ_ONLY", "1" if read_only else "0")
    at = AppTest.from_file(ENTRY, default_timeout=TIMEOUT)
    at.session_state["sl_campaign"] = campaign
    for k, v in (query or {}).items():
        at.query_params[k] = v
    at.run()
    assert not at.exception, [e.value for e in at.exception]
    if page != "campaigns":
        at.switch_page(f"app_pages/{page}.py").run()
        assert not at.exception, [e.value for e in at.exception]
    return at


def _texts(at) -> str:
    parts = [m.value for m in at.markdown] + [t.value for t in at.title] + [s.value for s in at.subheader]
    parts += [c.value for c in at.caption] + [i.value for i in at.info] + [e.value for e in at.success]
    return "\n".join(str(p) for p in parts)


def test_shortlist_page_records_the_decision(monkeypatch, demo_store_copy):
    import io
    import zipfile

    from streamlit.runtime.media_file_manager import MediaFileManager

    served: dict[str, bytes] = {}
    original = MediaFileManager.add

    def spy(self, path_or_data, mimetype, coordinates, file_name=None, is_for_static_download=False):
        if file_name:
            served[file_name] = path_or_data if isinstance(path_or_data, bytes) else str(path_or_data).encode()
        return original(self, path_or_data, mimetype, coordinates, file_name, is_for_static_download)

    monkeypatch.setattr(MediaFileManager, "add", spy)
    at = _page(monkeypatch, demo_store_copy, "shortlist")
    record = at.button(key="short_record")
    assert record.disabled                          # no note yet: nothing to record
    pick = at.multiselect(key="short_pick")
    chosen = list(pick.options[:2]) + [pick.options[3]]   # picked by hand, passing over the third
    pick.set_value(chosen).run()
    at.text_area(key="short_note").input("two leaders and one to confirm").run()
    at.text_input(key="short_author").input("P. Chemist").run()
    assert not at.button(key="short_record").disabled
    at.button(key="short_record").click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert any("Recorded as decision 1" in s.value for s in at.success)
    listed = D.decisions(Store(demo_store_copy, read_only=True))
    row = listed.iloc[0]
    assert row["author"] == "P. Chemist" and row["note"] == "two leaders and one to confirm"
    assert row["catalysts"] == ", ".join(chosen) and row["constraints"]["selection"] == "picked by hand"
    assert row["constraints"]["passed_over"] == [pick.options[2]]
    # the downloads now carry the decision: the next round names it, the report shows it
    with zipfile.ZipFile(io.BytesIO(served[f"{ROUND1}-next-round.zip"])) as zf:
        toml = zf.read(next(n for n in zf.namelist() if n.endswith("campaign.toml"))).decode()
    doc = tomllib.loads(toml)
    assert doc["campaign"]["parent"] == ROUND1 and doc["campaign"]["decision"] == 1
    html = served[f"{ROUND1}-report.html"].decode("utf-8")
    assert "Decision 1: " + ", ".join(chosen) in html and "two leaders and one to confirm" in html
    assert "https://" not in html and "<script" not in html
    # the decision is listed on the page
    assert any("Decisions on this campaign" == s.value for s in at.subheader)


def test_read_only_shortlist_cannot_record(monkeypatch, demo_store):
    at = _page(monkeypatch, demo_store, "shortlist", read_only=True)
    at.text_area(key="short_note").input("a note").run()
    assert at.button(key="short_record").disabled
    assert "read-only" in _texts(at)
    labels = {d.proto.label for d in at.get("download_button")}
    assert "Report (.html)" in labels                 # the report is offered all the same (as a draft)


def test_campaigns_page_of_a_next_round_links_back(monkeypatch, rounds_store):
    path, number = rounds_store
    at = _page(monkeypatch, path, "campaigns", campaign=ROUND2, read_only=True)
    text = _texts(at)
    assert f"This round follows **{ROUND1}**, decision {number}." in text
    assert "chose **RU-01, RU-02, RU-04**" in text
    assert any(NOTE in i.value for i in at.info)       # what was decided there, with its note
    table = next(df.value for df in at.dataframe if "parent" in df.value.columns)
    assert table.set_index("campaign").loc[ROUND2, "parent"] == ROUND1
    back = at.button(key="campaigns_go_parent")
    back.click().run()
    assert not at.exception, [e.value for e in at.exception]
    assert at.session_state["sl_campaign"] == ROUND1
    text = _texts(at)
    assert f"Rounds after this one: **{ROUND2}**" in text and "Decisions" in text
    dec = next(df.value for df in at.dataframe if "note" in df.value.columns)
    assert dec["note"].tolist() == [NOTE]


def test_history_page_from_a_link(monkeypatch, rounds_store):
    path, _ = rounds_store
    at = _page(monkeypatch, path, "history", read_only=True, query={"catalyst": "RU-04-B2"})
    assert at.selectbox(key="hist_catalyst").value == "RU-04-B2"
    side = next(df.value for df in at.dataframe if "vs_benchmark" in df.value.columns and "tof_at_ref" in
                df.value.columns)
    assert side["campaign"].tolist() == [ROUND1, ROUND2] and side["catalyst"].tolist() == ["RU-04", "RU-04-B2"]
    assert "under another id" in _texts(at)
    assert len(at.get("plotly_chart")) == 2
    at.selectbox(key="hist_catalyst").set_value("MN-01").run()
    assert not at.exception
    side = next(df.value for df in at.dataframe if "tof_at_ref" in df.value.columns)
    assert side["campaign"].tolist() == [ROUND1]
