"""``screenlab quality``, ``screenlab rank`` and ``screenlab shortlist``.

quality    one row per plate: Z', replicate CVs, blank trend, edge effect, control chart, status
rank       candidates ranked by TOF, enhancement, Ea or TON with rank intervals and P(best)
           (``--pareto``: the Pareto set over TOF, enhancement and Ea instead)
shortlist  the top K as CSV / XLSX / Parquet plus a next-round campaign folder; with ``--note`` the
           shortlist is also recorded in the store as a decision (see ``screenlab decisions``)
"""
from __future__ import annotations

import math
import sys
from pathlib import Path

from screenlab import schema
from screenlab.cli.common import add_format_option, add_store_option, emit

# the columns the commands print, checked against the frames' schemas (screenlab.schema)
QUALITY_COLUMNS = schema.QUALITY.pick([
    "plate", "temperature_c", "n_sample", "n_reference", "n_blank", "zprime", "replicate_cv_median_pct",
    "reference_cv_pct", "blank_ratio", "blank_z", "edge_basis", "edge_p", "edge_shift_pct", "bscore_max_abs",
    "reference_loo_t", "status", "flags"])
RANK_TABLE_COLUMNS = schema.RANKING.pick([
    "rank", "catalyst", "role", "family", "estimate", "ci_low", "ci_high", "unit", "rank_low", "rank_high", "p_top",
    "p_best", "p_beats_reference", "n", "basis", "flags", "reason"])
METRIC_CHOICES = ("tof", "enhancement", "ea", "ton", "selectivity", "ee")


def _campaign(p) -> None:
    p.add_argument("--campaign", metavar="NAME", required=True, help="campaign name in the store")
    add_store_option(p)


def _ranking_options(p, *, top_required: bool = False) -> None:
    p.add_argument("--at-temperature", metavar="C", type=float, default=None,
                   help="temperature (degC) at which TOF, TON and enhancement are compared "
                        "(default: the campaign's reference temperature)")
    p.add_argument("--top", metavar="K", type=int, default=None if top_required else 5, required=top_required,
                   help="how many candidates count as the top (p_top)" + ("" if top_required else "; default 5"))
    p.add_argument("--draws", metavar="N", type=int, default=10000,
                   help="random draws from each candidate's sampling distribution (default 10000)")
    p.add_argument("--seed", metavar="S", type=int, default=0, help="random seed (default 0)")


def register(sub) -> None:
    q = sub.add_parser("quality", help="plate quality: Z', replicate CVs, blank trend, edge effect, control chart",
                       description="One row per plate: Z'-factor between benchmark and blank wells, replicate CVs, "
                       "the blank against the campaign's blank Arrhenius line, the edge-versus-interior test, the "
                       "benchmark's control chart and a status (ok, flagged, failed).")
    _campaign(q)
    add_format_option(q)
    q.add_argument("--chart", action="store_true", help="print the benchmark's control chart instead")
    q.set_defaults(func=run_quality)

    r = sub.add_parser("rank", help="rank candidates with their uncertainty (rank intervals, P(best))",
                       description="Draws from each candidate's sampling distribution (log-normal for TOF, "
                       "enhancement and TON; t for Ea), ranks every draw, and reports the rank interval, "
                       "P(top K) and P(best). Unrankable candidates are listed last with the reason.")
    _campaign(r)
    r.add_argument("--metric", choices=METRIC_CHOICES, default="tof", help="ranking metric (default tof)")
    _ranking_options(r)
    add_format_option(r)
    r.add_argument("--pareto", action="store_true",
                   help="show the Pareto set over TOF, enhancement and Ea (with P(on the front))")
    r.set_defaults(func=run_rank)

    s = sub.add_parser("shortlist", help="write the top K as CSV/XLSX/Parquet and lay out the next-round plates",
                       description="Writes shortlist.csv, shortlist.xlsx (kinetics per temperature, provenance, "
                       "safety), shortlist.parquet and SAFETY.txt in --out, and a next-round campaign folder in "
                       "--out/next-round (candidates in replicate over a temperature series, a loading series, "
                       "benchmark and blanks on every plate, outer ring left empty). With --note the shortlist is "
                       "also recorded in the store as a decision (screenlab decisions lists it) and the next "
                       "round's campaign.toml names it.")
    _campaign(s)
    s.add_argument("--by", metavar="METRIC", choices=METRIC_CHOICES, default="tof", help="ranking metric (default tof)")
    _ranking_options(s, top_required=True)
    s.add_argument("--out", metavar="DIR", required=True, help="output folder (created if needed)")
    s.add_argument("--temperatures", metavar="C", nargs="+", default=None,
                   help="next-round temperature series, degC (e.g. 50 60 70 or 50,60,70; default: the campaign's)")
    s.add_argument("--replicates", metavar="N", type=int, default=3, help="wells per candidate and condition (default 3)")
    s.add_argument("--format-wells", dest="plate_format", metavar="N", type=int, default=96,
                   choices=(24, 48, 96, 384), help="next-round plate format (default 96)")
    from screenlab.cli.decisions_cmd import add_record_options

    add_record_options(s)
    s.set_defaults(func=run_shortlist)


def _check(args) -> None:
    from screenlab.errors import UsageError

    if getattr(args, "top", None) is not None and args.top < 1:
        raise UsageError(f"--top {args.top}: give at least 1")
    if getattr(args, "draws", 1) < 1:
        raise UsageError(f"--draws {args.draws}: give at least 1")
    t = getattr(args, "at_temperature", None)
    if t is not None and (not math.isfinite(t) or t <= -273.15):
        raise UsageError(f"--at-temperature {t}: not a temperature in degC")


def _load(args, *, history: bool = False):
    """Load and analyse the campaign; with ``history`` also its import records and file hashes."""
    from screenlab.cli.common import load_stored_campaign
    from screenlab.pipeline import analyse

    _check(args)
    data, imports, files = load_stored_campaign(args.store, args.campaign, history=history)
    return analyse(data), imports, files


def run_quality(args) -> int:
    a, _, _ = _load(args)
    if args.chart:
        emit(a.control, args.format)
    else:
        emit(a.quality[[c for c in QUALITY_COLUMNS if c in a.quality]], args.format)
    return 0


def _rank(a, metric, args):
    from screenlab.stats.ranking import rank_candidates

    return rank_candidates(a.kinetics, a.quality, metric=metric, at_temperature_c=args.at_temperature,
                           top_k=args.top, draws=args.draws, seed=args.seed, confidence=a.settings.confidence,
                           catalysts=a.data.catalysts)


def run_rank(args) -> int:
    a, _, _ = _load(args)
    if args.pareto:
        from screenlab.stats.ranking import pareto

        emit(pareto(a.kinetics, a.quality, at_temperature_c=args.at_temperature, draws=min(args.draws, 5000),
                    seed=args.seed, confidence=a.settings.confidence, catalysts=a.data.catalysts), args.format)
        return 0
    r = _rank(a, args.metric, args)
    emit(r[RANK_TABLE_COLUMNS] if args.format == "table" else r, args.format)
    return 0


def _temperatures(words) -> list[float] | None:
    from screenlab.errors import UsageError

    if not words:
        return None
    out = []
    for w in words:
        for part in str(w).split(","):
            if not part.strip():
                continue
            try:
                t = float(part)
            except ValueError:
                raise UsageError(f"--temperatures: {part!r} is not a number (degC)") from None
            if not math.isfinite(t) or t <= -273.15:
                raise UsageError(f"--temperatures: {part!r} is not a temperature in degC")
            out.append(t)
    return out or None


def run_shortlist(args) -> int:
    from screenlab.errors import UsageError
    from screenlab.export.nextround import design_next_round
    from screenlab.export.shortlist import write_shortlist
    from screenlab.stats.ranking import pareto

    temps = _temperatures(args.temperatures)
    if args.replicates < 1:
        raise UsageError(f"--replicates {args.replicates}: give at least 1")
    record = args.note is not None
    if not record and (args.author is not None or args.supersedes is not None):
        raise UsageError("--author and --supersedes go with --note (recording the decision)")
    if record and not args.note.strip():
        raise UsageError("--note: give a note saying why these catalysts (it is kept with the decision)")
    version = None
    if record:  # the version the analysis is made on: the store refuses to record if it changes meanwhile
        from screenlab.cli.decisions_cmd import _store
        from screenlab.store.decisions import campaign_version

        version = campaign_version(_store(args, read_only=False), args.campaign)
    a, imports, files = _load(args, history=True)
    r = _rank(a, args.by, args)
    picks = r[r["rank"].notna() & (r["role"] != "reference")]["catalyst"].head(args.top).tolist()
    if not picks:
        raise UsageError(f"no candidate of {args.campaign!r} can be ranked by {args.by}; see 'screenlab rank'")
    front = pareto(a.kinetics, a.quality, at_temperature_c=args.at_temperature, draws=min(args.draws, 2000),
                   seed=args.seed, confidence=a.settings.confidence, catalysts=a.data.catalysts)
    out = Path(args.out)
    try:  # before anything is recorded: a folder that cannot be written stops here
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise UsageError(f"--out {out}: cannot write there ({exc.strerror or exc})") from None
    t_rank = args.at_temperature if args.at_temperature is not None else a.settings.reference_temperature_c
    recorded = None
    if record:
        from screenlab.cli.decisions_cmd import record_shortlist

        recorded = record_shortlist(args, a, r, picks, version, next_round_temperatures=temps)
    options = {"at_temperature_c": t_rank, "draws": args.draws, "seed": args.seed}
    if recorded is not None:
        options.update({"decision": recorded.decision, "note": args.note.strip(),
                        "campaign_version": recorded.campaign_version})
    paths = write_shortlist(out, r, a.kinetics, campaign=args.campaign, top_k=args.top, catalysts=a.data.catalysts,
                            quality=a.quality, pareto=front, imports=imports, import_files=files, options=options)
    folder = design_next_round(out / "next-round", a.data, picks, temperatures_c=temps, replicates=args.replicates,
                               fmt=args.plate_format, seed=args.seed,
                               decision=None if recorded is None else recorded.decision)
    for p in paths.values():
        print(p)
    print(folder)
    if recorded is not None:
        print(recorded.message + f"; the next round names it in campaign.toml ([campaign] decision = "
              f"{recorded.decision})")
    if len(picks) < args.top:
        print(f"note: only {len(picks)} candidates could be ranked (asked for {args.top})", file=sys.stderr)
    return 0
