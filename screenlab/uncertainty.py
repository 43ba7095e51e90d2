"""The few rules of interval arithmetic every module shares, written once.

* :func:`t_ppf`: the one-sided Student t quantile at probability ``p`` (the same rule for df);
* :func:`t_quantile`: two-sided Student t quantile at ``confidence`` for ``df`` degrees of freedom
  (``scipy.special.stdtrit``, so no module needs ``scipy.stats``); ``df = inf`` gives the normal
  quantile (``scipy.special.ndtri``); ``df <= 0`` or NaN gives NaN.
* :func:`welch_df`: the Welch-Satterthwaite degrees of freedom of a sum of two independent
  variance terms (Welch, Biometrika 1947, 34, 28; Satterthwaite, Biometrics Bull. 1946, 2, 110):
  ``(va + vb)^2 / (va^2 / da + vb^2 / db)``, a term with zero variance contributing nothing and
  the result ``inf`` when both are zero.
* :func:`norm_ppf`: ``scipy.stats.norm.ppf``; :data:`quantiles` holds ``quantiles.t.ppf`` and
  ``quantiles.norm.ppf`` for code written against ``scipy.stats``. All from the ``scipy.special``
  functions ``scipy.stats`` itself calls (``stdtrit``, ``ndtri``: the same numbers), without
  importing ``scipy.stats`` (which costs a command's start-up a large share; see
  scripts/benchmark.py).
"""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np
from scipy import special


def t_ppf(p, df) -> np.ndarray:
    """The ``p`` quantile of Student t(df) (one-sided; ``p`` may be an array); df = inf gives the
    normal quantile, df <= 0 or NaN gives NaN."""
    df = np.asarray(df, dtype=float)
    if np.ndim(p) == 0 and df.size > 256:
        # a column of dfs repeats a few values (n - 1, inf): each distinct df once, the same numbers
        uniq, inverse = np.unique(df, return_inverse=True)
        if uniq.size * 4 < df.size:
            return t_ppf(p, uniq)[inverse].reshape(df.shape)
    finite = np.isfinite(df) & (df > 0)
    if np.ndim(p) == 0 and df.ndim:
        # one probability: the quantile only where df is finite and positive (missing dfs, the
        # blank rows of a well column, cost nothing); the same element-wise numbers
        out = np.full(df.shape, np.nan)
        with np.errstate(invalid="ignore"):
            out[finite] = _stdtrit_split(df[finite], float(p))
        out[np.isposinf(df)] = special.ndtri(p)
        return out
    with np.errstate(invalid="ignore"):
        out = np.where(finite, special.stdtrit(np.where(finite, df, 1.0), p), np.nan)
    return np.where(np.isposinf(df), special.ndtri(p), out)


#: above this many quantiles in one call, :func:`t_ppf` splits them over two worker threads
#: (``stdtrit`` is element-wise and runs without the GIL: the same numbers, in about half the time)
SPLIT_MIN = 8192


def _stdtrit_split(df: np.ndarray, p: float) -> np.ndarray:
    """``special.stdtrit(df, p)`` for a 1-D ``df``, in two halves side by side when it is long."""
    if df.size < SPLIT_MIN:
        return special.stdtrit(df, p)
    from screenlab._parallel import executor

    half = df.size // 2
    with executor(2) as pool:
        first = pool.submit(special.stdtrit, df[:half], p)
        second = special.stdtrit(df[half:], p)
        return np.concatenate([first.result(), second])


def t_quantile(confidence: float, df) -> np.ndarray:
    """Two-sided Student t quantile; df = inf gives the normal quantile, df <= 0 or NaN gives NaN."""
    return t_ppf(0.5 + float(confidence) / 2.0, df)


def welch_df(var_a, df_a, var_b, df_b) -> np.ndarray:
    """Welch-Satterthwaite df of var_a + var_b (a term with zero variance contributes nothing)."""
    va, vb = np.asarray(var_a, float), np.asarray(var_b, float)
    da, db = np.asarray(df_a, float), np.asarray(df_b, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        ta = np.where(va > 0, va ** 2 / da, 0.0)
        tb = np.where(vb > 0, vb ** 2 / db, 0.0)
        den = ta + tb
        return np.where(den > 0, (va + vb) ** 2 / den, np.inf)


def within_range(lo, hi, estimate, low_end: float, high_end: float):
    """An interval ``(lo, hi)`` cut at the ends of the quantity's range (a percentage: 0..100 or
    -100..100), never short of the estimate itself, which may lie past an end (reading noise):
    ``(max(lo, min(low_end, est)), min(hi, max(high_end, est)))``, NaN kept (common practice, no source)."""
    with np.errstate(invalid="ignore"):
        return (np.maximum(lo, np.fmin(low_end, estimate)), np.minimum(hi, np.fmax(high_end, estimate)))


def norm_ppf(q):
    """Standard normal quantile at probability ``q`` (``scipy.stats.norm.ppf(q)``: ``special.ndtri``)."""
    return special.ndtri(q)


#: ``quantiles.t.ppf`` and ``quantiles.norm.ppf``, named as in ``scipy.stats``
quantiles = SimpleNamespace(t=SimpleNamespace(ppf=t_ppf), norm=SimpleNamespace(ppf=norm_ppf))

__all__ = ["t_ppf", "t_quantile", "welch_df", "within_range", "norm_ppf", "quantiles"]
