"""Integrated rate laws of a well's product course, and their batched least-squares fits.

Every law describes the product course ``y(t)`` of one well from ``y(0) = 0`` and gives its
initial rate ``r0 = dy/dt`` at t = 0, with a standard error from the fit. For a well whose
theoretical maximum product is known (substrate x stoichiometry), ``y`` is the fraction ``X`` of
that maximum (``capped`` courses: they cannot pass 1); otherwise ``y`` is the product in mM and
only the laws that do not need the maximum apply.

=========================  =============================================  ==========  ======
law                        integrated form                                 r0          params
=========================  =============================================  ==========  ======
``zero_order``             X = min(r t, 1): constant rate until the        r           1
                           substrate runs out (uncapped: y = r t)
``first_order``            X = 1 - exp(-k t)                               k           1
``saturation``             r = V S / (Km + S), integrated:                 V/(S0+Km)   2
                           K ln(1/(1 - X)) + X = (V/S0) t, K = Km/S0
``first_order_plateau``    y = b (1 - exp(-k t)): a plateau below full      b k         2
                           conversion (equilibrium, or a zero-order
                           catalyst that decays at first order)
``first_order_deactivating``  X = 1 - exp(-(k/kd)(1 - exp(-kd t))):        k           2
                           first order in substrate, the catalyst
                           decaying at first order (rate constant kd)
``early_polynomial``       y = b t + c t^2 over the early part of the      b           2
                           course only (the generic smooth form)
=========================  =============================================  ==========  ======

The integrated forms are the textbook ones (zero and first order: e.g. Atkins' Physical
Chemistry, table of integrated rate laws; saturation: the integrated Michaelis-Menten equation,
e.g. Cornish-Bowden, Fundamentals of Enzyme Kinetics); ``saturation`` holds the two others as its
limits (Km -> 0: zero order; Km -> infinity at fixed V/Km: first order), and
``first_order_deactivating`` holds ``first_order`` (kd -> 0).

Fits work on all wells at once in a dense ``(wells x readings)`` layout padded with weight 0
(:func:`dense_courses`); nothing loops over wells. One-parameter laws: ``zero_order`` by the
exact least-squares rate for every possible run-out point then a self-consistent polish;
``first_order`` and ``first_order_plateau`` by the variable-projection fitter of
:mod:`screenlab.kinetics.fit` (NIST StRD Misra1a / BoxBOD checked). Two-parameter laws by a
Levenberg-Marquardt iteration on log parameters (:func:`_levenberg_marquardt`), started from
the best of a few data-driven candidates; the saturation law's implicit X(t) is solved by
Newton's method on ``K u + 1 - exp(-u) = (V/S0) t`` with ``X = 1 - exp(-u)``, a concave
equation whose Newton iterates approach the root monotonically from below. Standard errors
from ``s^2 (J^T J)^-1`` with ``s^2 = RSS / (n - p)``; ``r0_se`` by the delta method.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from screenlab.kinetics import fit as _fit

#: the integrated laws compared by AICc (same data for all)
INTEGRATED = ("zero_order", "first_order", "saturation", "first_order_plateau", "first_order_deactivating")
#: the generic smooth form over the early window (not comparable by AICc: other data)
GENERIC = "early_polynomial"
N_PARAMS = {"zero_order": 1, "first_order": 1, "saturation": 2, "first_order_plateau": 2,
            "first_order_deactivating": 2, "early_polynomial": 2, "first_order_induction": 2}
#: laws that need the theoretical maximum product (capped courses)
NEEDS_MAXIMUM = ("first_order", "saturation", "first_order_deactivating")
DESCRIPTION = {
    "zero_order": "zero order until the substrate runs out, X = min(r t, 1)",
    "first_order": "first order, X = 1 - exp(-k t)",
    "saturation": "saturation r = V S/(Km + S), integrated",
    "first_order_plateau": "first order to a plateau below full conversion, y = b (1 - exp(-k t))",
    "first_order_deactivating": "first order with the catalyst decaying, X = 1 - exp(-(k/kd)(1 - exp(-kd t)))",
    "early_polynomial": "quadratic y = b t + c t^2 over the early window (generic form)",
}

#: bounds of the Michaelis constant relative to S0 searched by the saturation law
K_RATIO_BOUNDS = (1.0e-3, 1.0e3)
#: rates searched, as multiples of 1 / t_max (low) and 1 / t_first (high)
RATE_LOW_TIMES_TMAX = 1.0e-4
RATE_HIGH_TIMES_TFIRST = 50.0
#: a capped first_order_plateau above this plateau is not a plateau (common practice, no source)
PLATEAU_MAX = 1.5


@dataclass(frozen=True)
class Courses:
    """Time courses of G wells, dense: ``t``, ``y``, ``w`` are (G, m), padded with w = 0.

    ``y`` is the fraction of the theoretical maximum where ``capped`` (else mM); each row is sorted
    by time; ``n`` readings per well (w = 1), ``t_first`` the first time > 0 and ``t_max`` the last.
    """

    t: np.ndarray
    y: np.ndarray
    w: np.ndarray
    n: np.ndarray
    capped: np.ndarray
    t_first: np.ndarray
    t_max: np.ndarray

    @property
    def shape(self) -> tuple[int, int]:
        return self.t.shape

    def rowsum(self, v: np.ndarray) -> np.ndarray:
        return v @ np.ones(v.shape[1]) if v.shape[1] else np.zeros(v.shape[0])

    def subset(self, rows: np.ndarray) -> "Courses":
        """The courses of the wells ``rows`` (an index array), in that order."""
        return Courses(t=self.t[rows], y=self.y[rows], w=self.w[rows], n=self.n[rows], capped=self.capped[rows],
                       t_first=self.t_first[rows], t_max=self.t_max[rows])

    def flat(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The fitted readings as flat (t, y, well) arrays, wells in order."""
        idx = np.nonzero(self.w > 0)
        return self.t[idx], self.y[idx], idx[0].astype(np.int64)


def dense_courses(t, y, g, n_wells: int, capped, keep=None) -> Courses:
    """Dense layout of flat readings ``(t, y, g)`` sorted by (well code g, time). ``keep``: which
    readings enter the fits (default all finite ones); the others stay in place with weight 0."""
    t = np.asarray(t, dtype=float)
    y = np.asarray(y, dtype=float)
    g = np.asarray(g, dtype=np.int64)
    G = int(n_wells)
    ok = np.isfinite(t) & np.isfinite(y)
    if keep is not None:
        ok &= np.asarray(keep, dtype=bool)
    if g.size > 1 and np.any(g[1:] < g[:-1]):          # wells in runs of any order: sort by well, stably
        order = np.argsort(g, kind="stable")
        t, y, g, ok = t[order], y[order], g[order], ok[order]
    cnt = np.bincount(g, minlength=G)
    # at least one slot (weight 0 when there is no reading at all: a planned campaign)
    m = max(int(cnt.max()) if G and cnt.size else 0, 1)
    starts = np.concatenate(([0], np.cumsum(cnt)[:-1])) if G else np.zeros(0, np.int64)
    pos = np.arange(g.size) - starts[g]
    T = np.zeros((G, m))
    Y = np.zeros((G, m))
    W = np.zeros((G, m))
    T[g, pos] = np.where(ok, t, 0.0)
    Y[g, pos] = np.where(ok, y, 0.0)
    W[g, pos] = ok
    n = np.bincount(g[ok], minlength=G).astype(np.int64)
    pos_t = ok & (t > 0)
    t_first = np.full(G, np.inf)
    np.minimum.at(t_first, g[pos_t], t[pos_t])
    t_max = np.zeros(G)
    np.maximum.at(t_max, g[ok], t[ok])
    return Courses(t=T, y=Y, w=W, n=n, capped=np.asarray(capped, dtype=bool), t_first=t_first, t_max=t_max)


@dataclass(frozen=True)
class LawFit:
    """One law fitted to every well (arrays of length G).

    ``r0`` / ``r0_se`` the initial rate (y units per h) and its SE; ``rss``; ``n`` readings;
    ``ok`` whether the fit is usable (converged, finite, inside its domain); ``p1``, ``p2`` the
    law's parameters (zero_order: r; first_order: k; saturation: r0, K = Km/S0;
    first_order_plateau: b, k; first_order_deactivating: k, kd; early_polynomial: b, c) and
    ``n_window`` the readings used (early_polynomial: the window, else n).
    """

    law: str
    r0: np.ndarray
    r0_se: np.ndarray
    rss: np.ndarray
    n: np.ndarray
    ok: np.ndarray
    p1: np.ndarray
    p2: np.ndarray
    n_window: np.ndarray
    p2_se: np.ndarray | None = None

    @property
    def n_params(self) -> int:
        return N_PARAMS[self.law]

    @property
    def df(self) -> np.ndarray:
        return np.maximum(self.n_window - self.n_params, 0)

    @property
    def resid_sd(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.df > 0, np.sqrt(self.rss / np.maximum(self.df, 1)), np.nan)

    def aicc(self, rss_floor: np.ndarray) -> np.ndarray:
        """Small-sample Akaike criterion per well (Hurvich & Tsai 1989):
        ``n ln(RSS/n) + 2p + 2p(p + 1)/(n - p - 1)``; +inf where not ok or n <= p + 1. The RSS is
        floored at ``rss_floor`` (data resolution) so that exact fits do not reach -inf."""
        p = self.n_params
        n = self.n.astype(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            rss = np.maximum(self.rss, rss_floor)
            val = n * np.log(rss / n) + 2 * p + 2 * p * (p + 1) / (n - p - 1)
        good = self.ok & (n > p + 1) & np.isfinite(val)
        return np.where(good, val, np.inf)


def _nan(G: int) -> np.ndarray:
    return np.full(G, np.nan)


def _rate_bounds(c: Courses) -> tuple[np.ndarray, np.ndarray]:
    with np.errstate(divide="ignore", invalid="ignore"):
        lo = RATE_LOW_TIMES_TMAX / np.where(c.t_max > 0, c.t_max, np.nan)
        hi = RATE_HIGH_TIMES_TFIRST / np.where(np.isfinite(c.t_first), c.t_first, np.nan)
    return lo, np.maximum(hi, lo * 10.0)


# ------------------------------------------------------------------------------------- zero order
def fit_zero_order(c: Courses) -> LawFit:
    """``X = min(r t, 1)`` (capped) or ``y = r t``: the least-squares r of every split of the
    course into a straight part and a run-out part (readings from the split on predicted at
    X = 1), the best kept, then polished until the straight part is the set r t < 1 it implies.
    ``r0_se = s / sqrt(sum t^2)`` over the straight part, s^2 = RSS / (n - 1)."""
    T, Y, W = c.t, c.y, c.w
    G, m = c.shape
    cap = c.capped[:, None]
    tw = W * T
    cty = np.cumsum(tw * Y, axis=1)
    ctt = np.cumsum(tw * T, axis=1)

    def rss_of(r):
        pred = r[:, None] * T
        pred = np.where(cap, np.minimum(pred, 1.0), pred)
        res = Y - pred
        return c.rowsum(W * res * res)

    best = np.full(G, np.inf)
    r = _nan(G)
    for j in range(m):                      # a loop over reading slots, vectorised over wells
        with np.errstate(invalid="ignore", divide="ignore"):
            rj = np.where(ctt[:, j] > 0, cty[:, j] / ctt[:, j], np.nan)
        if j < m - 1:                       # uncapped courses have no run-out: the whole course only
            rj = np.where(c.capped, rj, np.nan)
        rs = rss_of(np.nan_to_num(rj))
        better = np.isfinite(rj) & (rs < best)
        best = np.where(better, rs, best)
        r = np.where(better, rj, r)
    for _ in range(3):                      # self-consistent straight part
        lin = (W > 0) & ((r[:, None] * T < 1.0) | ~cap)
        stt = c.rowsum(np.where(lin, tw * T, 0.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            rn = np.where(stt > 0, c.rowsum(np.where(lin, tw * Y, 0.0)) / stt, np.nan)
        rs = rss_of(np.nan_to_num(rn))
        better = np.isfinite(rn) & (rs < best)
        best = np.where(better, rs, best)
        r = np.where(better, rn, r)
    lin = (W > 0) & ((r[:, None] * T < 1.0) | ~cap)
    stt = c.rowsum(np.where(lin, tw * T, 0.0))
    df = c.n - 1
    with np.errstate(invalid="ignore", divide="ignore"):
        s2 = np.where(df > 0, best / np.maximum(df, 1), np.nan)
        se = np.sqrt(s2 / stt)
    # at least one reading after t = 0 on the straight part, or the rate is only a bound
    ok = np.isfinite(r) & np.isfinite(se) & (stt > 0)
    return LawFit("zero_order", r0=r, r0_se=np.where(ok, se, np.nan), rss=best, n=c.n, ok=ok, p1=r,
                  p2=_nan(G), n_window=c.n)


# ------------------------------------------------------------------------------------- first order
def _first_order(c: Courses, fixed: bool) -> _fit.FirstOrderFit:
    G = c.shape[0]
    t, y, g = c.flat()
    plateau = np.where(c.capped, 1.0, np.nan) if fixed else None
    return _fit.fit_first_order(t, y, g, G, plateau=plateau, n_grid=8, n_golden=4)


def fit_first_order(c: Courses, n_iter: int = 30) -> LawFit:
    """``X = 1 - exp(-k t)``, the plateau fixed at full conversion (capped wells only).

    One parameter, so a direct Gauss-Newton search on ln k: the best of six starts spread over
    a factor 1000 about the chord to the last reading, then steps kept only where they lower the
    RSS (halved where they do not), within the data-driven range of
    :func:`screenlab.kinetics.models.search_bounds_k`. ``r0_se = s / sqrt(sum J^2)`` with
    ``J = t exp(-k t)`` and s^2 = RSS / (n - 1); a k at an end of its range is not usable (a
    straight line, or a course complete by its first reading)."""
    from screenlab.kinetics import models

    G = c.shape[0]
    T, Y, W = c.t, c.y, c.w
    with np.errstate(divide="ignore", invalid="ignore"):
        k_lo, k_hi = models.search_bounds_k(c.t_max, np.where(np.isfinite(c.t_first), c.t_first, np.nan))
    lo, hi = np.log(k_lo), np.log(k_hi)

    def rss_of(u):
        r = Y + np.expm1(-np.exp(u)[:, None] * T)          # y - (1 - e^-kt)
        v = c.rowsum(W * r * r)
        return np.where(np.isfinite(v), v, np.inf)

    last = np.max(np.where(W > 0, T, 0.0), axis=1)
    y_last = np.sum(np.where((W > 0) & (T == last[:, None]), Y, 0.0), axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        chord = -np.log1p(-np.clip(y_last, 1e-4, 0.95)) / np.where(last > 0, last, np.nan)
    base = np.clip(np.log(np.where(np.isfinite(chord), chord, np.exp(lo) * 10)), lo, hi)
    u = base.copy()
    best = rss_of(u)
    for f in (-3.0, -1.0, 1.0, 3.0, 5.0):                 # starts at e^f times the chord's k
        cand = np.clip(base + f, lo, hi)
        r = rss_of(cand)
        take = r < best
        u, best = np.where(take, cand, u), np.where(take, r, best)
    # A well none of whose (halved) steps lowers its RSS keeps its ln k, so every later iteration
    # would compute the same step for it and keep nothing again: it is settled, and the element-wise
    # work of later iterations is done on the wells still moving only (``act``). The sums over
    # readings stay one matrix-vector product over all wells (rows of settled wells zero), so each
    # well's sum is the same product as when every well took part.
    G, m = c.shape
    ones = np.ones(m)
    buf = np.zeros((G, m))
    filled = np.zeros(0, dtype=np.int64)

    def rowsum_of(rows, v):
        nonlocal filled
        if len(rows) == G:                                   # every well, in order
            return v @ ones if m else np.zeros(G)
        buf[filled] = 0.0
        buf[rows] = v
        filled = rows
        return (buf @ ones)[rows] if m else np.zeros(len(rows))

    act = np.arange(G)
    Ta, Ya, Wa = T, Y, W
    for _ in range(n_iter):
        k = np.exp(u[act])[:, None]
        e = np.exp(-k * Ta)
        res = Ya - (1.0 - e)
        J = Ta * e * k                                       # d X / d ln k
        WJ = Wa * J                                          # W * J * J and W * J * res, in order
        a = rowsum_of(act, WJ * J)
        g = rowsum_of(act, WJ * res)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.clip(np.nan_to_num(g / a), -2.0, 2.0)
        moved = np.zeros(len(act), dtype=bool)
        todo = np.arange(len(act))                           # local rows not yet moved
        for frac in (1.0, 0.5, 0.25):                        # step halving, vectorised
            if todo.size == len(act):                        # (no copies while every well takes part)
                rows, st, Ts, Ys, Ws = act, step, Ta, Ya, Wa
            else:
                rows, st, Ts, Ys, Ws = act[todo], step[todo], Ta[todo], Ya[todo], Wa[todo]
            cand = np.clip(u[rows] + frac * st, lo[rows], hi[rows])
            rr = Ys + np.expm1(-np.exp(cand)[:, None] * Ts)  # y - (1 - e^-kt)
            v = rowsum_of(rows, Ws * rr * rr)
            r = np.where(np.isfinite(v), v, np.inf)
            take = r < best[rows]
            u[rows[take]], best[rows[take]] = cand[take], r[take]
            moved[todo[take]] = True
            todo = todo[~take]
            if not todo.size:
                break
        if not np.any(moved & (np.abs(step) > 1e-10)):
            break
        if not moved.all():
            keep = np.flatnonzero(moved)
            act = act[keep]
            Ta, Ya, Wa = T[act], Y[act], W[act]
    k = np.exp(u)
    e = np.exp(-k[:, None] * T)
    J = T * e
    sjj = c.rowsum(W * J * J)
    df = c.n - 1
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(np.where(df > 0, best / np.maximum(df, 1), np.nan) / sjj)
    inside = (u > lo + 1e-6) & (u < hi - 1e-6)
    ok = c.capped & inside & np.isfinite(se) & (c.n >= 2)
    return LawFit("first_order", r0=np.where(c.capped, k, np.nan), r0_se=np.where(ok, se, np.nan),
                  rss=np.where(c.capped, best, np.inf), n=c.n, ok=ok, p1=k, p2=_nan(G), n_window=c.n)


def fit_first_order_plateau(c: Courses) -> LawFit:
    """``y = b (1 - exp(-k t))`` with the plateau b fitted (any well)."""
    f = _first_order(c, fixed=False)
    with np.errstate(invalid="ignore"):
        inside = ~c.capped | (f.b1 <= PLATEAU_MAX)
        ok = (f.status == _fit.OK) & np.isfinite(f.rate_se) & (f.b1 > 0) & inside
    return LawFit("first_order_plateau", r0=f.rate, r0_se=np.where(ok, f.rate_se, np.nan), rss=f.rss, n=c.n,
                  ok=ok, p1=f.b1, p2=f.k, n_window=c.n)


# ---------------------------------------------------------------------------- two-parameter engine
def _nan_to_zero(x: np.ndarray) -> np.ndarray:
    """``x`` with NaN as 0.0 (infinities kept)."""
    return np.where(np.isnan(x), 0.0, x)


def _levenberg_marquardt(c: Courses, model, th1, th2, bounds, n_iter: int = 40, start=None):
    """Levenberg-Marquardt on two parameters per well (Marquardt 1963), all wells at once.

    ``model(th1, th2, state, rows) -> (pred, d pred/d th1, d pred/d th2, state)`` on the wells
    ``rows`` (index array) of the (G, m) grid; ``bounds`` = (lo1, hi1, lo2, hi2) per-well arrays.
    A step is kept only where it lowers the RSS (damping down by 3), else the damping goes up by
    8; a parameter at an end of its range that the step would push out stays there and the other
    one takes a one-parameter step (a projected step). Each iteration works on the wells not yet
    settled only. Returns th1, th2, rss, the 2 x 2 unscaled inverse (J^T J)^-1 as (i11, i12, i22),
    a singular mask and at-bound masks. ``start``: the model's output at (th1, th2) where known
    (from :func:`_best_start`); it is evaluated again only where the bounds move a start.
    """
    Y, W = c.y, c.w
    G = c.shape[0]
    lo1, hi1, lo2, hi2 = (np.broadcast_to(np.asarray(v, dtype=float), (G,)) for v in bounds)
    c1 = np.clip(th1, lo1, hi1)
    c2 = np.clip(th2, lo2, hi2)
    every = np.arange(G)
    if start is None:
        pred, j1, j2, state = model(c1, c2, None, every)
    else:
        # the model is evaluated well by well (element-wise, or a Newton solve per reading), so
        # its output at an unmoved start is the one already computed there
        moved = np.flatnonzero(~((c1 == th1) & (c2 == th2)))
        pred, j1, j2, state = start
        if moved.size:
            pred, j1, j2 = np.array(pred), np.array(j1), np.array(j2)
            state = None if state is None else np.array(state)
            pm, j1m, j2m, sm = model(c1[moved], c2[moved], None, moved)
            pred[moved], j1[moved], j2[moved] = pm, j1m, j2m
            if state is not None:
                state[moved] = sm
    th1, th2 = c1, c2
    pred, j1, j2 = np.array(pred), np.array(j1), np.array(j2)
    state = None if state is None else np.array(state)

    def rss_of(y, w, p):
        r = y - p
        v = c.rowsum(w * r * r)
        return np.where(np.isfinite(v), v, np.inf)

    rss = rss_of(Y, W, pred)
    lam = np.full(G, 1e-3)
    # The wells not yet settled (rows ``a`` of the grid) are worked on in compact copies, in the
    # order of ``a``, and written back as they settle; so every sum is formed on the same rows in
    # the same order as when they were taken from the full grid at each iteration.
    a = np.flatnonzero(np.isfinite(rss))
    ya, wa, pa, j1a, j2a = Y[a], W[a], pred[a], j1[a], j2[a]
    t1, t2, la, ra = th1[a], th2[a], lam[a], rss[a]
    l1, h1, l2, h2 = lo1[a], hi1[a], lo2[a], hi2[a]
    sa = None if state is None else state[a]

    def write_back(rows, loc):
        pred[rows], j1[rows], j2[rows] = pa[loc], j1a[loc], j2a[loc]
        th1[rows], th2[rows], rss[rows], lam[rows] = t1[loc], t2[loc], ra[loc], la[loc]
        if state is not None:
            state[rows] = sa[loc]

    for _ in range(n_iter):
        if not a.size:
            break
        res = ya - pa
        wj1 = wa * j1a                            # W * J1 * J1 = (W * J1) * J1, etc.: the same products
        wj2 = wa * j2a
        a11 = c.rowsum(wj1 * j1a)
        a12 = c.rowsum(wj1 * j2a)
        a22 = c.rowsum(wj2 * j2a)
        g1 = c.rowsum(wj1 * res)
        g2 = c.rowsum(wj2 * res)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            d1 = a11 * (1.0 + la) + 1e-300
            d2 = a22 * (1.0 + la) + 1e-300
            det = d1 * d2 - a12 * a12
            # an undefined step is no step (NaN -> 0; an infinite one is clipped below, as
            # np.nan_to_num's largest float would be)
            s1 = _nan_to_zero((d2 * g1 - a12 * g2) / det)
            s2 = _nan_to_zero((d1 * g2 - a12 * g1) / det)
            out2 = ((t2 <= l2) & (s2 < 0)) | ((t2 >= h2) & (s2 > 0))
            out1 = ((t1 <= l1) & (s1 < 0)) | ((t1 >= h1) & (s1 > 0))
            s1 = np.where(out2 & ~out1, _nan_to_zero(g1 / d1), np.where(out1, 0.0, s1))
            s2 = np.where(out1 & ~out2, _nan_to_zero(g2 / d2), np.where(out2, 0.0, s2))
        s1 = np.clip(s1, -3.0, 3.0)               # at most a factor e^3 per step on log parameters
        s2 = np.clip(s2, -3.0, 3.0)
        n1 = np.clip(t1 + s1, l1, h1)
        n2 = np.clip(t2 + s2, l2, h2)
        pn, j1n, j2n, st_n = model(n1, n2, sa, a)
        rn = rss_of(ya, wa, pn)
        better = rn < ra
        b = np.flatnonzero(better)
        pa[b], j1a[b], j2a[b] = pn[b], j1n[b], j2n[b]
        if state is not None:
            sa[b] = st_n[b]
        gain = np.where(better, (ra - rn) / np.maximum(ra, 1e-300), 0.0)
        t1[b], t2[b], ra[b] = n1[b], n2[b], rn[b]
        la = np.where(better, np.maximum(la / 3.0, 1e-9), np.minimum(la * 8.0, 1e9))
        settled = (better & (gain < 1e-11) & (np.abs(s1) < 1e-6) & (np.abs(s2) < 1e-6)) | (la >= 1e9)
        if settled.any():
            done = np.flatnonzero(settled)
            write_back(a[done], done)
            keep = np.flatnonzero(~settled)
            a = a[keep]
            ya, wa, pa, j1a, j2a = ya[keep], wa[keep], pa[keep], j1a[keep], j2a[keep]
            t1, t2, la, ra = t1[keep], t2[keep], la[keep], ra[keep]
            l1, h1, l2, h2 = l1[keep], h1[keep], l2[keep], h2[keep]
            if state is not None:
                sa = sa[keep]
    write_back(a, np.arange(a.size))
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        a11 = c.rowsum(W * j1 * j1)
        a12 = c.rowsum(W * j1 * j2)
        a22 = c.rowsum(W * j2 * j2)
        det = a11 * a22 - a12 * a12
        singular = ~(det > 1e-10 * a11 * a22)
        i11, i12, i22 = a22 / det, -a12 / det, a11 / det
    span1 = np.maximum(hi1 - lo1, 1e-12)
    span2 = np.maximum(hi2 - lo2, 1e-12)
    at1 = (th1 <= lo1 + 1e-6 * span1) | (th1 >= hi1 - 1e-6 * span1)
    at2 = (th2 <= lo2 + 1e-6 * span2) | (th2 >= hi2 - 1e-6 * span2)
    # the second parameter at an end of its range: the law is at its nested limit (saturation ->
    # zero or first order, deactivation -> first order); the rate's SE is then the one-parameter
    # fit's, with the second parameter held there
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        i11 = np.where(at2, 1.0 / a11, i11)
    singular = np.where(at2, ~(a11 > 0), singular)
    return th1, th2, rss, (i11, i12, i22), singular, at1, at2


def _best_start(c: Courses, model, candidates):
    """The candidate (th1, th2) pair with the lowest RSS per well, and the model's
    ``(pred, d/d th1, d/d th2, state)`` there (for :func:`_levenberg_marquardt`'s ``start``)."""
    best = np.full(c.shape[0], np.inf)
    b1 = b2 = ev = None
    every = np.arange(c.shape[0])
    for t1, t2 in candidates:               # a handful of candidates, each vectorised over wells
        t1 = np.nan_to_num(t1, nan=0.0)
        t2 = np.nan_to_num(t2, nan=0.0)
        out = model(t1, t2, None, every)
        pred = out[0]
        r = c.rowsum(c.w * (c.y - pred) ** 2)
        r = np.where(np.isfinite(r), r, np.inf)
        if b1 is None:
            b1, b2, best, ev = t1.copy(), t2.copy(), r, list(out)
            continue
        take = r < best
        b1, b2, best = np.where(take, t1, b1), np.where(take, t2, b2), np.where(take, r, best)
        for i in range(4):
            if ev[i] is not None:
                ev[i] = np.where(take[:, None] if np.ndim(ev[i]) == 2 else take, out[i], ev[i])
    return b1, b2, ev


# -------------------------------------------------------------------------------------- saturation
def solve_saturation_u(K, tau, u_start=None, n_max: int = 80) -> np.ndarray:
    """Root u >= 0 of ``K u + 1 - exp(-u) = tau`` (X = 1 - exp(-u) is the integrated saturation
    course at tau = (V/S0) t). g(u) is increasing and concave, so every Newton iterate lies below
    the root and they rise monotonically to it; the start is the larger of two lower bounds,
    ``tau / (1 + K)`` and ``(tau - 1) / K`` (and of one Newton step from ``u_start``). Each
    iteration works on the cells not yet converged only."""
    tau = np.asarray(tau, dtype=float)
    K = np.broadcast_to(np.asarray(K, dtype=float), tau.shape)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        u = np.maximum(np.maximum(tau / (1.0 + K), (tau - 1.0) / K), 0.0)
        if u_start is not None:
            us = np.maximum(np.broadcast_to(u_start, tau.shape), 0.0)
            e = np.exp(-us)
            step = (K * us + 1.0 - e - tau) / (K + e)
            u = np.maximum(u, us - step)
        u = np.array(u, dtype=float).ravel()
        # the cells not yet converged in compact copies, written back as they converge
        idx = np.arange(u.size)
        uu, kk, tt = u.copy(), K.ravel(), tau.ravel()
        for _ in range(n_max):
            e = np.exp(-uu)
            step = (kk * uu + 1.0 - e - tt) / (kk + e)
            uu = uu - step
            go = np.abs(step) > 1e-13 * (1.0 + np.abs(uu))
            if go.all():
                continue
            stop = ~go
            u[idx[stop]] = uu[stop]
            idx, uu, kk, tt = idx[go], uu[go], kk[go], tt[go]
            if not idx.size:
                break
        u[idx] = uu
    return np.maximum(u, 0.0).reshape(tau.shape)


def saturation_course(t, r0, K):
    """X(t) of the saturation law with initial rate ``r0`` (fraction/h) and K = Km/S0."""
    K = np.asarray(K, dtype=float)
    u = solve_saturation_u(K, np.asarray(r0, dtype=float) * (1.0 + K) * np.asarray(t, dtype=float))
    return -np.expm1(-u)


def fit_saturation(c: Courses, zero: LawFit, first: LawFit) -> LawFit:
    """Saturation law on (ln r0, ln K), r0 = V/(S0 + Km) in fraction/h, capped wells only."""
    G = c.shape[0]
    T = c.t
    r_lo, r_hi = _rate_bounds(c)
    lo1, hi1 = np.log(r_lo), np.log(r_hi)
    lo2 = np.full(G, np.log(K_RATIO_BOUNDS[0]))
    hi2 = np.full(G, np.log(K_RATIO_BOUNDS[1]))

    def model(lr, lk, u_prev, rows):
        r = np.exp(lr)[:, None]
        K = np.exp(lk)[:, None]
        tt = T[rows]
        tau = r * (1.0 + K) * tt
        u = solve_saturation_u(K, tau, u_prev)
        e = np.exp(-u)
        D = K + e
        return -np.expm1(-u), e * tau / D, e * K * (r * tt - u) / D, u

    rz = np.where(np.isfinite(zero.r0) & (zero.r0 > 0), zero.r0, np.nan)
    rf = np.where(np.isfinite(first.r0) & (first.r0 > 0), first.r0, np.nan)
    rz = np.where(np.isfinite(rz), rz, rf)
    rf = np.where(np.isfinite(rf), rf, rz)
    mid = np.sqrt(rz * rf)
    starts = [(np.log(rz), np.log(0.02)), (np.log(mid), np.log(0.5)), (np.log(rf * 1.2), np.log(3.0))]
    s1, s2, ev = _best_start(c, model, [(a, np.full(G, b)) for a, b in starts])
    return _rate_law_fit("saturation", c, _levenberg_marquardt(c, model, s1, s2, (lo1, hi1, lo2, hi2), start=ev),
                         np.isfinite(rz))


def _rate_law_fit(law: str, c: Courses, lm, started: np.ndarray) -> LawFit:
    """A two-parameter law on (ln r0, ln p2) as a LawFit: r0 = exp(th1) with the delta-method SE
    r0 sqrt(s^2 i11), s^2 = RSS / (n - 2); usable where it started, is not singular and r0 is not
    at an end of its range (capped wells only)."""
    th1, th2, rss, (i11, _, _), singular, at1, _ = lm
    df = c.n - 2
    with np.errstate(invalid="ignore", divide="ignore"):
        s2v = np.where(df > 0, rss / np.maximum(df, 1), np.nan)
        r0 = np.exp(th1)
        se = r0 * np.sqrt(s2v * i11)
    ok = c.capped & started & ~singular & ~at1 & np.isfinite(se)
    return LawFit(law, r0=np.where(c.capped, r0, np.nan), r0_se=np.where(ok, se, np.nan), rss=rss, n=c.n,
                  ok=ok, p1=r0, p2=np.exp(th2), n_window=c.n)


# ------------------------------------------------------------------------------------ deactivation
def deactivating_course(t, k, kd):
    """X(t) = 1 - exp(-(k/kd)(1 - exp(-kd t))) (-> first order as kd -> 0)."""
    t = np.asarray(t, dtype=float)
    kd = np.asarray(kd, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        E = np.where(kd > 0, -np.expm1(-kd * t) / np.where(kd > 0, kd, 1.0), t)
    return -np.expm1(-np.asarray(k, dtype=float) * E)


def fit_first_order_deactivating(c: Courses, first: LawFit, zero: LawFit) -> LawFit:
    """First order with first-order decay of the catalyst, on (ln k, ln kd), capped wells only."""
    G = c.shape[0]
    T = c.t
    r_lo, r_hi = _rate_bounds(c)
    with np.errstate(divide="ignore", invalid="ignore"):
        kd_lo = 1.0e-2 / np.where(c.t_max > 0, c.t_max, np.nan)
        kd_hi = 30.0 / np.where(np.isfinite(c.t_first), c.t_first, np.nan)
    bounds = (np.log(r_lo), np.log(r_hi), np.log(kd_lo), np.log(np.maximum(kd_hi, kd_lo * 10)))

    def model(lk, lkd, _state, rows):
        k = np.exp(lk)[:, None]
        kd = np.exp(lkd)[:, None]
        tt = T[rows]
        em = np.exp(-kd * tt)
        E = -np.expm1(-kd * tt) / kd
        z = k * E
        left = np.exp(-z)
        return -np.expm1(-z), left * z, left * k * (tt * em - E), None

    kf = np.where(np.isfinite(first.r0) & (first.r0 > 0), first.r0, np.nan)
    kz = np.where(np.isfinite(zero.r0) & (zero.r0 > 0), zero.r0, kf)
    kf = np.where(np.isfinite(kf), kf, kz)
    with np.errstate(divide="ignore", invalid="ignore"):
        inv_t = 1.0 / np.where(c.t_max > 0, c.t_max, np.nan)
    cands = [(np.log(kf), np.log(0.3 * inv_t)), (np.log(kf * 1.3), np.log(1.0 * inv_t)),
             (np.log(np.maximum(kf, kz) * 1.5), np.log(3.0 * inv_t))]
    s1, s2, ev = _best_start(c, model, cands)
    return _rate_law_fit("first_order_deactivating", c, _levenberg_marquardt(c, model, s1, s2, bounds, start=ev),
                         np.isfinite(kf))


# ------------------------------------------------------------------------------------- induction
def induction_course(t, k, tau):
    """X(t) = 1 - exp(-k (t - tau (1 - exp(-t / tau)))): first order with a catalyst that activates
    at first order (activity 1 - exp(-t / tau)); the rate at t = 0 is 0, later k (1 - X)."""
    t = np.asarray(t, dtype=float)
    tau = np.asarray(tau, dtype=float)
    return -np.expm1(-np.asarray(k, dtype=float) * (t + tau * np.expm1(-t / tau)))


def fit_first_order_induction(c: Courses, max_slope: np.ndarray) -> LawFit:
    """The induction course above on (ln k, ln tau), capped wells only. Not a law for the initial
    rate (that is 0 by construction): its AICc against the integrated laws is the induction test.
    ``r0`` holds k, the working rate once active (fraction/h)."""
    G = c.shape[0]
    T = c.t
    r_lo, r_hi = _rate_bounds(c)
    with np.errstate(divide="ignore", invalid="ignore"):
        tau_lo = 0.05 * np.where(np.isfinite(c.t_first), c.t_first, np.nan)
        tau_hi = 2.0 * np.where(c.t_max > 0, c.t_max, np.nan)
    bounds = (np.log(r_lo), np.log(r_hi), np.log(tau_lo), np.log(np.maximum(tau_hi, tau_lo * 10)))

    def model(lk, ltau, _state, rows):
        k = np.exp(lk)[:, None]
        tau = np.exp(ltau)[:, None]
        tt = T[rows]
        e = np.exp(-tt / tau)
        A = tt + tau * (e - 1.0)
        left = np.exp(-k * A)
        dA = tau * (-1.0 + e * (1.0 + tt / tau))
        return -np.expm1(-k * A), left * k * A, left * k * dA, None

    k0 = np.where(np.isfinite(max_slope) & (max_slope > 0), max_slope, np.nan)
    cands = [(np.log(k0), np.log(c.t_first)), (np.log(k0 * 1.5), np.log(3.0 * c.t_first)),
             (np.log(k0 * 1.5), np.log(0.3 * c.t_max))]
    s1, s2, ev = _best_start(c, model, cands)
    th1, th2, rss, (i11, _, _), singular, at1, at2 = _levenberg_marquardt(c, model, s1, s2, bounds, start=ev)
    ok = c.capped & np.isfinite(k0) & ~singular & ~at1 & ~at2 & np.isfinite(rss)
    return LawFit("first_order_induction", r0=np.exp(th1), r0_se=_nan(G), rss=rss, n=c.n, ok=ok,
                  p1=np.exp(th1), p2=np.exp(th2), n_window=c.n)


# ------------------------------------------------------------------------------ early polynomial
def early_window(c: Courses, window_frac: float, min_points: int) -> np.ndarray:
    """(G, m) mask of each well's early window: its fitted readings up to and including the first
    one at or above ``window_frac`` of the course's largest value, and at least ``min_points``
    readings (the first ones) when the course is that steep."""
    Y, W = c.y, c.w
    G, m = c.shape
    top = np.max(np.where(W > 0, Y, -np.inf), axis=1) if m else np.zeros(G)
    reach = (W > 0) & (Y >= window_frac * top[:, None]) & (c.t > 0)
    first = np.where(reach.any(axis=1), np.argmax(reach, axis=1), m - 1) if m else np.zeros(G, np.int64)
    order = np.cumsum(W > 0, axis=1)                          # fitted readings so far
    upto = order <= np.maximum(order[np.arange(G), first] if m else 0, min_points)[:, None]
    return (W > 0) & upto


def fit_early_polynomial(c: Courses, window: np.ndarray) -> LawFit:
    """``y = b t + c t^2`` (through the origin) over ``window``; r0 = b, SE from the 2 x 2 normal
    equations (time scaled by the window's last time for conditioning), df = n_window - 2."""
    G = c.shape[0]
    Wp = window.astype(float)
    scale = np.max(np.where(window, c.t, 0.0), axis=1) if c.shape[1] else np.zeros(G)
    scale = np.where(scale > 0, scale, 1.0)
    s = c.t / scale[:, None]
    s2 = s * s
    a11 = c.rowsum(Wp * s2)
    a12 = c.rowsum(Wp * s2 * s)
    a22 = c.rowsum(Wp * s2 * s2)
    g1 = c.rowsum(Wp * s * c.y)
    g2 = c.rowsum(Wp * s2 * c.y)
    nw = window.sum(axis=1).astype(np.int64)
    with np.errstate(invalid="ignore", divide="ignore"):
        det = a11 * a22 - a12 * a12
        b = (a22 * g1 - a12 * g2) / det
        cc = (a11 * g2 - a12 * g1) / det
        res = c.y - b[:, None] * s - cc[:, None] * s2
        rss = c.rowsum(Wp * res * res)
        df = nw - 2
        s2v = np.where(df > 0, rss / np.maximum(df, 1), np.nan)
        se_b = np.sqrt(s2v * a22 / det)
        se_c = np.sqrt(s2v * a11 / det)
    ok = (df > 0) & (det > 1e-12 * a11 * a22) & np.isfinite(b) & np.isfinite(se_b)
    return LawFit(GENERIC, r0=b / scale, r0_se=np.where(ok, se_b / scale, np.nan), rss=rss, n=c.n, ok=ok,
                  p1=b / scale, p2=cc / scale ** 2, n_window=nw, p2_se=np.where(ok, se_c / scale ** 2, np.nan))


#: the two-parameter integrated laws (the costly fits), fitted first to the wells that tell the
#: laws apart and to the others only where their catalyst chose one of them
ITERATIVE = ("saturation", "first_order_deactivating", "first_order_plateau")


def _take(f: LawFit, rows: np.ndarray) -> LawFit:
    return LawFit(f.law, **{k: getattr(f, k)[rows] for k in ("r0", "r0_se", "rss", "n", "ok", "p1", "p2", "n_window")},
                  p2_se=None if f.p2_se is None else f.p2_se[rows])


def scatter(fit: LawFit, rows: np.ndarray, into: LawFit | None, n: np.ndarray) -> LawFit:
    """``fit`` (of the wells ``rows``) written into ``into`` (or into an empty fit of all wells:
    not ok, NaN), as one LawFit of every well."""
    G = len(n)
    if into is None:
        nan = np.full(G, np.nan)
        into = LawFit(fit.law, r0=nan, r0_se=nan.copy(), rss=np.full(G, np.inf), n=np.asarray(n), ok=np.zeros(G, bool),
                      p1=nan.copy(), p2=nan.copy(), n_window=np.asarray(n).copy(),
                      p2_se=None if fit.p2_se is None else nan.copy())
    vals = {}
    for k in ("r0", "r0_se", "rss", "ok", "p1", "p2", "n_window"):
        v = np.array(getattr(into, k), copy=True)
        v[rows] = getattr(fit, k)
        vals[k] = v
    p2_se = None
    if into.p2_se is not None and fit.p2_se is not None:
        p2_se = np.array(into.p2_se, copy=True)
        p2_se[rows] = fit.p2_se
    return LawFit(into.law, n=np.asarray(n), p2_se=p2_se, **vals)


def fit_iterative(law: str, c: Courses, rows: np.ndarray, fits: dict[str, LawFit]) -> LawFit:
    """One of the :data:`ITERATIVE` laws fitted to the wells ``rows`` only and written into
    ``fits[law]`` (other wells keep what they had)."""
    if not len(rows):
        if fits.get(law) is not None:
            return fits[law]
        G = c.shape[0]
        nan = np.full(G, np.nan)
        return LawFit(law, r0=nan, r0_se=nan.copy(), rss=np.full(G, np.inf), n=c.n, ok=np.zeros(G, bool),
                      p1=nan.copy(), p2=nan.copy(), n_window=c.n.copy())
    sub = c.subset(rows)
    zero, first = _take(fits["zero_order"], rows), _take(fits["first_order"], rows)
    if law == "saturation":
        f = fit_saturation(sub, zero, first)
    elif law == "first_order_deactivating":
        f = fit_first_order_deactivating(sub, first, zero)
    else:
        f = fit_first_order_plateau(sub)
    return scatter(f, rows, fits.get(law), c.n)


#: wells from which :func:`fit_all` fits two laws at a time: below it the fits are bound by
#: numpy's per-call overhead, which holds the GIL, and two threads only slow each other down
#: (measured with scripts/benchmark.py's campaigns: 4 plates 24 -> 30 ms on two threads;
#: 400 plates, 38,000 wells, about 0.1 s faster)
PARALLEL_MIN_WELLS = 8000


def fit_all(c: Courses, window_frac: float = 0.5, min_points: int = 3, iterative_rows=None) -> dict[str, LawFit]:
    """Every law fitted to every well: ``{law: LawFit}`` (integrated laws and the early polynomial).

    ``iterative_rows``: fit the :data:`ITERATIVE` laws to these wells only (index array; the
    others get a not-ok fit, to be completed by :func:`fit_iterative`); default all wells.

    With two CPUs and at least :data:`PARALLEL_MIN_WELLS` wells the laws are fitted two at a time
    (:mod:`screenlab._parallel`): zero order beside first order, then the saturation law beside
    the other iterative ones, sharing nothing but the (read-only) courses and one-parameter fits,
    so the numbers are those of one after the other."""
    from screenlab._parallel import executor

    rows = np.arange(c.shape[0]) if iterative_rows is None else np.asarray(iterative_rows, dtype=np.int64)
    with executor(2 if c.shape[0] >= PARALLEL_MIN_WELLS else 1) as pool:
        zero = pool.submit(fit_zero_order, c)
        first = fit_first_order(c)
        one_param = {"zero_order": zero.result(), "first_order": first}   # read by both threads, written by neither
        side = pool.submit(fit_iterative, ITERATIVE[0], c, rows, one_param)
        out = dict(one_param)
        for law in ITERATIVE[1:]:
            out[law] = fit_iterative(law, c, rows, one_param)
        out[GENERIC] = fit_early_polynomial(c, early_window(c, window_frac, min_points))
        out[ITERATIVE[0]] = side.result()
    return {law: out[law] for law in (*INTEGRATED, GENERIC)}


def predict(law: str, p1, p2, t):
    """The course of ``law`` with parameters (p1, p2) at times ``t`` (y units: fraction of the
    maximum for the capped laws), for plots and residuals."""
    t = np.asarray(t, dtype=float)
    p1 = np.asarray(p1, dtype=float)
    p2 = np.asarray(p2, dtype=float)
    if law == "zero_order":
        return np.minimum(p1 * t, 1.0)
    if law == "first_order":
        return -np.expm1(-p1 * t)
    if law == "saturation":
        return saturation_course(t, p1, p2)
    if law == "first_order_plateau":
        return p1 * -np.expm1(-p2 * t)
    if law == "first_order_deactivating":
        return deactivating_course(t, p1, p2)
    if law == GENERIC:
        return p1 * t + p2 * t * t
    if law == "first_order_induction":
        return induction_course(t, p1, p2)
    raise ValueError(f"unknown rate law {law!r}")


__all__ = ["Courses", "DESCRIPTION", "GENERIC", "INTEGRATED", "ITERATIVE", "LawFit", "fit_iterative", "scatter", "NEEDS_MAXIMUM", "N_PARAMS",
           "deactivating_course", "dense_courses", "early_window", "fit_all", "fit_early_polynomial",
           "fit_first_order", "fit_first_order_deactivating", "fit_first_order_plateau", "fit_saturation",
           "fit_first_order_induction", "fit_zero_order", "induction_course", "predict", "saturation_course",
           "solve_saturation_u"]
