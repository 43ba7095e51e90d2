"""The one orchestration path: validated campaign -> kinetics -> plate quality.

The CLI, the app and the Python API all call :func:`analyse`; ranking and exports take its
:class:`Analysis`. Nothing here touches files or the store.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import pandas as pd

from screenlab.model import CampaignData
from screenlab.settings import AnalysisSettings


@dataclass(frozen=True)
class Analysis:
    """Everything computed for one campaign under one set of settings.

    ``kinetics`` is a :class:`screenlab.kinetics.KineticsResult`; ``quality`` has one row per
    plate (:func:`screenlab.stats.quality.plate_quality`); ``control`` is the benchmark's control
    chart (:func:`screenlab.stats.quality.control_chart`).
    """

    data: CampaignData
    settings: AnalysisSettings
    kinetics: Any
    quality: pd.DataFrame
    control: pd.DataFrame


def settings_for(data: CampaignData, **overrides: Any) -> AnalysisSettings:
    """Defaults, then the campaign's ``[analysis]`` table, then ``overrides`` (None keeps)."""
    return AnalysisSettings.from_mapping(data.manifest.analysis, **overrides)


def analyse(data: CampaignData, settings: AnalysisSettings | None = None, **overrides: Any) -> Analysis:
    """Run kinetics and plate quality for ``data``.

    ``settings`` defaults to :func:`settings_for` (``overrides`` are applied on top of it).
    """
    from screenlab.kinetics import analyse_kinetics
    from screenlab.stats.quality import control_chart, plate_quality

    if settings is None:
        settings = settings_for(data, **overrides)
    elif overrides:
        settings = AnalysisSettings.from_mapping(settings.to_dict(), **overrides)
    kin = analyse_kinetics(data, settings)
    control = control_chart(kin, data)
    quality = plate_quality(data, kin, settings, control=control)   # the chart made once
    return Analysis(data=data, settings=settings, kinetics=kin, quality=quality, control=control)
