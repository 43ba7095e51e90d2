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


def kinetics(data: CampaignData, settings: AnalysisSettings):
    """The kinetics of ``data`` (:class:`screenlab.kinetics.KineticsResult`) with the ring blanks of
    plates that show an edge effect left out of the blank means (:func:`edge_blanks`; flag
    ``blank_left_out``): a ring that reads differently from the interior would make its blanks
    misstate the background of the interior wells and pull the uncatalysed Arrhenius line. The edge
    test reads only the sample wells' rates, so it runs between the rate step and the blank step
    and every later stage runs once."""
    return _kinetics_and_edge(data, settings)[0]


def _kinetics_and_edge(data: CampaignData, settings: AnalysisSettings):
    """:func:`kinetics` and the edge test it ran (:func:`screenlab.stats.quality.edge_test`)."""
    from screenlab.kinetics import after_rates, rate_stage
    from screenlab.stats.quality import edge_test

    amounts, per_well, selectivity = rate_stage(data, settings)
    edge = edge_test(per_well, data) if len(per_well) and len(data.plates) else None
    drop = edge_blanks(per_well, data, edge=edge)
    ring = edge_ring_wells(per_well, data, edge=edge)
    return after_rates(data, settings, amounts, per_well, selectivity, drop_blank=drop, drop_wells=ring), edge


def analyse(data: CampaignData, settings: AnalysisSettings | None = None, **overrides: Any) -> Analysis:
    """Run kinetics and plate quality for ``data``.

    Where the edge test finds an edge effect on a plate that also has interior blanks, its ring
    blanks are left out of the blank means (:func:`kinetics`, :func:`edge_blanks`; flag
    ``blank_left_out``).

    ``settings`` defaults to :func:`settings_for` (``overrides`` are applied on top of it).
    """
    from screenlab.stats.quality import control_chart, plate_quality

    if settings is None:
        settings = settings_for(data, **overrides)
    elif overrides:
        settings = AnalysisSettings.from_mapping(settings.to_dict(), **overrides)
    kin, edge = _kinetics_and_edge(data, settings)
    control = control_chart(kin, data)
    quality = plate_quality(kin, data, settings, control=control, edge=edge)   # the chart and the edge test made once
    return Analysis(data=data, settings=settings, kinetics=kin, quality=quality, control=control)


def _ring_of_flagged_plates(per_well: pd.DataFrame, data: CampaignData, edge: pd.DataFrame | None):
    """For the rows of ``per_well``: (on the outer ring of its plate, on a plate whose edge test
    finds an edge effect, a plate code per row); None when no plate has an edge effect."""
    import numpy as np

    from screenlab._groups import factorize
    from screenlab.plates import is_edge
    from screenlab.stats.quality import edge_test

    if not len(per_well) or not len(data.plates):
        return None
    if edge is None:
        edge = edge_test(per_well, data)
    flagged = edge.loc[edge["edge_effect"], "plate"]
    if not len(flagged):
        return None
    w = per_well
    # the wells' plates as codes into their distinct names (a Series.map of a text column per row
    # is slow); a plate not in the plates table has no format and no ring
    code, names = factorize(w["plate"])
    row_in_plates = pd.Index(data.plates["plate"]).get_indexer(names)
    fmt_of = np.append(np.where(row_in_plates >= 0, data.plates["format"].to_numpy(dtype=float)[row_in_plates],
                                np.nan), np.nan)                  # the last entry: a well without a plate
    fmt = fmt_of[np.where(code >= 0, code, len(names))]
    ring = np.zeros(len(w), dtype=bool)
    known = ~np.isnan(fmt)
    ring[known] = is_edge(w["row"].to_numpy()[known], w["col"].to_numpy()[known], fmt[known].astype(np.int64))
    on_plate = w["plate"].isin(set(flagged.astype(str))).to_numpy()
    key = np.where(code >= 0, code, len(names))                   # a missing plate: one more key
    return ring, on_plate, key


def edge_ring_wells(per_well: pd.DataFrame, data: CampaignData, *, edge: pd.DataFrame | None = None):
    """One bool per row of ``per_well``: the sample and benchmark wells on the outer ring of a plate
    whose edge test finds an edge effect, whose replicate group (catalyst, role, temperature,
    loading, substrate level, factor levels) has a well in that plate's interior too (else None:
    nothing to leave out). Their rates read off as the ring does (evaporation, a warmer rim), while
    the interior wells carry the group: kept, a biased ring can outvote a correct interior well and
    make it look like a failed one. A group with ring wells only keeps them (``edge_effect`` on the
    plate says why to doubt them)."""
    import numpy as np

    from screenlab import _groups as grp
    from screenlab.kinetics.turnover import replicate_keys

    got = _ring_of_flagged_plates(per_well, data, edge)
    if got is None:
        return None
    ring, on_plate, plate_key = got
    w = per_well
    role = w["role"].astype(str).to_numpy()
    catalysed = (role == "sample") | (role == "reference")
    # the replicate groups of the turnover step, on one plate
    keys = replicate_keys(w, [f for f in data.factor_names if f in w.columns])
    group = grp.group_index([plate_key, *[grp.codes(w[c]) for c in keys]])
    has_interior = np.zeros(int(group.max()) + 1 if len(group) else 0, dtype=bool)
    has_interior[group[catalysed & ~ring & on_plate]] = True
    drop = catalysed & ring & on_plate & has_interior[group]
    return drop if drop.any() else None


def edge_blanks(per_well: pd.DataFrame, data: CampaignData, *, edge: pd.DataFrame | None = None):
    """One bool per row of ``per_well`` (the rate step's frame, or ``kin.wells``): the blank wells
    on the outer ring of a plate whose edge test finds an edge effect
    (:func:`screenlab.stats.quality.edge_test`, the test behind plate quality's ``edge_effect``)
    and that has blanks in its interior too (else None: nothing to leave out). ``edge``: that test
    when it is already made on ``per_well``."""
    import numpy as np

    got = _ring_of_flagged_plates(per_well, data, edge)
    if got is None:
        return None
    ring, on_plate, key = got
    blank = (per_well["role"].astype(str) == "blank").to_numpy()
    # keep a plate's ring blanks when it has no interior blank to take their place
    has_interior = np.zeros(int(key.max()) + 1, dtype=bool)
    has_interior[key[blank & ~ring & on_plate]] = True
    drop = blank & ring & on_plate & has_interior[key]
    return drop if drop.any() else None
