"""Small Streamlit helpers shared by the pages: the sidebar context, charts, tables, glossary.

Shared widget keys start with ``sl_``; each page prefixes its own keys with its page name.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

import pandas as pd
import streamlit as st

from screenlab.app import cache
from screenlab.app.runtime import AppConfig
from screenlab.settings import SETTINGS, AnalysisSettings

CTX_KEY = "_sl_context"
#: settings the sidebar offers (the others keep the campaign's value)
SIDEBAR_SETTINGS = ("reference_temperature_c", "confidence", "conversion_window_pct", "outlier_z", "zprime_min")
_SETTING_HELP = {s.name: s.help for s in SETTINGS}
_SETTING_LABEL = {
    "reference_temperature_c": "Reference temperature / °C",
    "confidence": "Confidence level",
    "conversion_window_pct": "Early window of the generic rate law / % of the course's maximum",
    "outlier_z": "Outlier robust z",
    "zprime_min": "Minimum Z'",
}


@dataclass(frozen=True)
class Context:
    """What every page needs: where the store is, its version, the chosen campaign and settings."""

    config: AppConfig
    version: Any
    campaign: str | None
    campaign_names: tuple[str, ...]
    settings_key: tuple | None

    @property
    def path(self) -> str:
        return self.config.store_path

    @property
    def read_only(self) -> bool:
        return self.config.read_only

    def analysis(self):
        return cache.analysis(self.path, self.read_only, self.version, self.campaign, self.settings_key)

    @property
    def settings(self) -> AnalysisSettings:
        return cache.settings_from_key(self.settings_key)


def build_context(config: AppConfig) -> Context:
    """Draw the sidebar (campaign and settings) and remember the result for the page."""
    version = cache.data_version(config.store_path, config.read_only)
    camps = cache.campaigns(config.store_path, config.read_only, version)
    names = tuple(camps["campaign"].astype(str)) if len(camps) else ()
    campaign = None
    skey = None
    with st.sidebar:
        st.caption(f"Store: `{config.store_path}`" + (" · read-only" if config.read_only else ""))
        if names:
            wanted = st.query_params.get("campaign")  # a link may name the campaign: ?campaign=NAME
            if wanted in names and "sl_campaign" not in st.session_state:
                st.session_state["sl_campaign"] = wanted
            if st.session_state.get("sl_campaign") not in (None, *names):
                del st.session_state["sl_campaign"]  # e.g. a campaign that was replaced under another name
            campaign = st.selectbox("Campaign", names, key="sl_campaign")
            data = cache.campaign_data(config.store_path, config.read_only, version, campaign)
            from screenlab.pipeline import settings_for

            base = settings_for(data)
            values = {}
            with st.expander("Analysis settings", expanded=False):
                for name in SIDEBAR_SETTINGS:
                    values[name] = _setting_input(name, getattr(base, name), campaign)
            settings = AnalysisSettings.from_mapping(base.to_dict(), **values)
            skey = cache.settings_key(settings)
        else:
            st.info("No campaign in this store yet.")
    ctx = Context(config=config, version=version, campaign=campaign, campaign_names=names, settings_key=skey)
    st.session_state[CTX_KEY] = ctx
    return ctx


def _setting_input(name: str, default, campaign: str):
    key = f"sl_set_{name}_{campaign}"
    label = _SETTING_LABEL.get(name, name)
    helptext = _SETTING_HELP.get(name)
    if name == "confidence":
        options = [0.8, 0.9, 0.95, 0.99]
        if default not in options:
            options = sorted({*options, float(default)})
        return st.select_slider(label, options=options, value=float(default), key=key, help=helptext,
                                format_func=lambda v: f"{v * 100:g} %")
    from screenlab.settings import SETTINGS

    step = {"reference_temperature_c": 5.0, "conversion_window_pct": 5.0, "outlier_z": 0.5, "zprime_min": 0.1}[name]
    # the widget's range is the setting's own (the rule AnalysisSettings checks)
    lo, hi, lo_in, hi_in = next(s for s in SETTINGS if s.name == name).bounds
    lo = lo if lo_in else lo + (1e-6 if abs(lo) < 1 else 0.01)
    hi = hi if hi_in else hi - 1e-6
    return st.number_input(label, value=float(default), step=step, key=key, help=helptext,
                           min_value=float(lo), max_value=float(hi))


def context() -> Context:
    """The context the entrypoint built for this run."""
    return st.session_state[CTX_KEY]


def need_campaign(ctx: Context) -> bool:
    """Show a hint and return False when the store has no campaign yet."""
    if ctx.campaign:
        return True
    if ctx.read_only:
        st.info("This store has no campaign yet. Import one with `screenlab ingest FOLDER --store PATH`.")
    else:
        st.info("This store has no campaign yet. Use the Import page to add one.")
        st.page_link("app_pages/import_data.py", label="Go to Import", icon=":material/upload:")
    return False


def chart(fig, key: str, *, filename: str | None = None, on_select: str | None = None, **kw):
    """Show a plotly figure with its download (camera) button set to SVG."""
    config = {
        "displaylogo": False,
        "toImageButtonOptions": {"format": "svg", "filename": filename or key, "scale": 2},
        "modeBarButtonsToRemove": ["lasso2d", "select2d"] if on_select is None else [],
    }
    if on_select:
        return st.plotly_chart(fig, key=key, config=config, width="stretch", on_select=on_select,
                               selection_mode=("points",), **kw)
    return st.plotly_chart(fig, key=key, config=config, width="stretch", **kw)


_UNIT_SUFFIX = [
    (r"_mM_per_h$", " / mM h⁻¹"), (r"_per_h$", " / h⁻¹"), (r"_kj_mol$", " / kJ mol⁻¹"),
    (r"_j_mol_k$", " / J mol⁻¹ K⁻¹"), (r"_mM$", " / mM"), (r"_uL$", " / µL"), (r"_umol$", " / µmol"),
    (r"_pct$", " / %"), (r"_c$", " / °C"), (r"_h$", " / h"),
]


#: core columns whose name does not end in their unit: they share the unit of their estimate
_INHERITED_UNIT = [
    (r"^(tof|tof_ref)_(ci_low|ci_high|se)$", " / h⁻¹"),
    (r"^(ea|dh|delta_ea)_(ci_low|ci_high|se)$", " / kJ mol⁻¹"),
    (r"^ds_se$", " / J mol⁻¹ K⁻¹"),
]
_SPECIAL = {"zprime": "Z'", "ln_a": "ln(A / h⁻¹)", "ton": "TON", "ton_se": "TON se"}


def nice_label(col: str) -> str:
    """Column name -> header with its unit written out (``tof_per_h`` -> ``tof / h⁻¹``)."""
    if col in _SPECIAL:
        return _SPECIAL[col]
    for pattern, unit in _INHERITED_UNIT:
        if re.search(pattern, col):
            return col.replace("_", " ") + unit
    for pattern, unit in _UNIT_SUFFIX:
        if re.search(pattern, col):
            return re.sub(pattern, "", col).replace("_", " ") + unit
    return col.replace("_", " ")


def table(frame: pd.DataFrame, key: str, *, columns: list[str] | None = None, height: int | None = None,
          **kw):
    """A dataframe whose headers carry units; numbers shown to 4 significant digits; a missing cell
    (a number without a value, a bound's open side, an empty text cell) is blank, not 'None'."""
    cols = [c for c in (columns or list(frame.columns)) if c in frame.columns]
    show = frame[cols]
    cfg = {}
    for c in cols:
        if pd.api.types.is_float_dtype(show[c]):
            cfg[c] = st.column_config.NumberColumn(nice_label(c), format="%.4g")
        else:
            cfg[c] = st.column_config.Column(nice_label(c))
    args = dict(hide_index=True, column_config=cfg, key=key, width="stretch", placeholder="")
    if height:
        args["height"] = height
    args.update(kw)
    return st.dataframe(show, **args)


def selected_rows(sel, n_rows: int) -> list[int]:
    """The rows picked in a :func:`table` shown with ``on_select``, those still in a table of
    ``n_rows`` (a keyed table keeps its selection when its data changes: another campaign, other
    settings or a new import can leave it pointing past the end)."""
    rows = sel.selection.rows if sel is not None and hasattr(sel, "selection") else []
    return [int(r) for r in rows if 0 <= int(r) < n_rows]


def flag_glossary(codes=None, *, title: str = "What the flags mean") -> None:
    """An expander explaining flag codes (all of them, or those present in ``codes``)."""
    helptext = cache.flag_help()
    wanted = None
    if codes is not None:
        wanted = set()
        for v in pd.Series(codes).dropna().astype(str):
            wanted.update(c for c in v.split(";") if c)
    rows = [(c, s) for c, s in sorted(helptext.items()) if wanted is None or c in wanted]
    if wanted:
        rows += [(c, "(no description)") for c in sorted(wanted - set(helptext))]
    with st.expander(title, expanded=False):
        if not rows:
            st.write("No flags here.")
        else:
            st.markdown("\n".join(f"- `{c}`: {s}" for c, s in rows))


def fmt(value, digits: int = 3, unit: str = "") -> str:
    """A number to ``digits`` significant figures with its unit; a dash when missing."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        return "–"
    if v != v or v in (float("inf"), float("-inf")):
        return "–"
    return f"{v:.{digits}g}{(' ' + unit) if unit else ''}"
