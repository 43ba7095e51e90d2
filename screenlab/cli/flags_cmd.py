"""`screenlab flags`: every flag code the analysis can set, with its meaning."""
from __future__ import annotations

from screenlab.cli.common import add_format_option, emit


def register(sub) -> None:
    p = sub.add_parser("flags", help="list every flag code with its meaning",
                       description="Every flag code that rates, Arrhenius, orders, plate quality and the "
                                   "ranking can set, with one sentence each.")
    add_format_option(p)
    p.set_defaults(func=run)


def run(args) -> int:
    import pandas as pd

    from screenlab.flags import flag_help

    codes = flag_help()
    emit(pd.DataFrame({"flag": list(codes), "meaning": list(codes.values())}), args.format)
    return 0
