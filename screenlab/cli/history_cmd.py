"""``screenlab history --catalyst ID``: a catalyst's results in every stored campaign (round) it was in.

One row per campaign, first import first: TOF at that campaign's reference temperature with its
interval (a bound where it is censored), rate enhancement, Ea where measured, rank and P(top K)
there, and the activity relative to that campaign's benchmark (ratio with interval), which is
what compares across rounds and plate readers. Catalyst ids are matched exactly; a
``catalysts.csv`` column ``alias`` joins a renamed catalyst to the id it had before.
"""
from __future__ import annotations

from screenlab.cli.common import add_format_option, add_store_option, emit

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


def run_history(args) -> int:
    from screenlab.cli.decisions_cmd import _store
    from screenlab.errors import UsageError

    if args.top < 1:
        raise UsageError(f"--top {args.top}: give at least 1")
    if args.draws < 1:
        raise UsageError(f"--draws {args.draws}: give at least 1")
    from screenlab.stats.history import display_table

    hist = history_frame(_store(args), args.catalyst, top_k=args.top, draws=args.draws, seed=args.seed)
    emit(display_table(hist) if args.format == "table" else hist, args.format)
    return 0
