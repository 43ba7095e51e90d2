"""Pure model equations of a well's time course, and data-driven start values.

Nothing here fits anything (that is :mod:`screenlab.kinetics.fit`); these are the formulas the
fitter and the rate step share, each vectorised over arrays.

First-order saturation (the "monomolecular" law; the same shape as NIST StRD Misra1a/BoxBOD)::

    P(t) = b1 * (1 - exp(-k t))          dP/dt at t = 0  =  b1 * k

``b1`` is the plateau (mM of product) and ``k`` the first-order rate constant (1/h). The model
has **no offset**: product amounts are zero at t = 0 by construction (conversion and yield start
at zero; absorbance is taken net of the well's own baseline in :mod:`.amounts`), and with the
usual 6-10 readings per well a third parameter would leave ``k`` poorly determined. A non-zero
reading at t = 0 simply enters the fit as a residual.
"""
from __future__ import annotations

import numpy as np

#: lower end of the k search, as a multiple of 1/t_max: at k = 1e-3 / t_max the curve deviates
#: from a straight line by 0.05 % at the last reading, so smaller k are indistinguishable.
K_LOW_TIMES_TMAX = 1.0e-3
#: upper end of the k search, as a multiple of 1/t_first (first reading after t = 0): at
#: k = 20 / t_first the curve is at 1 - exp(-20) of its plateau already at the first reading.
K_HIGH_TIMES_TFIRST = 20.0


def first_order(t, b1, k):
    """Product of a first-order saturation course, ``b1 * (1 - exp(-k t))``."""
    t = np.asarray(t, dtype=float)
    return np.asarray(b1, dtype=float) * -np.expm1(-np.asarray(k, dtype=float) * t)


def first_order_jacobian(t, b1, k) -> tuple[np.ndarray, np.ndarray]:
    """Partial derivatives of :func:`first_order`: ``(dP/db1, dP/dk) = (1 - e^-kt, b1 t e^-kt)``."""
    t = np.asarray(t, dtype=float)
    m = np.expm1(-np.asarray(k, dtype=float) * t)      # e^-kt - 1, one transcendental call
    return -m, np.asarray(b1, dtype=float) * t * (1.0 + m)


def first_order_initial_rate(b1, k):
    """Initial slope dP/dt at t = 0 of the first-order law: ``b1 * k``."""
    return np.asarray(b1, dtype=float) * np.asarray(k, dtype=float)


def initial_rate_variance(b1, k, var_b1, var_k, cov_b1_k):
    """Delta-method variance of ``b1 * k``: gradient (k, b1) through the 2 x 2 covariance."""
    b1 = np.asarray(b1, dtype=float)
    k = np.asarray(k, dtype=float)
    return k * k * var_b1 + 2.0 * k * b1 * cov_b1_k + b1 * b1 * var_k


def search_bounds_k(t_max, t_first) -> tuple[np.ndarray, np.ndarray]:
    """Per-group search range of k (1/h) from the sampling times (data-driven, no user start).

    ``k_lo = 1e-3 / t_max`` (the course is a straight line for any smaller k) and
    ``k_hi = 20 / t_first`` (the course is complete at the first reading for any larger k).
    """
    t_max = np.asarray(t_max, dtype=float)
    t_first = np.asarray(t_first, dtype=float)
    k_lo = K_LOW_TIMES_TMAX / t_max
    k_hi = K_HIGH_TIMES_TFIRST / t_first
    return k_lo, np.maximum(k_hi, k_lo * 10.0)
