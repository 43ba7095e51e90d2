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
