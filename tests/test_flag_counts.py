"""screenlab.flags.flag_counts: rows per flag code at each level (the Campaigns page's table)."""
from __future__ import annotations

from collections import Counter

import numpy as np
import pandas as pd

from screenlab.flags import analysis_flag_counts, flag_counts


def test_counts_equal_a_plain_counter():
    # reference: collections.Counter over the ';'-split codes of each level (plain Python)
    wells = pd.Series(["a;b", "", None, "b", "b;c;", np.nan, "a"])
    plates = pd.Series(["", "z"])
    got = flag_counts({"well": wells, "plate": plates, "none": pd.Series(["", None])})
    for level, s in (("well", wells), ("plate", plates)):
        ref = Counter(code for v in s if isinstance(v, str) for code in v.split(";") if code)
        part = got[got["level"] == level]
        assert dict(zip(part["flag"], part["rows"])) == dict(ref)
        assert list(part["rows"]) == sorted(part["rows"], reverse=True)  # by count within a level
    assert list(dict.fromkeys(got["level"])) == ["well", "plate"]  # levels in the order given
    assert "none" not in set(got["level"])


def test_no_flags_gives_the_empty_table():
    out = flag_counts({"well": pd.Series([""]), "plate": pd.Series([], dtype=object)})
    assert list(out.columns) == ["level", "flag", "rows"] and out.empty


def test_analysis_levels(demo_store):
    from screenlab.pipeline import analyse
    from screenlab.store import Store

    a = analyse(Store(demo_store, read_only=True).load_campaign("th-screen-2026"))
    got = analysis_flag_counts(a)
    assert list(dict.fromkeys(got["level"])) == [lvl for lvl, s in (
        ("well", a.kinetics.wells), ("group", a.kinetics.rates), ("plate", a.quality),
        ("Arrhenius fit", a.kinetics.arrhenius)) if s["flags"].fillna("").astype(str).str.len().gt(0).any()]
    # reference: the wells whose split flags contain "ton_capped" (plain pandas, no source needed)
    n = int(a.kinetics.wells["flags"].fillna("").astype(str).str.split(";").map(lambda c: "ton_capped" in c).sum())
    row = got[(got["level"] == "well") & (got["flag"] == "ton_capped")]
    assert int(row["rows"].iloc[0]) == n and n > 0
