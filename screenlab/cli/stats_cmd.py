"""``screenlab quality``, ``screenlab rank`` and ``screenlab shortlist``.

quality    one row per plate: Z' (or, without a benchmark, the robust Z' / SSMD of the upper-quartile
           sample wells against the blanks), replicate CVs, blank trend, edge effect, control chart, status
rank       candidates ranked by TOF, enhancement, Ea, TON, selectivity or ee with rank intervals and
           P(best), optionally under --require constraints (``--pareto``: the Pareto set instead)
shortlist  the top K as CSV / XLSX / Parquet plus a next-round campaign folder; with ``--note`` the
           shortlist is also recorded in the store as a decision (see ``screenlab decisions``)
"""
from __future__ import annotations

import argparse
import math
import sys
from pathlib import Path

from screenlab import schema
from screenlab.cli.common import add_format_option, add_store_option, emit

# the columns the commands print, checked against the frames' schemas (screenlab.schema)
QUALITY_COLUMNS = schema.QUALITY.pick([
    "plate", "temperature_c", "n_sample", "n_reference", "n_blank", "zprime", "robust_zprime", "ssmd",
    "blank_lod_mM_per_h", "sample_active_pct", "replicate_cv_median_pct", "reference_cv_pct", "blank_ratio", "blank_z",
    "edge_basis", "edge_p", "edge_shift_pct", "bscore_max_abs", "reference_loo_t", "status", "flags"])
RANK_TABLE_COLUMNS = schema.RANKING.pick([
    "rank", "catalyst", "role", "family", "estimate", "ci_low", "ci_high", "censored", "unit", "favours", "rank_low",
    "rank_high", "p_top", "p_best", "p_beats_reference", "n", "basis", "flags", "reason"])
METRIC_CHOICES = ("tof", "enhancement", "ea", "ton", "selectivity", "ee")

RANK_EPILOG = """\
metrics and what comes first:
  tof, enhancement, ton, selectivity   higher first
  ee                                   larger excess first, either enantiomer (|ee|); the column
                                       'favours' names the enantiomer in excess. --enantiomer NAME
                                       ranks by the (signed) excess of that enantiomer instead.
  ea                                   lower apparent barrier first. A low *apparent* Ea is not a
                                       better catalyst when the reaction runs into mass transport:
                                       diffusion has an apparent Ea of only ~10-20 kJ/mol, so a
                                       catalyst fast enough to be transport-limited shows a low Ea
                                       whatever its own barrier. Candidates flagged low_ea (below
                                       [analysis].low_ea_kj_mol, default 20) are listed after the
                                       others with that reason; --include-transport-limited ranks them.

--require EXPR (repeatable): COLUMN>=VALUE or COLUMN<=VALUE on a numeric column of the rates table
  (e.g. selectivity_pct>=90, ee_pct>=80, ton>=50), judged on each candidate's interval: clearly
  outside -> listed after the ranked ones with the reason; straddling -> ranked and flagged
  constraint_uncertain. P(top K) and P(best) are over the candidates that remain.

Bounds: a rate the readings cannot resolve is shown as a bound (censored lower: '>= x', faster
than the first reading allows; upper: '<= x', not distinguishable from the blank), never as a
value with an interval, and is not given P(best) or P(top K).

The benchmark is ranked with the candidates, so it takes one of the K places of P(top K); the
shortlist leaves it out, so its K-th pick can be a candidate ranked just below the benchmark with a
low P(top K).
"""


def _campaign(p) -> None:
    p.add_argument("--campaign", metavar="NAME", required=True, help="campaign name in the store")
    add_store_option(p)


def _ranking_options(p, *, top_required: bool = False) -> None:
    p.add_argument("--at-temperature", metavar="C", type=float, default=None,
                   help="temperature (degC) at which TOF, TON and enhancement are compared "
                        "(default: the campaign's reference temperature)")
    p.add_argument("--top", metavar="K", type=int, default=None if top_required else 5, required=top_required,
                   help="how many candidates count as the top (p_top)" + ("" if top_required else "; default 5"))
    p.add_argument("--draws", metavar="N", type=int, default=None,
                   help="exactly N draws from each candidate's sampling distribution, every candidate ranked in "
                        "each (default: as many as needed for a Monte Carlo SE below 0.005 on every probability "
                        "and stable rank bounds)")
    p.add_argument("--seed", metavar="S", type=int, default=0, help="random seed (default 0)")
    p.add_argument("--require", metavar="EXPR", action="append", default=[],
                   help="keep only candidates meeting COLUMN>=VALUE or COLUMN<=VALUE on the rates table, judged on "
                        "their interval (repeatable; e.g. selectivity_pct>=90)")
    p.add_argument("--enantiomer", metavar="NAME", default=None,
                   help="with the ee metric: rank by the excess of this enantiomer (a name from the campaign's "
                        "[analytes] enantiomers) instead of by |ee|")
    p.add_argument("--include-transport-limited", action="store_true",
                   help="with the ea metric: rank candidates flagged low_ea (likely transport-controlled) with the "
                        "others instead of listing them after")


def register(sub) -> None:
    q = sub.add_parser("quality", help="plate quality: Z', replicate CVs, blank trend, edge effect, control chart",
                       description="One row per plate: Z'-factor between benchmark and blank wells, the robust Z' "
                       "and SSMD of the upper-quartile sample wells against the blanks, the blanks' detection limit, "
                       "replicate CVs, the blank against the campaign's blank Arrhenius line, the edge-versus-interior "
                       "test, the benchmark's control chart and a status (ok, flagged, unchecked = no benchmark, "
                       "judged on the rest; failed = Z' below 0 or no usable blanks).")
    _campaign(q)
    add_format_option(q)
    q.add_argument("--chart", action="store_true", help="print the benchmark's control chart instead")
    q.set_defaults(func=run_quality)

    r = sub.add_parser("rank", help="rank candidates with their uncertainty (rank intervals, P(best))",
                       description="Draws from each candidate's sampling distribution (log-normal for TOF, "
                       "enhancement and TON; t for Ea, selectivity and ee), ranks the draws, and reports the rank "
                       "interval, P(top K) and P(best), with the number of draws and the largest Monte Carlo error. "
                       "Unrankable candidates are listed after the ranked ones with the reason.",
                       epilog=RANK_EPILOG, formatter_class=argparse.RawDescriptionHelpFormatter)
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
    if getattr(args, "require", None):
        from screenlab.stats.constraints import check_syntax

        for expr in args.require:
            check_syntax(expr)
    if getattr(args, "draws", None) is not None and args.draws < 1:
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
        from screenlab.stats.quality import blank_trend_gaps

        gaps = blank_trend_gaps(a.kinetics, a.quality)
        for why, plates in gaps.groupby("reason", sort=False)["plate"]:   # a line per reason
            print(f"blank trend not checked on {', '.join(plates)}: {why}",
                  file=sys.stdout if args.format == "table" else sys.stderr)
    return 0


def _rank(a, metric, args):
    from screenlab.stats.ranking import rank_candidates

    return rank_candidates(a.kinetics, a.quality, metric=metric, at_temperature_c=args.at_temperature,
                           top_k=args.top, draws=args.draws, seed=args.seed, confidence=a.settings.confidence,
                           catalysts=a.data.catalysts, enantiomers=a.data.manifest.enantiomers,
                           enantiomer=args.enantiomer, include_transport_limited=args.include_transport_limited,
                           require=args.require)


def _check_metric_options(args, metric: str) -> None:
    from screenlab.errors import UsageError

    if args.enantiomer is not None and metric != "ee":
        raise UsageError("--enantiomer applies to the ee metric only (use --metric ee)")
    if args.include_transport_limited and metric != "ea":
        raise UsageError("--include-transport-limited applies to the ea metric only (use --metric ea)")


def ranking_for_reading(r):
    """The ranking as a fixed-width table: bounds as '>= x' / '<= x' with empty intervals, the
    favoured enantiomer only for ee."""
    from screenlab.export.display import show_bounds

    unit = str(r["unit"].iloc[0]) if len(r) else ""
    t = show_bounds(r, "estimate", "ci_low", "ci_high", unit=unit, text_only=True)
    cols = [c for c in RANK_TABLE_COLUMNS if c in t]
    if not (t["favours"].astype(str) != "").any():
        cols.remove("favours")
    if not (t["censored"].astype(str) != "").any():
        cols.remove("censored")
    return t[cols]


def mc_note(r) -> str:
    """One line on what came first and how many draws stand behind the numbers."""
    mc = r.attrs.get("monte_carlo") or {}
    parts = [f"order: {r.attrs.get('direction', '')}"]
    t_rank = r.attrs.get("temperature_c")
    if t_rank is not None and math.isfinite(float(t_rank)):
        parts[0] += f" at {float(t_rank):g} degC"
    if r.attrs.get("requirements"):
        parts.append("required: " + ", ".join(r.attrs["requirements"]))
    if mc.get("draws"):
        txt = f"{mc['draws']:,} draws ({mc['draws_ranked']:,} ranking every candidate)"
        txt += f", largest Monte Carlo SE of a probability {mc['mc_se']:.4f}"
        if mc.get("mc_se_target"):
            txt += f" (target {mc['mc_se_target']:g})"
        if mc.get("rank_bound_halfwidth") is not None:
            txt += f", rank bounds stable for {100 * mc.get('rank_bound_stable_share', 1.0):.1f} % of candidates"
        parts.append(txt)
    return "; ".join(parts)


def run_rank(args) -> int:
    a, _, _ = _load(args)
    if args.pareto:
        from screenlab.stats.pareto import pareto

        if args.enantiomer is not None:
            from screenlab.errors import UsageError

            raise UsageError("--enantiomer does not apply to --pareto (the Pareto view takes ee by magnitude)")
        emit(pareto(a.kinetics, a.quality, at_temperature_c=args.at_temperature,
                    draws=min(args.draws or 5000, 5000), seed=args.seed, confidence=a.settings.confidence,
                    catalysts=a.data.catalysts, require=args.require, enantiomers=a.data.manifest.enantiomers,
                    include_transport_limited=args.include_transport_limited), args.format)
        return 0
    _check_metric_options(args, args.metric)
    r = _rank(a, args.metric, args)
    if args.format == "table":
        emit(ranking_for_reading(r), args.format)
        print(mc_note(r))
    else:
        from screenlab.export.display import show_bounds

        emit(show_bounds(r, "estimate", "ci_low", "ci_high", unit=str(r["unit"].iloc[0]) if len(r) else "",
                         text="shown"), args.format)
        print(mc_note(r), file=sys.stderr)
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
    from screenlab.stats.pareto import pareto

    temps = _temperatures(args.temperatures)
    if args.replicates < 1:
        raise UsageError(f"--replicates {args.replicates}: give at least 1")
    _check_metric_options(args, args.by)
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
    front = pareto(a.kinetics, a.quality, at_temperature_c=args.at_temperature, draws=min(args.draws or 2000, 2000),
                   seed=args.seed, confidence=a.settings.confidence, catalysts=a.data.catalysts, require=args.require,
                   enantiomers=a.data.manifest.enantiomers)
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
    options = {"at_temperature_c": t_rank, "draws": r.attrs["monte_carlo"]["draws"],
               "mc_se": r.attrs["monte_carlo"]["mc_se"], "seed": args.seed,
               "require": ";".join(r.attrs.get("requirements", [])),
               "enantiomer": args.enantiomer or "", "order": r.attrs.get("direction", "")}
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
