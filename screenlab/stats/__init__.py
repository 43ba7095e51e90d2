"""Plate quality (Z', robust Z' / SSMD without a benchmark, B-scores, edge effects, control chart) and
uncertainty-aware ranking (requirements, bounds, adaptive Monte Carlo).

See :mod:`screenlab.stats.quality`, :mod:`screenlab.stats.ranking`, :mod:`screenlab.stats.constraints`
and :mod:`screenlab.stats.montecarlo`.
"""
from __future__ import annotations

from screenlab.stats.quality import control_chart, plate_quality, robust_zprime, ssmd, well_bscores, zprime
from screenlab.stats.ranking import METRICS, Metric, pareto, rank_candidates

__all__ = ["plate_quality", "control_chart", "well_bscores", "zprime", "robust_zprime", "ssmd", "rank_candidates",
           "pareto", "METRICS", "Metric"]
