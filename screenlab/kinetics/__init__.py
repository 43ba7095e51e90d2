"""Kinetics core: amounts -> per-well rates -> blanks, sites, TOF/TON, enhancement -> per-group
rates -> Arrhenius / Eyring -> apparent orders (see DEVELOPERS.md "Kinetics").

:func:`analyse_kinetics` runs the whole chain for one campaign and returns a frozen
:class:`KineticsResult`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from screenlab.settings import AnalysisSettings


@dataclass(frozen=True)
class KineticsResult:
    """Everything the kinetics core computes for one campaign under one set of settings.

    amounts    one row per reading (:func:`screenlab.kinetics.amounts.product_amounts`)
    wells      one row per non-empty well: rates plus sites, blank correction, TOF, TON,
               enhancement, outlier (:func:`screenlab.kinetics.turnover.well_turnover`)
    blanks     one row per plate x temperature (:func:`screenlab.kinetics.turnover.blank_rates`)
    rates      one row per catalyst x temperature x condition
               (:func:`screenlab.kinetics.turnover.group_rates`)
    arrhenius  one row per catalyst plus "(uncatalysed)"
               (:func:`screenlab.kinetics.arrhenius.arrhenius_table`)
    orders     apparent orders (:func:`screenlab.kinetics.orders.apparent_orders`)
    settings   the :class:`AnalysisSettings` used
    selectivity  one row per non-empty well: selectivity to the main product and ee, with SEs and
               flags (:func:`screenlab.kinetics.selectivity.well_selectivity`; NaN values for a
               campaign without by-products or enantiomers). The rates table carries the group
               values (``selectivity_pct``, ``ee_pct`` and their intervals).
    """

    amounts: pd.DataFrame
    wells: pd.DataFrame
    blanks: pd.DataFrame
    rates: pd.DataFrame
    arrhenius: pd.DataFrame
    orders: pd.DataFrame
    settings: AnalysisSettings
    selectivity: pd.DataFrame = field(default_factory=pd.DataFrame)


def analyse_kinetics(data, settings: AnalysisSettings | None = None) -> KineticsResult:
    """Run the kinetics chain on a :class:`screenlab.model.CampaignData`.

    ``settings`` defaults to the campaign's ``[analysis]`` table over the defaults.
    """
    from screenlab.kinetics import amounts as _amounts
    from screenlab.kinetics import rates as _rates
    from screenlab.kinetics.arrhenius import arrhenius_table
    from screenlab.kinetics.orders import apparent_orders
    from screenlab.kinetics.selectivity import well_selectivity
    from screenlab.kinetics.turnover import blank_rates, group_rates, well_turnover

    if settings is None:
        settings = AnalysisSettings.from_mapping(data.manifest.analysis)
    amounts = _amounts.product_amounts(data)
    per_well = _rates.well_rates(data, settings, amounts=amounts)
    blanks = blank_rates(per_well, settings)
    wells = well_turnover(data, per_well, blanks, settings)
    selectivity = well_selectivity(data, amounts, settings)
    groups = group_rates(wells, settings, factor_names=data.factor_names, selectivity=selectivity)
    arr = arrhenius_table(groups, blanks, settings)
    orders = apparent_orders(wells, settings, factor_names=data.factor_names)
    return KineticsResult(amounts=amounts, wells=wells, blanks=blanks, rates=groups, arrhenius=arr,
                          orders=orders, settings=settings, selectivity=selectivity)


__all__ = ["KineticsResult", "analyse_kinetics"]
