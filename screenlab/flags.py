"""Every flag code ScreenLab sets, with one plain sentence each (for the app, exports and docs).

Each module that sets flags owns a module-level ``FLAGS`` dict; this module only gathers them
(:func:`flag_help`) and counts them (:func:`flag_counts`, :func:`analysis_flag_counts`).
"""
from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    import pandas as pd

_FLAG_MODULES = (
    "screenlab.kinetics.rates",
    "screenlab.kinetics.turnover",
    "screenlab.kinetics.arrhenius",
    "screenlab.kinetics.orders",
    "screenlab.stats.quality",
    "screenlab.stats.candidates",
)


def flag_help() -> dict[str, str]:
    """code -> sentence, over every module that defines ``FLAGS``."""
    out: dict[str, str] = {}
    for name in _FLAG_MODULES:
        out.update(getattr(importlib.import_module(name), "FLAGS", {}))
    return out



def flag_counts(sources) -> "pd.DataFrame":
    """How many rows of each kind carry each flag code: ``{level: flags column}`` ->
    ``level, flag, rows`` (levels in the order given, codes by count within a level)."""
    import pandas as pd

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


def analysis_flag_counts(analysis) -> "pd.DataFrame":
    """:func:`flag_counts` of a :class:`screenlab.pipeline.Analysis` at each level: wells, groups,
    plates and Arrhenius fits."""
    kin = analysis.kinetics
    return flag_counts({"well": kin.wells["flags"], "group": kin.rates["flags"], "plate": analysis.quality["flags"],
                        "Arrhenius fit": kin.arrhenius["flags"]})
