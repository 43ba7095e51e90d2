"""The app's only home of ``st.cache_data`` / ``st.cache_resource``: thin wrappers over the core.

Store access is short-lived: each read opens the store, fetches everything into frames and
closes it again, so ``screenlab ingest`` can write to the same file while the app is open
(DuckDB lets one process write *or* many read, never both at once). ``Store`` retries an open
while the file is momentarily held by another process.

Everything derived from the data is cached keyed by ``(store path, store.data_version(),
campaign, settings, ...)``. The data version changes on every write to the store, so a new import
shows up on the next rerun and stale entries simply stop being asked for (``max_entries`` bounds
them).

The two big objects, the loaded campaign and its :class:`Analysis` (per-reading frames of a few
hundred thousand rows on a 400-plate campaign), are held with ``st.cache_resource``: one shared
object per key, handed out without the pickle round trip ``st.cache_data`` makes on every hit
(seconds for a large campaign). They are therefore READ-ONLY: pages and the helpers below derive
new frames from them and never assign into them. Small derived tables stay on ``st.cache_data``.
"""
from __future__ import annotations

from contextlib import contextmanager
from dataclasses import fields
from typing import Any, Iterator

import pandas as pd
import streamlit as st

from screenlab.settings import AnalysisSettings

def settings_key(settings: AnalysisSettings) -> tuple:
    """A hashable, order-stable key of a settings object."""
    return tuple((f.name, getattr(settings, f.name)) for f in fields(settings))


def settings_from_key(key: tuple) -> AnalysisSettings:
    return AnalysisSettings(**dict(key))


@contextmanager
def open_store(path: str, read_only: bool) -> Iterator[Any]:
    """A store object for one action. ``Store`` opens a short connection per method and itself
    waits (``busy_timeout_s``) while another process holds the file, then raises
    :class:`StoreBusyError`; nothing stays open between reruns."""
    from screenlab.store import Store

    store = Store(path, read_only=read_only)
    try:
        yield store
    finally:
        close = getattr(store, "close", None)
        if callable(close):
            close()


def data_version(path: str, read_only: bool) -> Any:
    """The store's current data version (not cached: it is the cache key)."""
    with open_store(path, read_only) as s:
        return s.data_version()


@st.cache_data(show_spinner=False, max_entries=16)
def campaigns(path: str, read_only: bool, version: Any) -> pd.DataFrame:
    with open_store(path, read_only) as s:
        return s.campaigns()


@st.cache_data(show_spinner=False, max_entries=16)
def imports(path: str, read_only: bool, version: Any, campaign: str | None) -> pd.DataFrame:
    with open_store(path, read_only) as s:
        return s.imports(campaign)


@st.cache_resource(show_spinner="Loading the campaign ...", max_entries=4)
def campaign_data(path: str, read_only: bool, version: Any, campaign: str):
    with open_store(path, read_only) as s:
        return s.load_campaign(campaign)


@st.cache_resource(show_spinner="Analysing the campaign ...", max_entries=6)
def analysis(path: str, read_only: bool, version: Any, campaign: str, skey: tuple):
    """``pipeline.analyse`` of one campaign under one set of settings (shared: read-only)."""
    from screenlab.pipeline import analyse

    data = campaign_data(path, read_only, version, campaign)
    return analyse(data, settings_from_key(skey))


@st.cache_data(show_spinner="Ranking ...", max_entries=32)
def ranking(path: str, read_only: bool, version: Any, campaign: str, skey: tuple, metric: str,
            temperature_c: float | None, k: int, enantiomer: str | None = None, transport_limited: bool = False,
            require: tuple[str, ...] = ()) -> pd.DataFrame:
    """``stats.ranking.rank_candidates`` (``temperature_c`` None: the reference temperature;
    ``enantiomer``, ``transport_limited`` and ``require`` as its ``enantiomer``,
    ``include_transport_limited`` and ``require``)."""
    from screenlab.stats.ranking import rank_candidates

    a = analysis(path, read_only, version, campaign, skey)
    return rank_candidates(a.kinetics, a.quality, metric=metric, at_temperature_c=temperature_c, top_k=int(k),
                           confidence=a.settings.confidence, catalysts=a.data.catalysts,
                           enantiomers=a.data.manifest.enantiomers, enantiomer=enantiomer,
                           include_transport_limited=bool(transport_limited), require=tuple(require))


@st.cache_data(show_spinner="Finding the Pareto set ...", max_entries=16)
def pareto(path: str, read_only: bool, version: Any, campaign: str, skey: tuple, metrics: tuple[str, ...],
           temperature_c: float | None, draws: int = 2000, require: tuple[str, ...] = ()) -> pd.DataFrame:
    """``stats.ranking.pareto`` over 2-3 metrics, with P(on the front) from ``draws`` joint draws,
    under the Ranking page's requirements."""
    from screenlab.stats.pareto import pareto as _pareto

    a = analysis(path, read_only, version, campaign, skey)
    return _pareto(a.kinetics, a.quality, metrics, at_temperature_c=temperature_c, draws=draws,
                   confidence=a.settings.confidence, catalysts=a.data.catalysts, require=tuple(require),
                   enantiomers=a.data.manifest.enantiomers)


@st.cache_data(show_spinner=False, max_entries=16)
def well_bscores(path: str, read_only: bool, version: Any, campaign: str, skey: tuple,
                 value: str = "rate") -> pd.DataFrame:
    from screenlab.stats.quality import well_bscores as _wb

    a = analysis(path, read_only, version, campaign, skey)
    return _wb(a.kinetics, a.data, value=value)


@st.cache_data(show_spinner=False, max_entries=32)
def arrhenius_prediction(path: str, read_only: bool, version: Any, campaign: str, skey: tuple,
                         t_min_c: float, t_max_c: float, n: int = 40) -> pd.DataFrame:
    """``predict_tof`` for every fitted catalyst over a temperature grid (fit lines and bands)."""
    import numpy as np

    from screenlab.kinetics.arrhenius import predict_tof

    a = analysis(path, read_only, version, campaign, skey)
    grid = np.linspace(t_min_c, t_max_c, n)
    return predict_tof(a.kinetics.arrhenius, grid, a.settings.confidence)


@st.cache_data(show_spinner=False, max_entries=32)
def order_points(path: str, read_only: bool, version: Any, campaign: str, skey: tuple) -> pd.DataFrame:
    """``order_points`` of the analysis' wells: the wells behind each row of its orders table."""
    from screenlab.kinetics.orders import order_points as points

    a = analysis(path, read_only, version, campaign, skey)
    return points(a.kinetics.wells, a.settings, a.data.factor_names)


@st.cache_data(show_spinner=False, max_entries=16)
def flag_counts(path: str, read_only: bool, version: Any, campaign: str, skey: tuple) -> pd.DataFrame:
    """:func:`screenlab.flags.analysis_flag_counts`: rows per flag code at each level (``level, flag,
    rows``): wells, groups, plates, Arrhenius fits."""
    from screenlab.flags import analysis_flag_counts

    return analysis_flag_counts(analysis(path, read_only, version, campaign, skey))


@st.cache_resource(show_spinner=False)
def flag_help() -> dict[str, str]:
    """Flag code -> sentence, gathered once per process."""
    from screenlab.flags import flag_help as _fh

    return dict(_fh())


def clear() -> None:
    """Forget every cached result (after this app wrote to the store)."""
    st.cache_data.clear()
    campaign_data.clear()
    analysis.clear()


@st.cache_data(show_spinner="Writing the shortlist and the next-round plates ...", max_entries=16)
def shortlist_files(path: str, read_only: bool, version: Any, campaign: str, skey: tuple, metric: str,
                    temperature_c: float | None, k: int, picked: tuple[str, ...], note: str,
                    decision: int | None = None, enantiomer: str | None = None,
                    transport_limited: bool = False, require: tuple[str, ...] = ()):
    """:func:`screenlab.export.bundle.shortlist_bundle` (a ``ShortlistBundle``: table, CSV, XLSX,
    next-round zip and summary) of the picked candidates under the Ranking page's choices.
    ``decision``: the recorded decision these picks are."""
    from screenlab.export.bundle import shortlist_bundle

    a = analysis(path, read_only, version, campaign, skey)
    r = ranking(path, read_only, version, campaign, skey, metric, temperature_c, k, enantiomer, transport_limited,
                require)
    with open_store(path, read_only) as s:
        hist, hist_files = s.imports(campaign), s.import_files(campaign)
    return shortlist_bundle(a, r, picked, campaign=campaign, metric=metric, temperature_c=temperature_c, top_k=k,
                            note=note, decision=decision, enantiomer=enantiomer, require=tuple(require),
                            imports=hist, import_files=hist_files)


# --------------------------------------------------------------------------------------------
# decisions, round links, catalyst history, report (store schema 2)
# --------------------------------------------------------------------------------------------

def decisions(path: str, read_only: bool, campaign: str | None = None) -> pd.DataFrame:
    """The recorded decisions (of ``campaign``), read fresh on every call: recording a decision
    does not change the store's data version (no analysis goes stale), and the table is small."""
    from screenlab.store import decisions as D

    with open_store(path, read_only) as s:
        return D.decisions(s, campaign)


def decision_detail(path: str, read_only: bool, decision: int) -> tuple[dict, pd.DataFrame]:
    from screenlab.store import decisions as D

    with open_store(path, read_only) as s:
        return D.get_decision(s, int(decision))


def decisions_token(path: str, read_only: bool) -> tuple:
    """Changes whenever a decision is recorded (a cache key part for what shows decisions)."""
    from screenlab.store import decisions as D

    with open_store(path, read_only) as s:
        d = D.decisions(s, current_versions=False)
    return (len(d), int(d["decision"].max()) if len(d) else 0)


@st.cache_data(show_spinner=False, max_entries=16)
def round_links(path: str, read_only: bool, version: Any) -> pd.DataFrame:
    """``campaign, parent, decision, imported_at`` of every campaign (links change only on import)."""
    from screenlab.store import decisions as D

    with open_store(path, read_only) as s:
        return D.round_links(s)


@st.cache_data(show_spinner=False, max_entries=16)
def all_catalysts(path: str, read_only: bool, version: Any) -> pd.DataFrame:
    """``campaign, catalyst, alias, name, family`` over every stored campaign."""
    from screenlab.store import decisions as D

    with open_store(path, read_only) as s:
        return D.all_catalysts(s)


@st.cache_data(show_spinner=False, max_entries=32)
def campaign_version(path: str, read_only: bool, version: Any, campaign: str) -> str:
    """The campaign's version hash at data version ``version`` (what a decision is recorded against)."""
    from screenlab.store import decisions as D

    with open_store(path, read_only) as s:
        return D.campaign_version(s, campaign)


def own_settings_key(path: str, read_only: bool, version: Any, campaign: str) -> tuple:
    """The settings key of a campaign's own settings (its [analysis] table over the defaults)."""
    from screenlab.pipeline import settings_for

    return settings_key(settings_for(campaign_data(path, read_only, version, campaign)))


@st.cache_data(show_spinner="Gathering the catalyst's history ...", max_entries=32)
def history(path: str, read_only: bool, version: Any, token: tuple, catalyst: str, k: int) -> pd.DataFrame:
    """:func:`screenlab.stats.history.catalyst_history` of ``catalyst`` over every stored campaign,
    each analysed and ranked (TOF at its reference temperature) with its own settings."""
    from screenlab.stats.history import catalyst_history
    from screenlab.store import decisions as D

    def analysis_of(name):
        return analysis(path, read_only, version, name, own_settings_key(path, read_only, version, name))

    def ranking_of(name):
        return ranking(path, read_only, version, name, own_settings_key(path, read_only, version, name), "tof",
                       None, int(k))

    with open_store(path, read_only) as s:
        _, sources = D.history_sources(s, catalyst, analysis_of, ranking_of)
    return catalyst_history(sources, top_k=int(k))


@st.cache_data(show_spinner="Writing the report ...", max_entries=16)
def report_html(path: str, read_only: bool, version: Any, token: tuple, campaign: str, skey: tuple, metric: str,
                temperature_c: float | None, k: int, picked: tuple[str, ...], note: str, author: str,
                decision: int | None) -> bytes:
    """The campaign report (:func:`screenlab.export.report.campaign_report`) of the Shortlist page's
    choice: the recorded ``decision`` when given, else the picks as a draft (not recorded)."""
    from screenlab.export.decision import draft_decision
    from screenlab.errors import NotFoundError
    from screenlab.export.report import campaign_report, decision_from_draft
    from screenlab.store import decisions as D

    a = analysis(path, read_only, version, campaign, skey)
    r = ranking(path, read_only, version, campaign, skey, metric, temperature_c, k)
    with open_store(path, read_only) as s:
        if decision is not None:
            rec, rows = D.get_decision(s, int(decision))
        else:
            draft = draft_decision(r, list(picked), campaign=campaign, note=note, author=author, settings=a.settings,
                                   top_k=k, draws=10000, seed=0, catalysts=a.data.catalysts,
                                   campaign_version=campaign_version(path, read_only, version, campaign))
            rec, rows = decision_from_draft(draft)
        imports_, files = s.imports(campaign), s.import_files(campaign)
        links = D.round_links(s)
        m = a.data.manifest
        parent = None
        if m.parent:
            parent = {"campaign": m.parent, "decision": m.decision, "record": None}
            if m.decision is not None:
                try:
                    parent["record"] = D.get_decision(s, m.decision)[0]
                except NotFoundError:  # a decision of another store: shown as "not in this store"
                    pass
        version_now = D.campaign_version(s, campaign)
    children = links.loc[links["parent"].astype(object) == campaign, "campaign"].astype(str).tolist()
    t = temperature_c if temperature_c is not None else (a.settings.reference_temperature_c
                                                          if metric not in ("ea",) else None)
    html = campaign_report(a, r, campaign=campaign, metric=metric, temperature_c=t, top_k=k, decision=rec,
                           decision_rows=rows, imports=imports_, files=files, campaign_version=version_now,
                           parent=parent, children=children)
    return html.encode("utf-8")
