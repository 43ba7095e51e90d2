"""Batched least-squares fits over many ragged groups (wells) at once.

Each fit takes flat arrays ``x`` / ``t``, ``y`` and an integer ``group`` code per point
(0 .. n_groups-1, in any order) and returns a frozen dataclass of per-group numpy arrays. All
work is done with group sums (``np.bincount``), so 30 000 wells cost a few array passes and no
Python loop over wells. Points with a non-finite coordinate are ignored.

:func:`fit_lines`
    ordinary least-squares straight line with intercept (slope, intercept, their SEs and
    covariance, residual SD, df = n - 2). Two-pass (centred) sums, so it meets the NIST StRD
    Norris certificate to ~1e-12.

:func:`fit_first_order`
    ``y = b1 (1 - exp(-k t))`` by variable projection: for a given k the plateau is linear,
    ``b1(k) = sum(y f) / sum(f^2)`` with ``f = 1 - exp(-k t)``, so the residual sum of squares is
    a function of k alone. It is minimised over log k by a coarse grid spanning the whole
    data-driven range (see :func:`screenlab.kinetics.models.search_bounds_k`; no user start
    value is needed, a given one is only one more candidate; 12 points, about a factor 3 in k
    apart over the usual range), a short golden-section refinement between the neighbours of
    the best grid point (to about 10 % in k), then Gauss-Newton steps on (b1, k) that are kept
    only when they lower the RSS, until every group's relative step is below 1e-9. The
    exponentials are the cost, so the bracket stages are kept short and Newton does the rest. Standard errors come from the Jacobian
    ``J = [f, b1 t exp(-k t)]``: ``cov = s^2 (J^T J)^-1`` with ``s^2 = RSS / (n - 2)``.
    The plateau may be fixed per group (one-parameter fit in k, ``s^2 = RSS / (n - 1)``).
    Doubtful fits are not hidden: ``status`` says whether k ended at an end of the searched
    range, the covariance was singular, or the refinement did not settle (see ``FIT_STATUS``).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from screenlab import _groups as grp
from screenlab.kinetics import models

#: status code -> meaning, for :class:`FirstOrderFit.status`
FIT_STATUS: dict[int, str] = {
    0: "converged",
    1: "too few points for the parameters (needs n > number of parameters)",
    2: "k at the lower end of the searched range (course is a straight line; plateau undetermined)",
    3: "k at the upper end of the searched range (course complete by the first reading)",
    4: "singular covariance (parameters not separately determined)",
    5: "refinement did not settle (last Gauss-Newton step above 1e-6 relative)",
}
OK, TOO_FEW, K_LOW, K_HIGH, SINGULAR, NOT_CONVERGED = range(6)

_GOLDEN = (np.sqrt(5.0) - 1.0) / 2.0


def _prepare(x, y, group, n_groups):
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    g = np.asarray(group, dtype=np.int64).ravel()
    if not (x.shape == y.shape == g.shape):
        raise ValueError("x, y and group must have the same length")
    if g.size and g.min() < 0:
        raise ValueError("group codes must be >= 0")
    if n_groups is None:
        n_groups = int(g.max()) + 1 if g.size else 0
    keep = np.isfinite(x) & np.isfinite(y)
    if not keep.all():
        x, y, g = x[keep], y[keep], g[keep]
    return x, y, g, int(n_groups)


def _layout(t, y, g, n, G):
    """Arrange points for fast group sums.

    When groups are of similar size, points go into a dense (G, max n) array padded with
    t = 0, y = 0: such a pad adds exactly nothing to any sum of the first-order fit (f(0) = 0,
    y = 0, d f/d k at t = 0 is 0), and row sums are much faster than weighted bincounts.
    Otherwise flat arrays and ``np.bincount``.
    """
    m = int(n.max()) if G else 0
    if G and m * G <= 4 * max(t.size, 1):
        order = np.argsort(g, kind="stable")
        gs = g[order]
        starts = np.concatenate(([0], np.cumsum(n)[:-1]))
        pos = np.arange(gs.size) - starts[gs]
        T = np.zeros((G, m))
        Y = np.zeros((G, m))
        T[gs, pos] = t[order]
        Y[gs, pos] = y[order]
        ones = np.ones(m)
        # a matrix-vector product sums short rows ~8x faster than ndarray.sum(axis=1)
        return T, Y, (lambda v: np.asarray(v)[:, None]), (lambda w: w @ ones)
    return t, y, (lambda v: np.asarray(v)[g]), (lambda w: grp.group_sum(g, G, w))


@dataclass(frozen=True)
class LineFit:
    """Per-group straight line ``y = intercept + slope x`` (arrays of length n_groups).

    n (int), slope, intercept, slope_se, intercept_se, cov_slope_intercept, rss, resid_sd, df
    (int, n - 2), sxx (sum of squared x deviations, for pooling SDs across groups). SEs and resid_sd are NaN when df < 1; slope is NaN when x has no spread.
    """

    n: np.ndarray
    slope: np.ndarray
    intercept: np.ndarray
    slope_se: np.ndarray
    intercept_se: np.ndarray
    cov_slope_intercept: np.ndarray
    rss: np.ndarray
    resid_sd: np.ndarray
    df: np.ndarray
    sxx: np.ndarray


def fit_lines(x, y, group, n_groups: int | None = None) -> LineFit:
    """Ordinary least-squares line with intercept in every group (vectorised)."""
    x, y, g, G = _prepare(x, y, group, n_groups)
    n = np.bincount(g, minlength=G)
    with np.errstate(divide="ignore", invalid="ignore"):
        xbar = grp.group_sum(g, G, x) / n
        ybar = grp.group_sum(g, G, y) / n
        dx = x - xbar[g]
        dy = y - ybar[g]
        sxx = grp.group_sum(g, G, dx * dx)
        sxy = grp.group_sum(g, G, dx * dy)
        spread = sxx > 0
        slope = np.where(spread, sxy / np.where(spread, sxx, 1.0), np.nan)
        intercept = ybar - slope * xbar
        resid = dy - slope[g] * dx
        rss = grp.group_sum(g, G, resid * resid)
        df = n - 2
        s2 = np.where(df > 0, rss / np.maximum(df, 1), np.nan)
        s2 = np.where(spread, s2, np.nan)
        slope_se = np.sqrt(s2 / sxx)
        intercept_se = np.sqrt(s2 * (1.0 / n + xbar * xbar / sxx))
        cov = -xbar * s2 / sxx
    rss = np.where(spread, rss, np.nan)
    return LineFit(n=n, slope=slope, intercept=intercept, slope_se=slope_se,
                   intercept_se=intercept_se, cov_slope_intercept=cov, rss=rss,
                   resid_sd=np.sqrt(s2), df=np.maximum(df, 0), sxx=sxx)


@dataclass(frozen=True)
class FirstOrderFit:
    """Per-group first-order saturation fit (arrays of length n_groups).

    n, n_params (1 when the plateau was fixed, else 2), b1 (plateau, y units), k (1/x units),
    b1_se (0 when fixed), k_se, cov_b1_k, rss, resid_sd, df (n - n_params), rate (initial slope
    b1 k) and rate_se (delta method), fixed (bool), status (int, see ``FIT_STATUS``),
    k_lo / k_hi (the searched range). Estimates are NaN where status is 1; SEs are NaN where
    status is 2, 3 or 4.
    """

    n: np.ndarray
    n_params: np.ndarray
    b1: np.ndarray
    k: np.ndarray
    b1_se: np.ndarray
    k_se: np.ndarray
    cov_b1_k: np.ndarray
    rss: np.ndarray
    resid_sd: np.ndarray
    df: np.ndarray
    rate: np.ndarray
    rate_se: np.ndarray
    fixed: np.ndarray
    status: np.ndarray
    k_lo: np.ndarray
    k_hi: np.ndarray

    @property
    def ok(self) -> np.ndarray:
        return self.status == OK


def fit_first_order(t, y, group, n_groups: int | None = None, *, plateau=None, k_start=None,
                    k_bounds=None, n_grid: int = 12, n_golden: int = 6,
                    n_polish: int = 12) -> FirstOrderFit:
    """Fit ``y = b1 (1 - exp(-k t))`` in every group; see the module docstring for the method.

    plateau
        optional per-group array: where finite, b1 is fixed at that value (one-parameter fit).
    k_start
        optional per-group start value of k: evaluated as one more candidate beside the grid;
        the result never depends on it unless it beats every grid point.
    k_bounds
        optional ``(k_lo, k_hi)`` per-group arrays; default from the sampling times.
    """
    t, y, g, G = _prepare(t, y, group, n_groups)
    n = np.bincount(g, minlength=G)
    present = n > 0
    if G and not present.all():
        # fit only the groups that have points, then scatter back (empty groups: status 1)
        local = np.cumsum(present) - 1

        def part(v):
            return None if v is None else np.broadcast_to(np.asarray(v, dtype=float), (G,))[present]

        sub = fit_first_order(t, y, local[g], int(present.sum()), plateau=part(plateau),
                              k_start=part(k_start),
                              k_bounds=None if k_bounds is None else (part(k_bounds[0]), part(k_bounds[1])),
                              n_grid=n_grid, n_golden=n_golden, n_polish=n_polish)
        full = {}
        for name, v in vars(sub).items():
            if v.dtype == bool:
                arr = np.zeros(G, dtype=bool)
            elif name == "status":
                arr = np.full(G, TOO_FEW, dtype=v.dtype)
            elif np.issubdtype(v.dtype, np.integer):
                arr = np.zeros(G, dtype=v.dtype)
            else:
                arr = np.full(G, np.nan)
            arr[present] = v
            full[name] = arr
        full["fixed"] = np.isfinite(np.broadcast_to(np.asarray(plateau, dtype=float), (G,))) if plateau is not None else full["fixed"]
        full["n_params"] = np.where(full["fixed"], 1, 2)
        return FirstOrderFit(**full)
    if plateau is None:
        p = np.full(G, np.nan)
    else:
        p = np.broadcast_to(np.asarray(plateau, dtype=float), (G,)).copy()
    fixed = np.isfinite(p)
    n_par = np.where(fixed, 1, 2)

    # data-driven search range from the sampling times
    if k_bounds is None:
        t_max = np.zeros(G)
        np.maximum.at(t_max, g, t)
        pos = t > 0
        t_first = np.full(G, np.inf)
        np.minimum.at(t_first, g[pos], t[pos])
        with np.errstate(divide="ignore", invalid="ignore"):
            k_lo, k_hi = models.search_bounds_k(t_max, t_first)
    else:
        k_lo = np.broadcast_to(np.asarray(k_bounds[0], dtype=float), (G,)).copy()
        k_hi = np.broadcast_to(np.asarray(k_bounds[1], dtype=float), (G,)).copy()
    valid = (n > n_par) & np.isfinite(k_lo) & np.isfinite(k_hi) & (k_lo > 0) & (k_hi > k_lo)
    u_lo = np.log(np.where(valid, k_lo, 1.0))
    u_hi = np.log(np.where(valid, k_hi, 10.0))
    t, y, expand, gsum = _layout(t, y, g, n, G)
    syy = gsum(y * y)
    p_safe = np.where(fixed, p, 0.0)

    def profile(u):
        m = expand(np.exp(u)) * t
        np.negative(m, out=m)
        np.expm1(m, out=m)                      # m = -f, in place: this is the hot loop
        sff = gsum(m * m)
        syf = -gsum(y * m)
        with np.errstate(divide="ignore", invalid="ignore"):
            free = syy - syf * syf / sff
        rss = np.where(fixed, syy - 2.0 * p_safe * syf + p_safe * p_safe * sff, free)
        return np.where(np.isfinite(rss), rss, np.inf)

    # 1. coarse grid over log k
    steps = np.linspace(0.0, 1.0, n_grid)
    width = u_hi - u_lo
    best_rss = np.full(G, np.inf)
    best_j = np.zeros(G, dtype=np.int64)
    for j, s in enumerate(steps):  # a loop over grid points, each vectorised over all wells
        r = profile(u_lo + s * width)
        better = r < best_rss
        best_rss = np.where(better, r, best_rss)
        best_j = np.where(better, j, best_j)
    du = width / (n_grid - 1)
    centre = u_lo + best_j * du
    if k_start is not None:
        ks = np.broadcast_to(np.asarray(k_start, dtype=float), (G,))
        us = np.log(np.where(np.isfinite(ks) & (ks > 0), ks, 1.0))
        inside = np.isfinite(ks) & (ks > 0) & (us >= u_lo) & (us <= u_hi)
        r = profile(np.where(inside, us, centre))
        take = inside & (r < best_rss)
        centre = np.where(take, us, centre)
    # 2. golden section in [centre - du, centre + du], clipped to the range
    a = np.maximum(centre - du, u_lo)
    b = np.minimum(centre + du, u_hi)
    c = b - _GOLDEN * (b - a)
    d = a + _GOLDEN * (b - a)
    fc, fd = profile(c), profile(d)
    for _ in range(n_golden):
        left = fc <= fd                          # minimum in [a, d]
        b = np.where(left, d, b)
        a = np.where(left, a, c)
        new = np.where(left, b - _GOLDEN * (b - a), a + _GOLDEN * (b - a))
        fn = profile(new)
        c, d = np.where(left, new, d), np.where(left, c, new)
        fc, fd = np.where(left, fn, fd), np.where(left, fc, fn)
    u = np.where(fc <= fd, c, d)
    # the ends of the range are candidates too (the golden search never lands on them)
    for end in (u_lo, u_hi):
        r_end = profile(end)
        take = r_end < np.minimum(fc, fd)
        u = np.where(take, end, u)
        fc = np.where(take, r_end, fc)
    k = np.exp(u)

    def plateau_at(kk):
        f = -np.expm1(-expand(kk) * t)
        with np.errstate(divide="ignore", invalid="ignore"):
            b = gsum(y * f) / gsum(f * f)
        return np.where(fixed, p, b)

    def rss_at(bb, kk):
        res = y - expand(bb) * -np.expm1(-expand(kk) * t)
        return gsum(res * res)

    b1 = plateau_at(k)
    rss = rss_at(b1, k)
    # 3. Gauss-Newton polish on (b1, k), kept only where it lowers the RSS
    rel_step = np.full(G, np.inf)
    for _ in range(n_polish):
        f, jk = models.first_order_jacobian(t, expand(b1), expand(k))
        res = y - expand(b1) * f
        a11 = gsum(f * f)
        a12 = gsum(f * jk)
        a22 = gsum(jk * jk)
        g1 = gsum(f * res)
        g2 = gsum(jk * res)
        with np.errstate(divide="ignore", invalid="ignore"):
            det = a11 * a22 - a12 * a12
            db1 = np.where(fixed, 0.0, (a22 * g1 - a12 * g2) / det)
            dk = np.where(fixed, g2 / a22, (a11 * g2 - a12 * g1) / det)
            rel_step = np.maximum(np.abs(dk / k), np.where(fixed, 0.0, np.abs(db1 / b1)))
        b1n = b1 + np.nan_to_num(db1)
        kn = np.clip(k + np.nan_to_num(dk), np.exp(u_lo), np.exp(u_hi))
        rn = rss_at(b1n, kn)
        take = np.isfinite(rn) & (rn < rss)
        b1 = np.where(take, b1n, b1)
        k = np.where(take, kn, k)
        rss = np.where(take, rn, rss)
        if not np.any(valid & (rel_step >= 1e-9)):   # every group settled: stop early
            break

    # 4. covariance from the Jacobian at the solution
    f, jk = models.first_order_jacobian(t, expand(b1), expand(k))
    a11 = gsum(f * f)
    a12 = gsum(f * jk)
    a22 = gsum(jk * jk)
    df = n - n_par
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = np.where(df > 0, rss / np.maximum(df, 1), np.nan)
        det = a11 * a22 - a12 * a12
        singular = np.where(fixed, ~(a22 > 0), ~(det > 1e-12 * a11 * a22))
        var_b1 = np.where(fixed, 0.0, s2 * a22 / det)
        var_k = np.where(fixed, s2 / a22, s2 * a11 / det)
        cov = np.where(fixed, 0.0, -s2 * a12 / det)
    u_end = np.log(k)
    at_lo = u_end <= u_lo + 1e-3 * np.maximum(du, 1e-12)
    at_hi = u_end >= u_hi - 1e-3 * np.maximum(du, 1e-12)
    status = np.full(G, OK, dtype=np.int8)
    status[~(rel_step < 1e-6)] = NOT_CONVERGED
    status[singular] = SINGULAR
    status[at_hi] = K_HIGH
    status[at_lo] = K_LOW
    status[~valid] = TOO_FEW
    bad_cov = status >= K_LOW
    var_b1 = np.where(bad_cov, np.nan, var_b1)
    var_k = np.where(bad_cov, np.nan, var_k)
    cov = np.where(bad_cov, np.nan, cov)
    rate = models.first_order_initial_rate(b1, k)
    var_rate = models.initial_rate_variance(b1, k, var_b1, var_k, cov)
    nan = ~valid
    out = dict(b1=b1, k=k, rss=rss, rate=rate)
    out = {name: np.where(nan, np.nan, v) for name, v in out.items()}
    return FirstOrderFit(
        n=n, n_params=n_par, b1=out["b1"], k=out["k"],
        b1_se=np.sqrt(np.maximum(var_b1, 0.0)), k_se=np.sqrt(var_k), cov_b1_k=cov,
        rss=out["rss"], resid_sd=np.where(nan, np.nan, np.sqrt(s2)), df=np.maximum(df, 0),
        rate=out["rate"], rate_se=np.sqrt(np.maximum(var_rate, 0.0)) * np.where(np.isnan(var_rate), np.nan, 1.0),
        fixed=fixed, status=status, k_lo=np.where(valid, k_lo, np.nan), k_hi=np.where(valid, k_hi, np.nan),
    )
