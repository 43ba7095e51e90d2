"""``screenlab decisions``: the recorded decisions (shortlists with their notes), and the recording
step of ``screenlab shortlist --note TEXT``.

decisions  one row per decision: number, campaign, time (UTC), author, metric, temperature, the
           chosen catalysts in order, the note, what it supersedes and what superseded it, and
           whether the campaign's data changed since (``--decision N``: its catalysts with the
           estimates and intervals recorded then)
"""
from __future__ import annotations

import json

from screenlab.cli.common import add_format_option, add_store_option, emit, resolve_store_path

#: the table view (the csv and json views have every column)
TABLE_COLUMNS = ["decision", "campaign", "created_at", "author", "metric", "temperature_c", "catalysts", "note",
                 "supersedes", "status", "on_current_data"]
DETAIL_COLUMNS = ["position", "catalyst", "name", "role", "estimate_text", "estimate", "ci_low", "ci_high", "unit",
                  "censored", "rank", "rank_low", "rank_high", "p_top", "p_best", "p_beats_reference", "basis", "flags"]


def register(sub) -> None:
    d = sub.add_parser("decisions", help="list the recorded decisions (shortlists with their notes)",
                       description="One row per recorded decision (screenlab shortlist --note, or the app's "
                       "Shortlist page): who chose which catalysts from which ranking, when (UTC), with the note, "
                       "the decision it supersedes and whether the campaign's data changed since. Decisions are "
                       "never edited; a changed mind is a new decision (--supersedes N).")
    d.add_argument("--campaign", metavar="NAME", default=None, help="only the decisions on this campaign")
    d.add_argument("--decision", metavar="N", type=int, default=None,
                   help="show one decision's catalysts with the estimates and intervals recorded then")
    add_format_option(d)
    add_store_option(d)
    d.set_defaults(func=run_decisions)


def add_record_options(p) -> None:
    """The recording options of ``screenlab shortlist``."""
    p.add_argument("--note", metavar="TEXT", default=None,
                   help="record this shortlist as a decision in the store, with this note (why these catalysts); "
                        "without --note nothing is recorded")
    p.add_argument("--author", metavar="NAME", default=None,
                   help="who decides (default: the operating-system user name)")
    p.add_argument("--supersedes", metavar="N", type=int, default=None,
                   help="the recorded decision this one replaces (a changed mind; the old one stays as it was)")


def _store(args, read_only: bool = True):
    from pathlib import Path

    from screenlab.errors import UsageError
    from screenlab.store import Store

    path = resolve_store_path(args.store)
    if not Path(path).exists():
        raise UsageError(f"store {path} does not exist; import a campaign first with 'screenlab ingest PATH'")
    return Store(path, read_only=read_only)


def run_decisions(args) -> int:
    from screenlab.errors import NotFoundError
    from screenlab.stats.bounds import estimate_texts
    from screenlab.store import decisions as D

    store = _store(args)
    if args.campaign is not None and args.campaign not in store.campaign_names():
        known = ", ".join(store.campaign_names()) or "none"
        raise NotFoundError(f"campaign {args.campaign!r} is not in {store.path} (stored: {known})")
    if args.decision is not None:
        rec, rows = D.get_decision(store, args.decision)
        rows = rows.assign(estimate_text=estimate_texts(rows, "estimate", "ci_low", "ci_high"))
        if args.format == "json":
            out = {k: v for k, v in rec.items()}
            out["created_at"] = _utc(rec["created_at"])
            out["chosen"] = _records(rows[DETAIL_COLUMNS])
            _dump(out)
            return 0
        if args.format == "table":
            print(f"decision {rec['decision']} on {rec['campaign']} by {rec['author']} at {_utc(rec['created_at'])} "
                  f"({rec['status']}{'' if rec['on_current_data'] else '; the campaign changed since'})")
            print(f"note: {rec['note']}")
        emit(rows[DETAIL_COLUMNS], args.format)
        return 0
    frame = D.decisions(store, args.campaign)
    if args.format == "json":
        cats = D.decision_catalysts(store, args.campaign)
        cats = cats.assign(estimate_text=estimate_texts(cats, "estimate", "ci_low", "ci_high"))
        out = []
        for rec in frame.to_dict(orient="records"):  # one per decision
            rec["created_at"] = _utc(rec["created_at"])
            rec["chosen"] = _records(cats.loc[cats["decision"] == rec["decision"], DETAIL_COLUMNS])
            out.append(rec)
        _dump(out)
        return 0
    frame = frame.copy()
    fmt = "%Y-%m-%d %H:%M" if args.format == "table" else "%Y-%m-%dT%H:%M:%SZ"
    if len(frame):
        frame["created_at"] = frame["created_at"].dt.strftime(fmt)
    if args.format == "table":
        frame = frame[TABLE_COLUMNS]
    else:
        frame["constraints"] = frame["constraints"].map(lambda d: json.dumps(d, sort_keys=True))
        frame["settings"] = frame["settings"].map(lambda d: json.dumps(d, sort_keys=True))
    emit(frame, args.format)
    return 0


def _utc(v) -> str:
    import pandas as pd

    return "" if v is None or v is pd.NA else pd.Timestamp(v).strftime("%Y-%m-%dT%H:%M:%SZ")


def _records(frame) -> list[dict]:
    import math

    from screenlab.cli.common import _plain

    return [{k: (None if isinstance(v, float) and not math.isfinite(v) else _plain(v)) for k, v in r.items()}
            for r in frame.to_dict(orient="records")]


def _dump(obj) -> None:
    import math
    import sys

    from screenlab.cli.common import _plain

    def clean(v):
        if isinstance(v, dict):
            return {k: clean(x) for k, x in v.items()}
        if isinstance(v, (list, tuple)):
            return [clean(x) for x in v]
        v = _plain(v)
        return None if isinstance(v, float) and not math.isfinite(v) else v

    json.dump(clean(obj), sys.stdout, indent=1, default=str)
    sys.stdout.write("\n")


def record_shortlist(args, analysis, ranking, picks, version: str, *, next_round_temperatures=None):
    """Record ``picks`` of ``ranking`` as a decision (``screenlab shortlist --note``); returns the
    :class:`~screenlab.store.decisions.RecordedDecision`."""
    from screenlab.export.decision import draft_decision
    from screenlab.store import decisions as D

    temps = next_round_temperatures
    mc = ranking.attrs.get("monte_carlo") or {}
    draws = getattr(args, "draws", None) or mc.get("draws")
    constraints = {"next_round_temperatures_c": temps, "next_round_replicates": args.replicates,
                   "require": list(ranking.attrs.get("requirements", [])),
                   "enantiomer": getattr(args, "enantiomer", None) or "",
                   "include_transport_limited": bool(getattr(args, "include_transport_limited", False)),
                   "order": ranking.attrs.get("direction", ""), "monte_carlo_se": mc.get("mc_se")}
    draft = draft_decision(ranking, picks, campaign=args.campaign, note=args.note, author=args.author,
                           settings=analysis.settings, top_k=args.top, draws=draws, seed=args.seed,
                           catalysts=analysis.data.catalysts, supersedes=args.supersedes, campaign_version=version,
                           constraints=constraints)
    return D.record_decision(_store(args, read_only=False), draft)
