"""``screenlab history --catalyst ID``: a catalyst's results in every stored campaign (round) it was in.

One row per campaign, first import first: TOF at that campaign's reference temperature with its
interval (a bound where it is censored), rate enhancement, Ea where measured, rank and P(top K)
there, and the activity relative to that campaign's benchmark (ratio with interval), which is
what compares across rounds and plate readers. Catalyst ids are matched exactly; a
``catalysts.csv`` column ``alias`` joins a renamed catalyst to the id it had before.
"""
from __future__ import annotations

from screenlab.cli.common import add_format_option, add_store_option, emit

TABLE_COLUMNS = ["campaign", "parent", "catalyst", "tof_at_ref", "enhancement", "ea", "rank", "p_top",
                 "vs_benchmark", "benchmark", "decisions", "status"]


def register(sub) -> None:
    h = sub.add_parser("history", help="a catalyst's results across every stored campaign and round",
                       description="One row per stored campaign holding the catalyst (ids matched exactly, or "
                       "through the catalysts.csv column alias): TOF at that campaign's reference temperature with "
                       "its interval, enhancement, Ea, rank and P(top K) there, and TOF relative to that "
                       "campaign's benchmark (ratio with interval), the scale that compares across rounds.")
    h.add_argument("--catalyst", metavar="ID", required=True, help="catalyst id (exact)")
    h.add_argument("--top", metavar="K", type=int, default=3, help="K of P(top K) in each campaign (default 3)")
    h.add_argument("--draws", metavar="N", type=int, default=4000,
                   help="random draws per ranking (default 4000)")
    h.add_argument("--seed", metavar="S", type=int, default=0, help="random seed (default 0)")
    add_format_option(h)
    add_store_option(h)
    h.set_defaults(func=run_history)


def history_frame(store, catalyst: str, *, top_k: int, draws: int, seed: int):
    """The history (:data:`screenlab.stats.history.HISTORY_COLUMNS`) of ``catalyst`` in ``store``;
    each campaign analysed with its own settings."""
    from screenlab.pipeline import analyse
    from screenlab.stats.history import catalyst_history
    from screenlab.store.decisions import history_sources

    _, sources = history_sources(store, catalyst, lambda name: analyse(store.load_campaign(name)))
    return catalyst_history(sources, top_k=top_k, draws=draws, seed=seed)


def display_frame(hist):
    """The history as short text columns (intervals and bounds written out) for a table view."""
    import pandas as pd

    from screenlab.stats.bounds import estimate_text

    rows = []
    for r in hist.to_dict(orient="records"):  # one per campaign
        tof = estimate_text(r["tof_per_h"], r["tof_ci_low"], r["tof_ci_high"], r["tof_censored"])
        if tof != "–":
            tof += f" h-1 at {r['reference_temperature_c']:g} C" + (" (Arrhenius)" if r["tof_basis"] == "arrhenius" else "")
        rank = "–"
        if pd.notna(r["rank"]):
            rank = f"{int(r['rank'])} of {int(r['n_ranked'])} ({int(r['rank_low'])}-{int(r['rank_high'])})"
        elif r["rank_reason"]:
            rank = f"not ranked: {r['rank_reason']}"
        if r["role"] == "reference" and r["catalyst"] == r["benchmark"]:
            ratio = "1 (the benchmark)"
        else:
            ratio = estimate_text(r["vs_benchmark"], r["vs_benchmark_ci_low"], r["vs_benchmark_ci_high"],
                                  r["vs_benchmark_censored"])
        rows.append({"campaign": r["campaign"], "parent": r["parent"], "catalyst": r["catalyst"], "tof_at_ref": tof,
                     "enhancement": estimate_text(r["enhancement"], r["enhancement_ci_low"], r["enhancement_ci_high"]),
                     "ea": estimate_text(r["ea_kj_mol"], r["ea_ci_low"], r["ea_ci_high"]),
                     "rank": rank, "p_top": "–" if pd.isna(r["p_top"]) else f"{float(r['p_top']):.2f} (K={int(r['top_k'])})", "vs_benchmark": ratio, "benchmark": r["benchmark"],
                     "decisions": r["decisions"], "status": r["status"]})
    return pd.DataFrame(rows, columns=TABLE_COLUMNS)


def run_history(args) -> int:
    from screenlab.cli.decisions_cmd import _store
    from screenlab.errors import UsageError

    if args.top < 1:
        raise UsageError(f"--top {args.top}: give at least 1")
    if args.draws < 1:
        raise UsageError(f"--draws {args.draws}: give at least 1")
    hist = history_frame(_store(args), args.catalyst, top_k=args.top, draws=args.draws, seed=args.seed)
    emit(display_frame(hist) if args.format == "table" else hist, args.format)
    return 0
