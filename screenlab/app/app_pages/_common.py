"""Pieces more than one page shows (display only; every number comes from the core)."""
from __future__ import annotations

import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets


def best_candidates(ctx, analysis, n: int = 5) -> None:
    """The top of the default ranking (TOF at the reference temperature), with intervals."""
    r = cache.ranking(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, "tof", None, 3)
    ranked = r[r["rank"].notna()].head(n)
    if ranked.empty:
        st.info("No candidate can be ranked yet.")
        return
    st.caption(f"By TOF at the reference temperature {ctx.settings.reference_temperature_c:g} °C (h⁻¹), "
               f"{ctx.settings.confidence * 100:g} % intervals; P(best) from the estimates' uncertainty.")
    widgets.table(ranked.rename(columns={"estimate": "tof_per_h", "ci_low": "tof_ci_low_per_h", "ci_high": "tof_ci_high_per_h"}),
                  key="campaigns_best", columns=["rank", "catalyst", "family", "tof_per_h", "tof_ci_low_per_h", "tof_ci_high_per_h",
                                                 "rank_low", "rank_high", "p_best", "basis", "flags"])
    st.page_link("app_pages/ranking.py", label="Full ranking", icon=":material/leaderboard:")


_UNIT_TEXT = {"h-1": "h⁻¹", "kJ/mol": "kJ mol⁻¹", "": ""}
#: what comes first, in a few words (the ranking's ``direction`` attribute says it in full)
_ORDER_WORDS = {"ee": "larger |ee| first, either enantiomer", "ea": "lower apparent barrier first"}


def unit_text(unit: str) -> str:
    """A core unit word as the pages write it (``h-1`` -> ``h⁻¹``)."""
    return _UNIT_TEXT.get(unit, unit)


def metric_choices() -> dict[str, dict]:
    """The ranking metrics of the core with display labels (axis titles carry the unit)."""
    from screenlab.stats.candidates import METRICS

    out = {}
    for key, m in METRICS.items():
        unit = _UNIT_TEXT.get(m.unit, m.unit)
        better = _ORDER_WORDS.get(key, "higher is better" if m.higher_is_better else "lower is better")
        out[key] = {
            "label": f"{m.label}" + (f" / {unit}" if unit else "") + f" ({better})",
            "axis": f"{m.label}" + (f" / {unit}" if unit else " (ratio)" if m.lognormal else ""),
            "per_temperature": m.source == "rates",
            "log": bool(m.lognormal),
            "column": m.column,
            "higher_is_better": m.higher_is_better,
            "predict": bool(m.predict),
        }
    return out


def bound_texts(rows: pd.DataFrame) -> list[str]:
    """``>= 1,500 h⁻¹`` / ``<= 0.4 h⁻¹`` for ranking rows that are bounds."""
    from screenlab.export.display import bound_text

    return [bound_text(v, c, unit_text(str(u))) for v, c, u in zip(rows["estimate"], rows["censored"], rows["unit"])]


def pareto_section(ctx, analysis, temperature, require: tuple[str, ...] = ()) -> None:
    """Two or three metrics at once: which candidates no other beats on all of them."""
    from screenlab.viz import figures

    metrics = metric_choices()
    keys = list(metrics)
    default = [k for k in ("tof", "ea") if k in keys] or keys[:2]
    chosen = st.multiselect("Metrics (two or three)", keys, default=default, max_selections=3, key="rank_pareto",
                            format_func=lambda m: metrics[m]["label"])
    if len(chosen) < 2:
        st.info("Choose two or three metrics.")
        return
    front = cache.pareto(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, tuple(chosen),
                         temperature, require=tuple(require))
    if require:
        st.caption(f"Under the requirements {', '.join(require)}: candidates clearly outside them are listed with "
                   "the reason and not compared.")
    ok = front[front["reason"].astype(str) == ""]
    x, y = metrics[chosen[0]], metrics[chosen[1]]
    if ok.empty:
        st.info("No candidate has all of these metrics.")
    else:
        fig = figures.pareto_plot(ok, x=x["column"], y=y["column"], x_label=x["axis"], y_label=y["axis"],
                                  log_x=x["log"], log_y=y["log"])
        widgets.chart(fig, key="rank_pareto_plot", filename="pareto")
        st.caption("Pareto front: no other candidate is at least as good on every chosen metric and better on one "
                   "(point estimates). P(front): share of joint draws from the estimates' uncertainty in which the "
                   "candidate is on the front." + (" The plot shows the first two metrics." if len(chosen) == 3 else ""))
    widgets.table(front, key="rank_pareto_table")


#: catalysts linked one by one; more get a picker and one link
HISTORY_LINKS_MAX = 8


def history_links(catalysts, key: str, *, label: str = "Catalyst history across campaigns") -> None:
    """Links from catalyst names to the Catalyst history page (``?catalyst=ID``)."""
    ids = [str(c) for c in dict.fromkeys(catalysts) if c is not None and str(c)]
    if not ids:
        return
    st.markdown(f"**{label}**")
    if len(ids) <= HISTORY_LINKS_MAX:
        cols = st.columns(len(ids))
        for col, cid in zip(cols, ids):
            col.page_link("app_pages/history.py", label=cid, icon=":material/history:",
                          query_params={"catalyst": cid})
        return
    c1, c2 = st.columns([2, 3])
    pick = c1.selectbox("Catalyst", ids, key=f"{key}_pick", label_visibility="collapsed")
    c2.page_link("app_pages/history.py", label=f"History of {pick}", icon=":material/history:",
                 query_params={"catalyst": pick})


def _choose_campaign(name: str) -> None:
    st.session_state["sl_campaign"] = name  # a callback: runs before the sidebar's picker is drawn


def campaign_button(name: str, key: str, *, label: str | None = None, icon: str = ":material/arrow_back:",
                    page: str = "app_pages/campaigns.py") -> None:
    """A button that makes ``name`` the sidebar's campaign and opens ``page`` (the campaign's page)."""
    names = set(st.session_state.get(widgets.CTX_KEY).campaign_names) if widgets.CTX_KEY in st.session_state else set()
    if name not in names:
        st.caption(f"{name} (not in this store)")
        return
    if st.button(label or name, key=key, icon=icon, on_click=_choose_campaign, args=(name,)):
        st.switch_page(page)
