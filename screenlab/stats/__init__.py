"""Plate quality (Z', B-scores, edge effects, control chart) and uncertainty-aware ranking.

See :mod:`screenlab.stats.quality` and :mod:`screenlab.stats.ranking`.
"""
from __future__ import annotations

from screenlab.stats.quality import control_chart, plate_quality, well_bscores, zprime
from screenlab.stats.ranking import METRICS, Metric, pareto, rank_candidates

__all__ = ["plate_quality", "control_chart", "well_bscores", "zprime", "rank_candidates", "pareto", "METRICS",
           "Metric"]
