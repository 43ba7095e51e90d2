"""Streamlit AppTest helpers shared by the app-page tests: the app on a store (``_app``), a page
run to the end without an exception (``_page``), the texts shown (``_texts``). A plain module the
tests import by name (not a test module).
"""
from __future__ import annotations

from pathlib import Path

from streamlit.testing.v1 import AppTest



ENTRY = str(Path(__file__).resolve().parent.parent / "screenlab" / "app" / "streamlit_app.py")


TIMEOUT = 60


CAMPAIGN = "th-screen-2026"


def _app(monkeypatch, store, read_only=False, campaign=CAMPAIGN) -> AppTest:
    monkeypatch.setenv("SCREENLAB_STORE", str(store))
    monkeypatch.setenv("SCREENLAB_READ_ONLY", "1" if read_only else "0")
    at = AppTest.from_file(ENTRY, default_timeout=TIMEOUT)
    at.session_state["sl_campaign"] = campaign
    return at


def _texts(at) -> str:
    parts = [m.value for m in at.markdown] + [t.value for t in at.title] + [s.value for s in at.subheader]
    parts += [c.value for c in at.caption] + [i.value for i in at.info] + [e.value for e in at.error]
    parts += [m.label for m in at.metric]
    return "\n".join(str(p) for p in parts)


def _page(monkeypatch, store, page, **kw) -> AppTest:
    at = _app(monkeypatch, store, **kw)
    at.run()
    assert not at.exception, at.exception
    at.switch_page(f"app_pages/{page}.py").run()
    assert not at.exception, [e.value for e in at.exception]
    return at
