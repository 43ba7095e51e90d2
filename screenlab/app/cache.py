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
from dataclasses import dataclass, fields
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
    from screenlab.stats.ranking import pareto as _pareto

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


@st.cache_data(show_spinner=False, max_entries=16)
def flag_counts(path: str, read_only: bool, version: Any, campaign: str, skey: tuple) -> pd.DataFrame:
    """Rows per flag code at each level (``level, flag, rows``): wells, groups, plates, Arrhenius fits."""
    from screenlab.app.app_pages._common import flag_counts as _fc

    a = analysis(path, read_only, version, campaign, skey)
    kin = a.kinetics
    return _fc({"well": kin.wells["flags"], "group": kin.rates["flags"], "plate": a.quality["flags"],
                "Arrhenius fit": kin.arrhenius["flags"]})


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


@dataclass(frozen=True)
class ShortlistFiles:
    """What the Shortlist page offers for download (built by the export core)."""

    table: pd.DataFrame
    csv: bytes
    xlsx: bytes
    next_round_zip: bytes
    next_round_summary: str


@st.cache_data(show_spinner="Writing the shortlist and the next-round plates ...", max_entries=16)
def shortlist_files(path: str, read_only: bool, version: Any, campaign: str, skey: tuple, metric: str,
                    temperature_c: float | None, k: int, picked: tuple[str, ...], note: str,
                    enantiomer: str | None = None, transport_limited: bool = False,
                    require: tuple[str, ...] = ()) -> ShortlistFiles:
    """``export.shortlist.write_shortlist`` and ``export.nextround.design_next_round`` for the picked
    candidates (in ranking order, the benchmark added for comparison), read back as bytes."""
    import io
    import tempfile
    import zipfile
    from pathlib import Path

    from screenlab.export.nextround import design_next_round
    from screenlab.export.shortlist import write_shortlist

    a = analysis(path, read_only, version, campaign, skey)
    r = ranking(path, read_only, version, campaign, skey, metric, temperature_c, k, enantiomer, transport_limited,
                require)
    chosen = r[r["catalyst"].astype(str).isin(picked) | (r["role"].astype(str) == "reference")]
    chosen = chosen[chosen["rank"].notna()]
    n_picked = int((chosen["role"].astype(str) != "reference").sum())
    with open_store(path, read_only) as s:
        hist, hist_files = s.imports(campaign), s.import_files(campaign)
    with tempfile.TemporaryDirectory(prefix="screenlab-shortlist-") as tmp:
        out = write_shortlist(Path(tmp) / "shortlist", chosen, a.kinetics, campaign=campaign, top_k=max(1, n_picked),
                              catalysts=a.data.catalysts, quality=a.quality, imports=hist, import_files=hist_files,
                              options={"metric": metric, "temperature_c": temperature_c, "top_k": k,
                                       "note": note, "picked": ";".join(picked), "enantiomer": enantiomer or "",
                                       "require": ";".join(require), "order": r.attrs.get("direction", ""),
                                       "draws": (r.attrs.get("monte_carlo") or {}).get("draws", ""),
                                       "mc_se": (r.attrs.get("monte_carlo") or {}).get("mc_se", "")})
        table = pd.read_csv(out["csv"]) if "csv" in out else pd.DataFrame()
        csv = Path(out["csv"]).read_bytes()
        xlsx = Path(out["xlsx"]).read_bytes()
        nr_name = f"{campaign}-next-round"
        folder = design_next_round(Path(tmp) / nr_name, a.data, [c for c in picked], name=nr_name)
        buf = io.BytesIO()
        files = sorted(p for p in Path(folder).rglob("*") if p.is_file())
        with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
            for p in files:
                zf.write(p, f"{nr_name}/{p.relative_to(folder).as_posix()}")
            if note.strip():
                zf.writestr(f"{nr_name}/NOTE.txt", note.strip() + "\n")
        layout = Path(folder) / "layout.csv"
        summary = ""
        if layout.is_file():
            lay = pd.read_csv(layout)
            roles = lay["role"].astype(str).value_counts()
            summary = (f"Next round: {lay['plate'].nunique()} plate(s), "
                       + ", ".join(f"{int(n)} {role}" for role, n in roles.items())
                       + f" wells; files: {', '.join(p.name for p in files)}.")
    return ShortlistFiles(table=table, csv=csv, xlsx=xlsx, next_round_zip=buf.getvalue(), next_round_summary=summary)
