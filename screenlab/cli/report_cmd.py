"""``screenlab report --campaign NAME --out FILE.html [--decision N]``: one self-contained HTML file.

The report holds the campaign summary, the decision and its note, the ranking with intervals,
an Arrhenius plot of the shortlisted candidates, plate quality, flags in plain words, provenance
and the safety caution (see :mod:`screenlab.export.report`). It fetches nothing when opened and
prints cleanly to PDF from a browser. With a decision (``--decision N``, else the campaign's
latest current decision) the ranking uses that decision's metric, temperature, K, draws, seed and
analysis settings.
"""
from __future__ import annotations

from pathlib import Path

from screenlab.cli.common import add_store_option


def register(sub) -> None:
    r = sub.add_parser("report", help="write a self-contained HTML report of a campaign and its decision",
                       description="One HTML file that opens offline in any browser and prints to PDF: campaign "
                       "summary, the decision and its note, ranking with intervals, Arrhenius plot of the "
                       "shortlisted candidates, plate quality, flags in plain words, provenance (imports, file "
                       "hashes, settings, versions) and the safety caution.")
    r.add_argument("--campaign", metavar="NAME", required=True, help="campaign name in the store")
    r.add_argument("--out", metavar="FILE.html", required=True, help="the HTML file to write")
    r.add_argument("--decision", metavar="N", type=int, default=None,
                   help="the recorded decision to report (default: the campaign's latest current one, if any)")
    r.add_argument("--top", metavar="K", type=int, default=3,
                   help="without a decision: how many candidates count as shortlisted (default 3)")
    add_store_option(r)
    r.set_defaults(func=run_report)


def report_for(store, campaign: str, decision: int | None = None, *, top_k: int = 3) -> str:
    """The report's HTML for ``campaign`` in ``store`` (see the module docstring)."""
    from screenlab.errors import NotFoundError, UsageError
    from screenlab.export.report import campaign_report
    from screenlab.pipeline import analyse
    from screenlab.settings import AnalysisSettings
    from screenlab.stats.ranking import rank_candidates
    from screenlab.store import decisions as D

    names = store.campaign_names()
    if campaign not in names:
        raise NotFoundError(f"campaign {campaign!r} is not in {store.path} (stored: {', '.join(names) or 'none'})")
    listed = D.decisions(store, campaign)
    rec = rows = None
    if decision is not None:
        rec, rows = D.get_decision(store, decision)
        if rec["campaign"] != campaign:
            raise UsageError(f"--decision {decision} was made on campaign {rec['campaign']!r}, not on {campaign!r}")
    elif len(listed):
        current = listed[listed["status"] == "current"]
        if len(current):
            rec, rows = D.get_decision(store, int(current["decision"].iloc[-1]))
    data = store.load_campaign(campaign)
    if rec is not None:
        settings = AnalysisSettings.from_mapping(rec.get("settings") or {})
        a = analyse(data, settings)
        metric, temp = str(rec["metric"]), rec.get("temperature_c")
        temp = None if temp is None or temp != temp else float(temp)
        k = int(rec["top_k"]) if rec.get("top_k") is not None and rec["top_k"] == rec["top_k"] else top_k
        draws = int(rec["draws"]) if rec.get("draws") is not None and rec["draws"] == rec["draws"] else 10000
        seed = int(rec["seed"]) if rec.get("seed") is not None and rec["seed"] == rec["seed"] else 0
    else:
        a = analyse(data)
        metric, temp, k, draws, seed = "tof", None, top_k, 10000, 0
    ranking = rank_candidates(a.kinetics, a.quality, metric=metric, at_temperature_c=temp, top_k=k, draws=draws,
                              seed=seed, confidence=a.settings.confidence, catalysts=a.data.catalysts)
    if temp is None and metric in ("tof", "enhancement", "ton", "selectivity", "ee"):
        temp = a.settings.reference_temperature_c
    links = D.round_links(store)
    parent = None
    m = data.manifest
    if m.parent:
        parent = {"campaign": m.parent, "decision": m.decision, "record": None}
        if m.decision is not None:
            try:
                prec, _ = D.get_decision(store, m.decision)
                parent["record"] = prec
            except NotFoundError:
                pass
    children = links.loc[links["parent"].astype(object) == campaign, "campaign"].astype(str).tolist()
    return campaign_report(a, ranking, campaign=campaign, metric=metric, temperature_c=temp, top_k=k, decision=rec,
                           decision_rows=rows, imports=store.imports(campaign), files=store.import_files(campaign),
                           campaign_version=D.campaign_version(store, campaign), parent=parent, children=children)


def run_report(args) -> int:
    from screenlab.cli.decisions_cmd import _store
    from screenlab.errors import UsageError

    out = Path(args.out)
    if out.is_dir():
        raise UsageError(f"--out {out} is a folder; give the path of the .html file to write")
    if not out.parent.exists():
        raise UsageError(f"--out {out}: folder {out.parent} does not exist")
    if args.top < 1:
        raise UsageError(f"--top {args.top}: give at least 1")
    html = report_for(_store(args), args.campaign, args.decision, top_k=args.top)
    tmp = out.with_name(f".{out.name}.partial")
    tmp.write_text(html, encoding="utf-8")
    tmp.replace(out)
    print(f"{out} ({len(html.encode('utf-8')) / 1024:.0f} kB): report of {args.campaign}")
    return 0
