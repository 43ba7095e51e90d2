"""Plate quality (Z', robust Z' / SSMD without a benchmark, B-scores, edge effects, control chart) and
uncertainty-aware ranking (requirements, bounds, adaptive Monte Carlo).

See :mod:`screenlab.stats.quality`, :mod:`screenlab.stats.candidates` (metric table, candidate tables),
:mod:`screenlab.stats.ranking`, :mod:`screenlab.stats.montecarlo` (fixed and adaptive draws),
:mod:`screenlab.stats.sampling` (draws, orders, ranks), :mod:`screenlab.stats.pareto` and
:mod:`screenlab.stats.constraints`. (``screenlab.stats.pareto`` is the module; the function is
``screenlab.stats.pareto.pareto``, also ``screenlab.pareto``.)
"""
from __future__ import annotations

from screenlab.stats.quality import control_chart, plate_quality, robust_zprime, ssmd, well_bscores, zprime
from screenlab.stats.candidates import METRICS, Metric
from screenlab.stats.ranking import rank_candidates

__all__ = ["plate_quality", "control_chart", "well_bscores", "zprime", "robust_zprime", "ssmd", "rank_candidates",
           "METRICS", "Metric"]
