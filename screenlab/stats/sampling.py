"""Draws and ranks: the sampling primitives the Monte Carlo ranking and the Pareto front share.

* :func:`draw_matrix`: a draws x candidates float32 matrix of ``mu + sigma * T_df`` (Bailey's polar
  method, normal where df is missing or large);
* :func:`order_desc`, :func:`ranks_from_order`, :func:`rank_draws`: per draw, the candidates from
  the highest score to the lowest (one integer-key sort per draw) and their ranks;
* :func:`order_stat_index`: the order statistic numpy's ``inverted_cdf`` quantile reads;
* :func:`draw_chunks`: draws split into chunks of at most :data:`CHUNK_CELLS` numbers, one child
  seed each (so a chunk can be drawn again with the same numbers);
* :func:`executor` (from :mod:`screenlab._parallel`): a thread pool over those chunks (or, with one
  CPU or one task, an inline stand-in that runs each task when its result is asked for).
"""
from __future__ import annotations

import numpy as np

from screenlab._parallel import executor

#: elements per chunk of draws (draws x candidates); bounds the memory of every Monte Carlo step
CHUNK_CELLS = 1 << 21
#: above this df a Student t column is drawn as normal (t quantiles differ by < 1e-4 relative)
NORMAL_DF = 1e4


def draw_matrix(mu, sigma, df, draws: int, rng: np.random.Generator) -> np.ndarray:
    """draws x candidates float32 matrix of ``mu + sigma * T_df`` (normal where df is not finite,
    not > 0, or above :data:`NORMAL_DF`).

    T comes from Bailey's polar method (R. W. Bailey, Math. Comp. 62 (1994) 779-781): for (u, v)
    uniform in the unit disk and w = u^2 + v^2, ``u * sqrt(df (w^(-2/df) - 1) / w)`` is Student
    t(df), and with ``df -> inf`` it becomes Marsaglia's polar normal ``u * sqrt(-2 ln w / w)``. The
    point of the disk is drawn directly as w = U1 (uniform on (0, 1]) and u = sqrt(w) cos(2 pi U2),
    which gives ``T = cos(2 pi U2) sqrt(df (U1^(-2/df) - 1))`` (the Box-Muller form when normal):
    two uniforms per number, no rejection, no gamma or normal generator, everything in place.
    float32 is ample for ranking (ties between continuous draws stay improbable).
    """
    mu, sigma, df = (np.asarray(v, dtype=float).ravel() for v in (mu, sigma, df))
    k = mu.size
    w = rng.random((draws, k), dtype=np.float32)
    np.subtract(np.float32(1.0), w, out=w)           # (0, 1]: log(w) stays finite
    c = rng.random((draws, k), dtype=np.float32)
    c *= np.float32(2.0 * np.pi)
    np.cos(c, out=c)
    with np.errstate(invalid="ignore"):
        t_col = np.isfinite(df) & (df > 0) & (df <= NORMAL_DF)
    np.log(w, out=w)                                 # w <- ln U1 (<= 0)
    if t_col.any():
        dft = np.where(t_col, df, 1.0)
        e = np.where(t_col, -2.0 / dft, 1.0).astype(np.float32)
        scale = np.where(t_col, dft, 0.0).astype(np.float32)
        z = w * e                                    # -2/df ln U1
        np.expm1(z, out=z)                           # U1^(-2/df) - 1, without the cancellation at large df
        z *= scale                                   # df (U1^(-2/df) - 1); 0 in normal columns
        if not t_col.all():
            z -= np.where(t_col, np.float32(0.0), np.float32(2.0)).astype(np.float32) * w   # -2 ln U1
    else:
        z = w
        z *= np.float32(-2.0)
    np.sqrt(z, out=z)
    z *= c
    z *= sigma.astype(np.float32)
    z += mu.astype(np.float32)
    return z


def desc_int32(x: np.ndarray, out: np.ndarray | None = None, overwrite: bool = False) -> np.ndarray:
    """float32 -> int32 whose ascending order is the descending order of ``x`` (signed zeros equal):
    the bit pattern of -x, negative values flipped (IEEE 754 floats of one sign order like their
    bits). ``out``: an int32 array (or view) to write into; ``overwrite``: ``x`` may be used as
    scratch space (its values are lost). With both, no temporary is made."""
    neg = x if overwrite else np.empty_like(x, dtype=np.float32)
    np.subtract(np.float32(0.0), x, out=neg)         # -x, and -0.0 -> +0.0
    bits = neg.view(np.int32)
    out = np.empty(x.shape, np.int32) if out is None else out
    np.right_shift(bits, 31, out=out)                # -1 for negative values, 0 otherwise
    np.bitwise_and(out, np.int32(0x7FFFFFFF), out=out)
    np.bitwise_xor(out, bits, out=out)
    return out


def order_desc(score: np.ndarray, overwrite: bool = False) -> np.ndarray:
    """Per row of a float32 ``score`` matrix, the columns from the highest score to the lowest (ties
    by column), as ``np.argsort(-score, axis=1, kind="stable")`` gives them; int32, possibly a
    strided view. ``overwrite``: ``score`` may be used as scratch space (its values are lost).

    One sort of 64-bit keys instead of an argsort: the high word of each key is the score's bit
    pattern mapped to a signed integer of the same order as the negated score (IEEE 754 floats of
    one sign order like their bit patterns; the negative ones are flipped), the low word the column.
    Sorting plain integers uses numpy's SIMD sorts, about twice as fast as an argsort of the floats
    on the same rows, and the low words then are the order. Signed zeros are made equal first, as
    they compare equal.
    """
    d, k = score.shape
    if k >= 2 ** 31:
        return np.argsort(-score, axis=1, kind="stable")
    key = np.empty((d, k), dtype=np.int64)
    words = key.view(np.int32).reshape(d, k, 2)       # little- or big-endian: pick the words
    hi, lo = (1, 0) if np.little_endian else (0, 1)
    desc_int32(score, out=words[:, :, hi], overwrite=overwrite)   # built in place
    words[:, :, lo] = np.arange(k, dtype=np.int32)
    key.sort(axis=1)
    return words[:, :, lo]


def ranks_from_order(order: np.ndarray, overwrite: bool = False) -> np.ndarray:
    """Inverse of each row of ``order``: ranks[r, order[r, p]] = p + 1. ``overwrite``: ``order``
    may be used as scratch space (its values are lost)."""
    d, k = order.shape
    dtype = np.int32 if k < 2 ** 31 - 1 else np.int64
    ranks = np.empty(d * k, dtype=dtype)
    idx = np.int64 if d * k >= 2 ** 31 else dtype
    flat = order if overwrite and order.dtype == idx else order.astype(idx, copy=True)
    flat += (np.arange(d, dtype=idx) * k)[:, None]
    ranks[flat] = np.arange(1, k + 1, dtype=dtype)    # one scatter into the flat matrix
    return ranks.reshape(d, k)


def rank_draws(score: np.ndarray) -> np.ndarray:
    """Rank of each column within each row of ``score`` (1 = highest; ties by column, the first
    column first), one integer-key sort per row."""
    score = np.asarray(score)
    if score.dtype != np.float32:
        return ranks_from_order(np.argsort(-score, axis=1, kind="stable"))
    return ranks_from_order(order_desc(score))


def order_stat_index(n: int, q: float) -> int:
    """0-based index of the ``q`` quantile of n sorted values, exactly as numpy's ``inverted_cdf``."""
    return int(np.quantile(np.arange(n), q, method="inverted_cdf"))


def draw_chunks(draws: int, k: int, seed, per_cell: int = 1) -> list[tuple[int, np.random.SeedSequence]]:
    """Chunk sizes of draws (each at most CHUNK_CELLS / (k x per_cell) rows) and one seed per chunk.

    Each chunk has its own child seed, so a chunk can be drawn again (same numbers) in a second pass.
    """
    c = max(1, CHUNK_CELLS // max(1, k * per_cell))
    sizes = [min(c, draws - s) for s in range(0, draws, c)]
    return list(zip(sizes, np.random.SeedSequence(seed).spawn(len(sizes))))


__all__ = ["CHUNK_CELLS", "NORMAL_DF", "desc_int32", "draw_chunks", "draw_matrix", "executor",
           "order_desc", "order_stat_index", "rank_draws", "ranks_from_order"]
