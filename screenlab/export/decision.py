"""A decision as it is about to be recorded: the chosen catalysts of a ranking, with the settings behind it.

:func:`draft_decision` turns a ranking (:func:`screenlab.stats.ranking.rank_candidates`) and the
catalysts a team lead picked into a :class:`DecisionDraft`; the store writes it with
:func:`screenlab.store.decisions.record_decision` (never edited afterwards). The same draft feeds
the report (:mod:`screenlab.export.report`) before it is recorded.

Censored estimates: when the ranking carries a ``censored`` column (``lower`` / ``upper``: the
estimate is only a bound), it is kept with each chosen row; without it every row is measured ("").
"""
from __future__ import annotations

import getpass
import os
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from screenlab.errors import UsageError

#: columns of :attr:`DecisionDraft.catalysts` (as the store keeps them)
DRAFT_COLUMNS = ["position", "catalyst", "name", "role", "estimate", "ci_low", "ci_high", "unit", "censored", "rank",
                 "rank_low", "rank_high", "p_top", "p_best", "p_beats_reference", "n", "temperature_c", "basis",
                 "flags"]


def default_author() -> str:
    """The OS user name (``getpass.getuser``), else ``$USER`` / ``$USERNAME``, else "unknown"."""
    try:
        name = getpass.getuser()
    except (KeyError, OSError, ImportError):  # no passwd entry (containers), no pwd module
        name = os.environ.get("USER") or os.environ.get("USERNAME") or ""
    return name.strip() or "unknown"


@dataclass(frozen=True)
class DecisionDraft:
    """Everything a recorded decision holds except its number and time (given by the store).

    ``catalysts`` has :data:`DRAFT_COLUMNS`: the chosen catalysts with ``position`` 1..k in the
    order chosen, then the benchmark row(s) with ``position`` missing (kept for comparison), each
    with the ranking's estimate, interval, rank interval and probabilities at this moment.
    ``temperature_c`` is the ranking temperature (None for a metric without one, e.g. Ea);
    ``campaign_version`` the version hash the analysis was made on (the store refuses to record
    when the campaign changed since).
    """

    campaign: str
    author: str
    metric: str
    temperature_c: float | None
    top_k: int
    draws: int
    seed: int
    note: str
    catalysts: pd.DataFrame
    constraints: dict = field(default_factory=dict)
    settings: dict = field(default_factory=dict)
    supersedes: int | None = None
    campaign_version: str | None = None

    @property
    def chosen(self) -> list[str]:
        """The chosen catalyst ids, in order (no benchmark)."""
        c = self.catalysts
        return c.loc[pd.to_numeric(c["position"], errors="coerce").notna(), "catalyst"].astype(str).tolist()


def draft_decision(ranking: pd.DataFrame, picked, *, campaign: str, note: str, author: str | None = None,
                   settings=None, top_k: int, draws: int, seed: int, catalysts: pd.DataFrame | None = None,
                   supersedes: int | None = None, campaign_version: str | None = None,
                   constraints: dict | None = None) -> DecisionDraft:
    """The decision to choose ``picked`` (catalyst ids, in the order chosen) from ``ranking``.

    Every pick must be a ranked candidate that is not the benchmark (UsageError otherwise). The
    constraints recorded are ``top_k``, ``selection`` ("top K of the ranking" when the picks are
    exactly the K best ranked candidates, else "picked by hand"), ``passed_over`` (ranked
    candidates placed above the lowest pick that were not chosen), ``benchmark_excluded``,
    ``unrankable`` (how many candidates the ranking could not place), plus ``constraints``.
    ``settings`` is the :class:`~screenlab.settings.AnalysisSettings` used (or a dict).
    """
    if ranking.empty:
        raise UsageError("the ranking is empty: nothing to decide")
    picked = [str(p) for p in dict.fromkeys(picked)]
    if not picked:
        raise UsageError("pick at least one catalyst")
    r = ranking.assign(catalyst=ranking["catalyst"].astype(str))
    ranked = r[r["rank"].notna()]
    role = ranked["role"].astype(str)
    cands = ranked[role != "reference"]
    bad = [p for p in picked if p not in set(cands["catalyst"])]
    if bad:
        why = []
        refs = set(ranked.loc[role == "reference", "catalyst"])
        for p in bad:
            if p in refs:
                why.append(f"{p} is the benchmark")
            elif p in set(r["catalyst"]):
                reason = r.loc[r["catalyst"] == p, "reason"].astype(str).iloc[0] if "reason" in r else ""
                why.append(f"{p} is not ranked ({reason or 'no estimate'})")
            else:
                why.append(f"{p} is not a catalyst of campaign {campaign!r}")
        raise UsageError("cannot choose " + "; ".join(why))
    chosen = cands.set_index("catalyst").loc[picked].reset_index()
    chosen.insert(0, "position", np.arange(1, len(chosen) + 1))
    bench = ranked[role == "reference"].assign(position=pd.NA)
    rows = pd.concat([chosen, bench], ignore_index=True)
    if "censored" not in rows:
        rows["censored"] = ""
    rows["censored"] = rows["censored"].fillna("").astype(str)
    if catalysts is not None and "name" in catalysts:
        names = catalysts.assign(catalyst=catalysts["catalyst"].astype(str)).drop_duplicates("catalyst")
        rows["name"] = rows["catalyst"].map(names.set_index("catalyst")["name"])
    else:
        rows["name"] = pd.NA
    for c in DRAFT_COLUMNS:
        if c not in rows:
            rows[c] = pd.NA
    rows = rows[DRAFT_COLUMNS]

    order = cands["catalyst"].tolist()
    lowest = max(order.index(p) for p in picked)
    passed = [c for c in order[: lowest + 1] if c not in set(picked)]
    k = int(top_k)
    cons = {"top_k": k,
            "selection": "top K of the ranking" if picked == order[: len(picked)] and len(picked) == min(k, len(order))
            else "picked by hand",
            "passed_over": passed, "benchmark_excluded": True,
            "unrankable": int(ranking["rank"].isna().sum())}
    cons.update(constraints or {})
    metric = str(ranking["metric"].iloc[0]) if "metric" in ranking else ""
    from screenlab.stats.candidates import METRICS

    t = None
    m = METRICS.get(metric)
    if m is not None and m.source == "rates":
        ts = pd.to_numeric(ranking.loc[ranking["rank"].notna(), "temperature_c"], errors="coerce").dropna()
        t = float(ts.iloc[0]) if len(ts) else None
    sdict = settings.to_dict() if hasattr(settings, "to_dict") else dict(settings or {})
    return DecisionDraft(campaign=campaign, author=(author or "").strip() or default_author(), metric=metric,
                         temperature_c=t, top_k=k, draws=int(draws), seed=int(seed), note=str(note or "").strip(),
                         catalysts=rows.reset_index(drop=True), constraints=cons, settings=sdict,
                         supersedes=supersedes, campaign_version=campaign_version)


__all__ = ["DRAFT_COLUMNS", "DecisionDraft", "default_author", "draft_decision"]
