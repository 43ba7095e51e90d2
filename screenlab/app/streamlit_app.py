"""ScreenLab browser app: the entrypoint (router and shared sidebar; no computation here).

Started by ``screenlab app [--store PATH] [--read-only]`` / ``screenlab demo``; see
:mod:`screenlab.app.runtime` for how the store path arrives.
"""
from __future__ import annotations

import os
import sys
import time

# numpy and pandas first, in the main thread, before any DuckDB result is fetched
import numpy  # noqa: F401
import pandas  # noqa: F401
import streamlit as st

from screenlab.app import runtime, widgets
from screenlab.errors import ScreenlabError


def pages(read_only: bool) -> dict[str, list]:
    """The page list; the Import page exists only when the store may be written."""
    p = lambda name, title, icon, **kw: st.Page(f"app_pages/{name}.py", title=title, icon=f":material/{icon}:", **kw)  # noqa: E731
    campaign = [p("campaigns", "Campaigns", "dashboard", default=True)]
    if not read_only:
        campaign.append(p("import_data", "Import", "upload"))
    campaign.append(p("history", "Catalyst history", "history"))
    return {
        "Campaign": campaign,
        "Kinetics": [p("plate_map", "Plate map", "grid_on"), p("rates", "Rates", "table_chart"),
                     p("temperature", "Temperature series", "thermostat"),
                     p("orders", "Reaction orders", "trending_up")],
        "Decide": [p("ranking", "Ranking", "leaderboard"), p("quality", "Plate quality", "verified"),
                   p("shortlist", "Shortlist", "checklist")],
    }


#: set to 1 to print each script run's time (sidebar context and page) to the server log; ``profile``
#: also prints the page script's cProfile hot spots there
TIMING_ENV = "SCREENLAB_APP_TIMING"


def run() -> None:
    t0 = time.perf_counter()
    st.set_page_config(page_title="ScreenLab", page_icon=":material/science:", layout="wide")
    cfg = runtime.config()
    nav = st.navigation(pages(cfg.read_only), position="sidebar")
    try:
        widgets.build_context(cfg)
    except ScreenlabError as exc:
        st.error(f"The store could not be read: {exc}")
        st.stop()
    t1 = time.perf_counter()
    mode = os.environ.get(TIMING_ENV, "").strip().lower()
    prof = None
    if mode == "profile":  # developer aid: the page script's hot spots, cumulative time
        import cProfile

        prof = cProfile.Profile()
        prof.enable()
    try:
        nav.run()
    finally:
        if prof is not None:
            import pstats

            prof.disable()
            pstats.Stats(prof, stream=sys.stderr).sort_stats("cumulative").print_stats(r"screenlab|pandas/core/frame|plotly|streamlit/elements", 30)
        if mode not in ("", "0"):
            t2 = time.perf_counter()
            print(f"[screenlab timing] page={nav.url_path or 'campaigns'} context={t1 - t0:.3f}s "
                  f"page_script={t2 - t1:.3f}s total={t2 - t0:.3f}s", file=sys.stderr, flush=True)


run()
