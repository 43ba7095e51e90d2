"""Kinetics core: amounts -> per-well rates -> blanks, sites, TOF/TON, enhancement -> per-group
rates -> Arrhenius / Eyring -> apparent orders (see DEVELOPERS.md "Kinetics").

:func:`analyse_kinetics` runs the whole chain for one campaign and returns a frozen
:class:`KineticsResult`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
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
    #: the rate step's per-well frame (screenlab.kinetics.rates.well_rates), kept so the stages
    #: after it can be run again (see :func:`after_rates`)
    per_well: pd.DataFrame = field(default_factory=pd.DataFrame, repr=False)


def analyse_kinetics(data, settings: AnalysisSettings | None = None) -> KineticsResult:
    """Run the kinetics chain on a :class:`screenlab.model.CampaignData`, every blank well in the
    blank means (:func:`screenlab.pipeline.kinetics` leaves out the ring blanks of plates with an
    edge effect: the analysis the commands, the app and the ranking use).

    ``settings`` defaults to the campaign's ``[analysis]`` table over the defaults.
    """
    if settings is None:
        settings = AnalysisSettings.from_mapping(data.manifest.analysis)
    return after_rates(data, settings, *rate_stage(data, settings))


def rate_stage(data, settings: AnalysisSettings):
    """The per-well stage: ``(amounts, per_well, selectivity)``, the rate fits included."""
    from screenlab.kinetics import amounts as _amounts
    from screenlab.kinetics import rates as _rates
    from screenlab.kinetics.selectivity import well_selectivity
    from screenlab.schema import check_campaign

    check_campaign(data, where="analyse_kinetics")  # frames meeting screenlab.schema, or a clear error
    amounts = _amounts.product_amounts(data)
    per_well = _rates.well_rates(data, settings, amounts=amounts)
    selectivity = well_selectivity(data, amounts, settings)
    return amounts, per_well, selectivity


def after_rates(data, settings, amounts, per_well, selectivity, drop_blank=None, drop_wells=None) -> KineticsResult:
    """Blanks, turnover, groups, Arrhenius and orders on top of the per-well rates. ``drop_blank``
    (one bool per row of ``per_well``) leaves blank wells out of the blank means; they keep their
    rows, flagged ``blank_left_out``. ``drop_wells`` (the same) leaves catalysed wells out of their
    group statistics, flagged ``edge_left_out``."""
    from screenlab.kinetics.arrhenius import arrhenius_table
    from screenlab.kinetics.orders import apparent_orders
    from screenlab.kinetics.turnover import blank_rates, group_rates, well_turnover

    if drop_blank is not None:
        drop_blank = np.asarray(drop_blank, dtype=bool)
    blanks = blank_rates(per_well, settings, exclude=drop_blank)
    wells = well_turnover(data, per_well, blanks, settings, excluded_blanks=drop_blank, excluded_wells=drop_wells)
    groups = group_rates(wells, settings, factor_names=data.factor_names, selectivity=selectivity)
    arr = arrhenius_table(groups, blanks, settings, product_per_substrate=data.manifest.product_per_substrate)
    groups = with_plate_scatter(groups, arr, settings)
    orders = apparent_orders(wells, settings, factor_names=data.factor_names)
    return KineticsResult(amounts=amounts, wells=wells, blanks=blanks, rates=groups, arrhenius=arr,
                          orders=orders, settings=settings, selectivity=selectivity, per_well=per_well)


def with_plate_scatter(groups: pd.DataFrame, arr: pd.DataFrame, settings: AnalysisSettings) -> pd.DataFrame:
    """The rates table with the Arrhenius step's verdict per row (``in_arrhenius_fit``,
    ``arrhenius_left_out``) and TOF intervals that hold across plates.

    ``tof_rep_se_per_h`` is the SE from the replicates, their fit errors and the blank; the
    campaign's plate-to-plate scatter (a relative SD on ln TOF, ``arr.attrs["plate_scatter_ln"]``,
    see :func:`screenlab.kinetics.arrhenius.plate_scatter`) is added in quadrature,
    ``tof_se_per_h = sqrt(rep_se^2 + (tau x TOF)^2)``, with Welch-Satterthwaite df, and the
    interval is recomputed; bounds (``censored``) keep theirs. TON takes the same plate term,
    ``ton_se = sqrt(rep_se^2 + (tau x TON)^2)`` with Welch-Satterthwaite ``ton_df``: in full, as if
    TON moved with the rate, which is conservative near full conversion, where it moves less.
    """
    from screenlab.kinetics.arrhenius import arrhenius_points
    from screenlab.uncertainty import t_quantile, welch_df

    if not len(groups):
        return groups.assign(in_arrhenius_fit=pd.Series(dtype=bool), arrhenius_left_out=pd.Series(dtype=object),
                             plate_scatter_ln=pd.Series(dtype=float))
    in_fit, reason = arrhenius_points(groups, settings)
    tau = float(arr.attrs.get("plate_scatter_ln", 0.0) or 0.0)
    tau_df = float(arr.attrs.get("plate_scatter_df", np.inf))
    tof = pd.to_numeric(groups["tof_per_h"], errors="coerce").to_numpy(float)
    se = pd.to_numeric(groups["tof_rep_se_per_h"], errors="coerce").to_numpy(float)
    df = pd.to_numeric(groups["tof_df"], errors="coerce").to_numpy(float)
    cens = groups["censored"].astype("string").fillna("").to_numpy(dtype=object)
    measured = (cens == "") & np.isfinite(tof) & np.isfinite(se)
    with np.errstate(invalid="ignore"):
        v_plate = (tau * tof) ** 2
        se_tot = np.sqrt(se ** 2 + v_plate)
        df_tot = welch_df(se ** 2, df, v_plate, tau_df)
        q = t_quantile(settings.confidence, df_tot)
    out = groups.copy()
    out["tof_se_per_h"] = np.where(measured, se_tot, out["tof_se_per_h"].to_numpy(float))
    out["tof_df"] = np.where(measured, df_tot, df)
    out["tof_ci_low"] = np.where(measured, tof - q * se_tot, out["tof_ci_low"].to_numpy(float))
    out["tof_ci_high"] = np.where(measured, tof + q * se_tot, out["tof_ci_high"].to_numpy(float))
    if "ton_se" in groups and "ton_df" in groups:
        ton = pd.to_numeric(groups["ton"], errors="coerce").to_numpy(float)
        ton_se = pd.to_numeric(groups["ton_se"], errors="coerce").to_numpy(float)
        ton_df = pd.to_numeric(groups["ton_df"], errors="coerce").to_numpy(float)
        has_se = np.isfinite(ton) & np.isfinite(ton_se)
        with np.errstate(invalid="ignore"):
            v_ton = (tau * ton) ** 2
            out["ton_se"] = np.where(has_se, np.sqrt(ton_se ** 2 + v_ton), ton_se)
            out["ton_df"] = np.where(has_se, welch_df(ton_se ** 2, ton_df, v_ton, tau_df), ton_df)
    out["in_arrhenius_fit"] = in_fit
    out["arrhenius_left_out"] = reason
    out["plate_scatter_ln"] = tau
    return out


__all__ = ["KineticsResult", "after_rates", "analyse_kinetics", "rate_stage", "with_plate_scatter"]
