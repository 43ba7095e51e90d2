"""Uncertainty-aware ranking of candidates by one metric.

Every candidate's metric is an estimate with a sampling distribution (its candidate table,
:mod:`screenlab.stats.candidates`). The ranking draws from each distribution (a draws x candidates
matrix, :mod:`screenlab.stats.sampling`), ranks every draw once (one sort per draw), and reports how
often each candidate comes first (``p_best``), lands in the top k (``p_top``) and the 2.5 / 97.5 %
points of its rank over the draws (``rank_low``, ``rank_high``; the ``(1 - confidence) / 2``
quantiles in general). The number of draws adapts to what the numbers need
(:func:`screenlab.stats.montecarlo.adaptive_rank_summary`); ``draws=N`` fixes it
(:func:`screenlab.stats.montecarlo.rank_summary`). Draws of different candidates are independent:
each candidate's wells, their replicate scatter and fit errors are its own. One part of a TOF or
enhancement SE is shared, though: candidates on one plate are corrected with the same blank mean, so
its error moves them together and does not change their order. Where that share is large (an
enhancement over a blank near its detection limit), the draws make the order of candidates on one
plate look less certain than it is: their rank intervals are wider and P(best) more spread than the
data imply (conservative, never overconfident).

Ea is ranked lower first (the lower apparent barrier); candidates flagged ``low_ea`` (likely
transport-controlled, whose low apparent Ea says nothing about the catalyst's own barrier) are
listed after the others unless ``include_transport_limited``. Requirements on the rates table
(``require``, :mod:`screenlab.stats.constraints`) remove the candidates clearly outside them from the
draws. A censored rate (the rates table's ``censored``: ``lower`` / ``upper`` bounds) is reported as
its bound, never drawn.

The Pareto set over several metrics is :func:`screenlab.stats.pareto.pareto`; the names of the
candidate tables, the sampling primitives and the Pareto module are re-exported here for older
callers (new code imports them from their modules).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screenlab.errors import UsageError
from screenlab.schema import RATES, FrameSchema, check_frame
from screenlab.stats.candidates import (DIRECTION, FLAGS, METRICS, NOT_SHOWN_ACTIVE, TOO_FAST, Metric,  # noqa: F401
                                        apply_requirements, candidate_table, get_metric, ranking_temperature,
                                        requirements)
from screenlab.stats.montecarlo import MC_SE, adaptive_rank_summary, rank_summary, share_se
from screenlab.stats.pareto import front_share, pareto  # noqa: F401  (re-exported)
from screenlab.stats.sampling import draw_matrix, rank_draws  # noqa: F401  (re-exported)

RANK_COLUMNS = ["rank", "catalyst", "role", "family", "metric", "estimate", "ci_low", "ci_high", "censored", "unit",
                "favours", "rank_low", "rank_high", "p_top", "p_best", "p_beats_reference", "n", "temperature_c",
                "basis", "flags", "reason"]

#: the columns of the rates table (:data:`screenlab.schema.RATES`) the ranking and its requirements
#: read, checked at the entry of :func:`rank_candidates`; the Arrhenius stage's additions
#: (``in_arrhenius_fit``, ...) are not needed, so a ``group_rates`` table ranks as it is
RANKING_RATES = FrameSchema("rates", RATES.made_by, tuple(RATES.column(c) for c in (
    "catalyst", "role", "temperature_c", "n_wells", "is_standard", "plates", "flags", "censored",
    "tof_per_h", "tof_se_per_h", "tof_df", "ton", "ton_se", "enhancement", "enhancement_ci_low",
    "enhancement_ci_high", "selectivity_pct", "selectivity_se", "selectivity_df", "ee_pct", "ee_se", "ee_df")),
    extra="any (the ranking reads only these)")


def rank_candidates(kin, quality=None, *, metric: str = "tof", at_temperature_c: float | None = None,
                    top_k: int = 5, draws: int | None = None, seed: int = 0, confidence: float = 0.95,
                    catalysts: pd.DataFrame | None = None, enantiomers=None, enantiomer: str | None = None,
                    include_transport_limited: bool = False, require=(), mc_se: float | None = None) -> pd.DataFrame:
    """Rank candidates by a metric with their uncertainty.

    ``metric`` is a key of :data:`METRICS`: ``tof`` (high is good; TOF at ``at_temperature_c``,
    default the settings' reference temperature: the measured standard-condition group when that
    temperature was measured, else the Arrhenius prediction with its interval), ``enhancement``
    (high), ``ea`` (low is good: the lower apparent barrier first; candidates flagged ``low_ea``,
    likely transport-controlled, are listed after the others unless ``include_transport_limited``),
    ``ton`` (high), ``selectivity`` (high), ``ee`` (by magnitude, either enantiomer, with the
    favoured one in ``favours``; with ``enantiomer`` one of ``enantiomers``, the campaign's
    [analytes] pair, by the excess of that enantiomer). ``quality`` (from :func:`plate_quality`)
    adds plate flags and marks candidates measured only on failed plates unrankable.
    ``catalysts`` (CampaignData.catalysts) supplies the family column. ``require``: expressions
    ``column>=value`` / ``column<=value`` on the rates table (:mod:`screenlab.stats.constraints`);
    candidates clearly outside one are listed after the ranked ones with the reason, those that may
    or may not meet it are ranked and flagged ``constraint_uncertain``; every probability is over
    the candidates that remain.

    ``draws`` None (default): as many draws as the numbers need (:mod:`screenlab.stats.montecarlo`:
    every reported probability to a Monte Carlo SE below ``mc_se``, default 0.005, and stable rank
    bounds); a number: exactly that many draws, every candidate ranked in each.

    Columns: ``rank`` (1 = best by point estimate; NA for unrankable), ``catalyst, role, family,
    metric, estimate, ci_low, ci_high`` (``confidence`` interval of the sampling distribution),
    ``censored`` ('' measured; ``lower`` / ``upper``: the estimate is a bound, the open side of the
    interval empty), ``unit, favours`` (ee: the enantiomer in excess, '?' appended when its interval
    includes 0), ``rank_low, rank_high`` (rank interval over the draws), ``p_top`` (P(rank <=
    top_k)), ``p_best`` (P(rank 1); sums to 1 over the ranked rows), ``p_beats_reference``
    (P(better than the benchmark); NaN for the benchmark and when it is unranked), ``n`` (wells, or
    temperatures for Ea), ``temperature_c, basis, flags, reason``. Ranked rows first, then the
    unrankable ones with their reason: too fast to measure (lower bounds, largest first), outside a
    requirement, transport-limited (Ea), then the others by name. The benchmark is ranked like any
    candidate and carries the flag ``reference``. ``attrs``: ``direction`` (what comes first, in
    words), ``requirements`` (their texts) and ``monte_carlo`` (``draws``, ``draws_ranked``,
    ``mc_se`` (the largest Monte Carlo SE of a reported probability), ``mc_se_target``,
    ``rank_bound_halfwidth``, ``rank_bound_stable_share``, ``n_contenders``). Reproducible for a
    given ``seed``.
    """
    check_frame(kin.rates, RANKING_RATES, where="rank_candidates")   # the columns it reads, or a clear error
    m = get_metric(metric)
    if draws is not None and draws < 1:
        raise UsageError("draws must be at least 1")
    if top_k < 1:
        raise UsageError("top must be at least 1")
    mc_se = MC_SE if mc_se is None else float(mc_se)
    t_rank = ranking_temperature(kin, at_temperature_c)
    reqs = requirements(require, kin.rates)
    t = candidate_table(kin, quality, metric=metric, at_temperature_c=at_temperature_c, confidence=confidence,
                        catalysts=catalysts, enantiomers=enantiomers, enantiomer=enantiomer,
                        include_transport_limited=include_transport_limited)
    t = apply_requirements(t, kin, reqs, t_rank, confidence)
    ok = (t["reason"] == "").to_numpy()
    r = t[ok].reset_index(drop=True)
    u = _unrankable(t[~ok])
    r["metric"], u["metric"] = m.name, m.name
    r["unit"], u["unit"] = m.unit, m.unit
    mc = {"draws": 0, "draws_ranked": 0, "mc_se": 0.0, "mc_se_target": mc_se if draws is None else None,
          "rank_bound_halfwidth": 0.0, "rank_bound_stable_share": 1.0, "n_contenders": 0}
    if len(r):
        r = _ranked(r, m, mc, draws=draws, seed=seed, top_k=top_k, confidence=confidence, mc_se=mc_se)
    out = pd.concat([r, u], ignore_index=True) if len(u) else r
    for c in ("rank_low", "rank_high", "p_top", "p_best", "p_beats_reference", "rank"):
        if c not in out:
            out[c] = np.nan
    out["rank"] = out["rank"].astype("Int64")
    out["rank_low"] = out["rank_low"].astype("Int64")
    out["rank_high"] = out["rank_high"].astype("Int64")
    out = out[RANK_COLUMNS].reset_index(drop=True)
    out.attrs = {"metric": m.name, "direction": _direction(m, enantiomer, include_transport_limited),
                 "requirements": [q.text for q in reqs], "monte_carlo": mc, "top_k": int(top_k),
                 "temperature_c": t_rank if m.source == "rates" else None}
    return out


def _unrankable(u: pd.DataFrame) -> pd.DataFrame:
    """The unrankable rows in their listed order: too fast (largest bound first), outside a
    requirement, transport-limited, then the others, each by name."""
    u = u.copy()
    u["_key"] = np.where(u["order"].to_numpy() == 1, -u["estimate"].to_numpy(float), 0.0)
    return u.sort_values(["order", "_key", "catalyst"], kind="stable").drop(columns="_key").reset_index(drop=True)


def _ranked(r: pd.DataFrame, m: Metric, mc: dict, *, draws, seed, top_k, confidence, mc_se) -> pd.DataFrame:
    """The rankable rows with their rank, rank interval and probabilities, best first; ``mc`` gets
    the Monte Carlo figures (adaptive when ``draws`` is None, else exactly ``draws`` draws)."""
    k = len(r)
    sign = 1.0 if m.higher_is_better else -1.0
    absolute = bool(r["absolute"].any())
    mu = sign * r["mu"].to_numpy(float)
    key = np.abs(mu) if absolute else mu
    ref = np.flatnonzero(r["role"].to_numpy() == "reference")
    j = int(ref[np.argmax(key[ref])]) if ref.size else None        # the best-placed benchmark
    sig, dfs = r["sigma"].to_numpy(float), r["df"].to_numpy(float)
    if draws is None:
        summ = adaptive_rank_summary(mu, sig, dfs, seed, top_k=top_k, confidence=confidence, reference=j,
                                     absolute=absolute, mc_se=mc_se)
        mc.update(draws=int(summ["draws"]), draws_ranked=int(summ["draws_ranked"]), mc_se=float(summ["mc_se"]),
                  rank_bound_halfwidth=float(summ["rank_bound_halfwidth"]),
                  rank_bound_stable_share=float(summ["rank_bound_stable_share"]),
                  n_contenders=int(summ["n_contenders"]))
    else:
        summ = rank_summary(mu, sig, dfs, draws, seed, top_k=top_k, confidence=confidence, reference=j,
                            absolute=absolute)
        probs = [summ["p_top"], summ["p_best"]] + ([np.delete(summ["p_beats"], j)] if j is not None else [])
        worst = max(float(np.max(share_se(np.rint(p * draws), draws))) for p in probs if p.size)
        mc.update(draws=int(draws), draws_ranked=int(draws), mc_se=worst, n_contenders=k)
    r["rank_low"] = summ["rank_low"].astype(int)
    r["rank_high"] = summ["rank_high"].astype(int)
    r["p_top"] = summ["p_top"]
    r["p_best"] = summ["p_best"]
    pb = np.asarray(summ["p_beats"], float).copy()
    if ref.size:
        pb[ref] = np.nan
    r["p_beats_reference"] = pb
    point = np.argsort(-key, kind="stable")
    rank = np.empty(k, dtype=np.int64)
    rank[point] = np.arange(1, k + 1)
    r["rank"] = rank
    return r.sort_values("rank").reset_index(drop=True)


def _direction(m: Metric, enantiomer: str | None, include_transport_limited: bool) -> str:
    """What comes first, in words (the ranking's ``direction`` attribute)."""
    direction = DIRECTION.get(m.name, "higher first" if m.higher_is_better else "lower first")
    if m.name == "ee" and enantiomer is not None:
        direction = f"larger excess of {enantiomer} first (signed: the other enantiomer in excess counts negative)"
    if m.name == "ea" and include_transport_limited:
        direction = "lower apparent barrier first (Ea ascending), likely transport-controlled candidates included"
    return direction


__all__ = ["DIRECTION", "FLAGS", "METRICS", "Metric", "NOT_SHOWN_ACTIVE", "RANKING_RATES", "RANK_COLUMNS", "TOO_FAST",
           "candidate_table", "draw_matrix", "front_share", "pareto", "rank_candidates", "rank_draws",
           "rank_summary"]
