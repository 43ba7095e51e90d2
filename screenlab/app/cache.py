"""The app's only home of ``st.cache_data`` / ``st.cache_resource``: thin wrappers over the core.

Store access is short-lived: each read opens the store, fetches everything into frames and
closes it again, so ``screenlab ingest`` can write to the same file while the app is open
(DuckDB lets one process write *or* many read, never both at once). ``Store`` retries an open
while the file is momentarily held by another process.

Everything derived from the data is cached with ``st.cache_data`` keyed by
``(store path, store.data_version(), campaign, settings, ...)``. The data version changes on
every write to the store, so a new import shows up on the next rerun and stale entries simply
stop being asked for (``max_entries`` bounds them).
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


@st.cache_data(show_spinner="Loading the campaign ...", max_entries=8)
def campaign_data(path: str, read_only: bool, version: Any, campaign: str):
    with open_store(path, read_only) as s:
        return s.load_campaign(campaign)


@st.cache_data(show_spinner="Analysing the campaign ...", max_entries=8)
def analysis(path: str, read_only: bool, version: Any, campaign: str, skey: tuple):
    """``pipeline.analyse`` of one campaign under one set of settings."""
    from screenlab.pipeline import analyse

    data = campaign_data(path, read_only, version, campaign)
    return analyse(data, settings_from_key(skey))


@st.cache_data(show_spinner="Ranking ...", max_entries=32)
def ranking(path: str, read_only: bool, version: Any, campaign: str, skey: tuple, metric: str,
            temperature_c: float | None, k: int) -> pd.DataFrame:
    """``stats.ranking.rank_candidates`` (``temperature_c`` None: the reference temperature)."""
    from screenlab.stats.ranking import rank_candidates

    a = analysis(path, read_only, version, campaign, skey)
    return rank_candidates(a.kinetics, a.quality, metric=metric, at_temperature_c=temperature_c, top_k=int(k),
                           confidence=a.settings.confidence, catalysts=a.data.catalysts)


@st.cache_data(show_spinner="Finding the Pareto set ...", max_entries=16)
def pareto(path: str, read_only: bool, version: Any, campaign: str, skey: tuple, metrics: tuple[str, ...],
           temperature_c: float | None, draws: int = 2000) -> pd.DataFrame:
    """``stats.ranking.pareto`` over 2-3 metrics, with P(on the front) from ``draws`` joint draws."""
    from screenlab.stats.ranking import pareto as _pareto

    a = analysis(path, read_only, version, campaign, skey)
    return _pareto(a.kinetics, a.quality, metrics, at_temperature_c=temperature_c, draws=draws,
                   confidence=a.settings.confidence, catalysts=a.data.catalysts)


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


@st.cache_resource(show_spinner=False)
def flag_help() -> dict[str, str]:
    """Flag code -> sentence, gathered once per process."""
    from screenlab.flags import flag_help as _fh

    return dict(_fh())


def clear() -> None:
    """Forget every cached result (after this app wrote to the store)."""
    st.cache_data.clear()
