"""Pieces more than one page shows (display only; every number comes from the core)."""
from __future__ import annotations

import pandas as pd
import streamlit as st

from screenlab.app import cache, widgets


def flag_counts(sources: dict[str, pd.Series]) -> pd.DataFrame:
    """How many rows of each kind carry each flag code (``level, flag, rows``)."""
    parts = []
    for level, flags in sources.items():
        s = pd.Series(flags, dtype="string").fillna("")
        codes = s[s.str.len() > 0].str.split(";").explode()
        codes = codes[codes.str.len() > 0]
        if len(codes):
            vc = codes.value_counts()
            parts.append(pd.DataFrame({"level": level, "flag": vc.index.astype(str), "rows": vc.to_numpy()}))
    if not parts:
        return pd.DataFrame(columns=["level", "flag", "rows"])
    return pd.concat(parts, ignore_index=True)


def best_candidates(ctx, analysis, n: int = 5) -> None:
    """The top of the default ranking (TOF at the reference temperature), with intervals."""
    from screenlab.stats.ranking import DEFAULT_METRIC

    r = cache.ranking(ctx.path, ctx.read_only, ctx.version, ctx.campaign, ctx.settings_key, DEFAULT_METRIC,
                      None, 3)
    ranked = r[r["rank"].notna()].head(n)
    if ranked.empty:
        st.info("No candidate can be ranked yet.")
        return
    widgets.table(ranked, key="campaigns_best", columns=["rank", "catalyst", "estimate", "ci_low", "ci_high",
                                                         "rank_low", "rank_high", "p_best", "flags"])
    st.page_link("app_pages/ranking.py", label="Full ranking", icon=":material/leaderboard:")
