"""Plain reference versions for the ranking tests: the flag-union of ';'-joined codes and the Pareto
front share over every pair of every draw. A plain module the tests import by name (not a test
module).
"""
from __future__ import annotations

import numpy as np

import screenlab.stats.ranking as R


def _merge_codes_ref(*cols) -> list[str]:
    """Element-wise union of ';'-joined flag strings, order kept, no repeats (the replaced loop)."""
    out = []
    for parts in zip(*cols):
        codes = []
        for p in parts:
            if isinstance(p, str) and p:
                codes.extend(c for c in p.split(";") if c)
        out.append(";".join(dict.fromkeys(codes)))
    return out


def _plain_front_share(params, draws, seed):
    """Every pair in every draw (the O(draws k^2) definition), same chunk seeds as front_share."""
    k, m = len(params[0][0]), len(params)
    hits = np.zeros(k)
    for d, ss in R._chunks(draws, k, seed, per_cell=m):
        rng = np.random.default_rng(ss)
        cube = np.stack([R.draw_matrix(mu, sig, df, d, rng) for mu, sig, df in params], axis=2)
        hits += (~R._dominance(cube).any(axis=1)).sum(axis=0)
    return hits / draws
