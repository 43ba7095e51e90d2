"""The declared columns of every frame that flows through ScreenLab: name, dtype, unit, meaning.

One :class:`FrameSchema` per frame, in data-flow order (campaign frames, then the kinetics, quality
and ranking tables). The import builds the campaign frames to these schemas, the store keeps their
columns (``screenlab.store.storage`` derives its column lists from them), the CLI picks the
columns it prints from them (:meth:`FrameSchema.pick`), and the contributor guide's
"Frame contracts" tables are written from them (:func:`markdown`; ``tests/test_schema.py`` keeps
DEVELOPERS.md in step). :func:`check_frame` checks a frame against its schema at the entry of an
analysis step.

dtypes are kinds, not exact pandas dtypes: ``text`` (pandas ``str`` / ``string`` or object),
``float`` (any real number; integers are accepted), ``int`` (numpy or nullable integers) and
``bool``. A frame may carry more columns than its schema declares (named factors, diagnostics);
``extra`` says which. Units are written as in the column names (``mM``, ``h-1``, ``kJ/mol``);
``""`` is a count, a code, a text or a dimensionless ratio.

This module imports nothing heavy (pandas only inside :func:`check_frame`), so the CLI can build
its column lists without loading the analysis.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable

from screenlab.errors import FrameError

DTYPES = ("text", "float", "int", "bool")


@dataclass(frozen=True)
class Column:
    """One declared column. ``optional``: may be absent (e.g. only when the file had it)."""

    name: str
    dtype: str
    unit: str = ""
    meaning: str = ""
    optional: bool = False

    def __post_init__(self) -> None:
        if self.dtype not in DTYPES:
            raise ValueError(f"column {self.name!r}: dtype {self.dtype!r} is not one of {', '.join(DTYPES)}")


@dataclass(frozen=True)
class FrameSchema:
    """The columns of one frame, in their order, and where the frame is made."""

    name: str
    made_by: str
    columns: tuple[Column, ...]
    extra: str = ""

    def __post_init__(self) -> None:
        seen = [c.name for c in self.columns]
        if len(set(seen)) != len(seen):
            raise ValueError(f"frame {self.name!r} declares a column twice")

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)

    @property
    def required(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns if not c.optional)

    def column(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(f"frame {self.name!r} declares no column {name!r}")

    def pick(self, names: Iterable[str], *also: "FrameSchema") -> list[str]:
        """``names`` as a list, each checked to be a column of this frame (or of ``also``, frames
        joined to it), so that a column list of a surface cannot drift from the schema."""
        names = list(names)
        known = set(self.names).union(*(s.names for s in also))
        unknown = [n for n in names if n not in known]
        if unknown:
            raise KeyError(f"{', '.join(unknown)}: not declared in the {self.name!r} frame schema")
        return names


def _cols(*rows: tuple) -> tuple[Column, ...]:
    return tuple(Column(*row) if not isinstance(row, Column) else row for row in rows)


def _opt(name: str, dtype: str, unit: str, meaning: str) -> Column:
    return Column(name, dtype, unit, meaning, optional=True)


# --------------------------------------------------------------------------------------------
# the campaign frames (screenlab.model.CampaignData), canonical units

CATALYSTS = FrameSchema("catalysts", "screenlab.ingest.validate.check_catalysts", _cols(
    ("catalyst", "text", "", "catalyst id, unique in the campaign"),
    ("name", "text", "", "display name (the id when catalysts.csv gives none)"),
    ("family", "text", "", "family or class, for grouping"),
    ("molar_mass_g_mol", "float", "g/mol", "molar mass of the weighed material per formula unit; NaN when not given"),
    ("sites_per_unit", "float", "", "active sites per formula unit (default 1)"),
    ("metal_wt_pct", "float", "%", "metal content of a supported catalyst, by mass; NaN when not given"),
    ("metal_molar_mass_g_mol", "float", "g/mol", "molar mass of that metal; NaN when not given"),
    ("dispersion", "float", "", "fraction of metal atoms at the surface (default 1)"),
    _opt("alias", "text", "", "the id the catalyst had in an earlier campaign; present when catalysts.csv "
                              "has the column"),
))

PLATES = FrameSchema("plates", "screenlab.ingest.validate.check_plates", _cols(
    ("plate", "text", "", "plate (or vial block) id, unique in the campaign"),
    ("format", "int", "", "wells per plate: 24, 48, 96 or 384"),
    ("n_rows", "int", "", "rows of the format"),
    ("n_cols", "int", "", "columns of the format"),
    ("temperature_c", "float", "degC", "block temperature"),
    ("run_date", "text", "", "ISO date of the run (YYYY-MM-DD), or missing"),
    ("notes", "text", "", "free text, or missing"),
))

WELLS = FrameSchema("wells", "screenlab.ingest.validate.check_layout", _cols(
    ("plate", "text", "", "plate id"),
    ("well", "text", "", "canonical well name, e.g. A1"),
    ("row", "int", "", "row index, 0-based"),
    ("col", "int", "", "column index, 0-based"),
    ("role", "text", "", "sample, blank, reference or empty"),
    ("catalyst", "text", "", "catalyst id; missing for blank and empty wells"),
    ("loading", "float", "loading_unit", "amount of catalyst in the well"),
    ("loading_unit", "text", "", "umol, mg or mol%; missing without a catalyst"),
    ("substrate_conc_mM", "float", "mM", "initial substrate concentration; NaN for empty wells"),
    ("volume_uL", "float", "uL", "reaction volume; NaN for empty wells"),
    ("temperature_c", "float", "degC", "the well's own temperature if the layout gives one, else its plate's"),
), extra="one text column per named factor (CampaignData.factor_names), and the optional text column "
         "`sample` (a code naming the well, not a factor)")

READINGS = FrameSchema("readings", "screenlab.ingest.validate.check_readings", _cols(
    ("plate", "text", "", "plate id"),
    ("well", "text", "", "canonical well name"),
    ("analyte", "text", "", "analyte name (`product` when the campaign declares no analytes)"),
    ("time_h", "float", "h", "time since the start of the reaction, >= 0"),
    ("value", "float", "readout", "the reading in the readout's own scale: percent or fraction, product "
                                  "concentration in the manifest's unit, or absorbance"),
), extra="none; rows sorted by plate, well, analyte, time_h")

#: the campaign frames by their attribute name on CampaignData
CAMPAIGN_FRAMES: dict[str, FrameSchema] = {"catalysts": CATALYSTS, "plates": PLATES, "wells": WELLS,
                                           "readings": READINGS}


# --------------------------------------------------------------------------------------------
# kinetics (screenlab.kinetics; KineticsResult)

AMOUNTS = FrameSchema("amounts", "screenlab.kinetics.amounts.product_amounts", _cols(
    ("plate", "text", "", "plate id"),
    ("well", "text", "", "well name"),
    ("analyte", "text", "", "analyte (with enantiomers, the main product's rows are their sum)"),
    ("time_h", "float", "h", "time of the reading"),
    ("product_mM", "float", "mM", "product concentration from the readout"),
    ("conversion_pct", "float", "%", "product / (substrate x product_per_substrate) x 100; NaN without substrate"),
    ("baseline", "text", "", "absorbance readouts: the reading taken as zero, `t0` or `first_reading`"),
    ("range_code", "int", "", "0 in range, 1 above full scale, 2 above the detector's linear range"),
), extra="none; one row per reading")

_WELL_KEYS = _cols(
    ("plate", "text", "", "plate id"),
    ("well", "text", "", "well name"),
    ("row", "int", "", "row index, 0-based"),
    ("col", "int", "", "column index, 0-based"),
    ("role", "text", "", "sample, blank or reference"),
    ("catalyst", "text", "", "catalyst id; missing for blanks"),
    ("temperature_c", "float", "degC", "the well's temperature"),
    ("loading", "float", "loading_unit", "amount of catalyst"),
    ("loading_unit", "text", "", "umol, mg or mol%"),
    ("substrate_conc_mM", "float", "mM", "initial substrate concentration"),
    ("volume_uL", "float", "uL", "reaction volume"),
)
_RATE_COLUMNS = _cols(
    ("n_points", "int", "", "usable readings of the main analyte"),
    ("method", "text", "", "the rate law fitted (ratelaws.N_PARAMS), or end_point, first_reading (censored), no_data"),
    ("rate_mM_per_h", "float", "mM/h", "initial rate: the fitted law's slope at t = 0 (a lower bound when censored)"),
    ("rate_se_mM_per_h", "float", "mM/h", "standard error of the rate (delta method from the fit)"),
    ("rate_df", "int", "", "degrees of freedom of the rate's SE (readings - parameters)"),
    ("k_per_h", "float", "h-1", "rate / theoretical maximum product: the pseudo-first-order constant it implies"),
    ("last_time_h", "float", "h", "time of the last reading"),
    ("last_product_mM", "float", "mM", "product at the last reading"),
    ("last_conversion_pct", "float", "%", "conversion at the last reading"),
    ("flags", "text", "", "flag codes joined with ';' (screenlab flags)"),
    ("censored", "text", "", "'' measured, `lower` done before the first reading (the rate is a lower bound)"),
    ("rate_ci_low_mM_per_h", "float", "mM/h", "lower limit of the rate's interval (Student t)"),
    ("rate_ci_high_mM_per_h", "float", "mM/h", "upper limit of the rate's interval; NaN when censored"),
    ("window_points", "int", "", "readings the chosen law used"),
    ("law_p1", "float", "", "first parameter of the chosen law (ratelaws.LawFit)"),
    ("law_p2", "float", "", "second parameter of the chosen law"),
    ("law_capped", "bool", "", "the law's parameters are in conversion units (capped at full conversion)"),
    ("plateau_mM", "float", "mM", "the fitted final product level, where the law has one"),
    ("resid_sd_mM", "float", "mM", "residual SD of the fit"),
    ("noise_ratio", "float", "", "residual SD / the campaign's noise level at this signal"),
    ("max_rate_mM_per_h", "float", "mM/h", "steepest local slope (lines through three consecutive readings)"),
    ("has_t0", "bool", "", "the well has a reading at t = 0"),
    ("first_time_h", "float", "h", "first reading after t = 0"),
    ("first_conversion_pct", "float", "%", "conversion at that reading"),
    ("fit_points", "int", "", "readings in the fits"),
    ("substrate_integral_h", "float", "h", "integral of the substrate fraction left over the course"),
)
_FACTORS = "one text column per named factor of the campaign, after `volume_uL`"

WELL_RATES = FrameSchema("well_rates", "screenlab.kinetics.rates.well_rates (KineticsResult.per_well)",
                         _WELL_KEYS + _RATE_COLUMNS, extra=_FACTORS)

BLANKS = FrameSchema("blanks", "screenlab.kinetics.turnover.blank_rates", _cols(
    ("plate", "text", "", "plate id"),
    ("temperature_c", "float", "degC", "temperature of the blank wells"),
    ("substrate_conc_mM", "float", "mM", "substrate level the row serves"),
    ("n_blanks", "int", "", "blank wells used"),
    ("blank_rate_mM_per_h", "float", "mM/h", "mean blank rate (the background)"),
    ("blank_sd_mM_per_h", "float", "mM/h", "SD of the blank wells' rates (ddof 1)"),
    ("blank_se_mM_per_h", "float", "mM/h", "SE of the mean: max(SD, RMS of the fit SEs) / sqrt(n)"),
    ("blank_lod_mM_per_h", "float", "mM/h", "detection limit of the mean, 3 x SE"),
    ("flags", "text", "", "flag codes joined with ';'"),
    ("blank_df", "float", "", "degrees of freedom of the blank SE"),
    ("blank_detected", "bool", "", "the blank mean is at or above its detection limit"),
    ("blank_conc_mM", "float", "mM", "substrate level the blank wells had (another level's blank is scaled)"),
    ("n_blank_outliers", "int", "", "blank wells flagged as outliers"),
), extra="none; one row per plate x temperature x substrate level")

TURNOVER = FrameSchema("turnover", "screenlab.kinetics.turnover.well_turnover (KineticsResult.wells)",
                       _WELL_KEYS + _RATE_COLUMNS + _cols(
    ("sites_umol", "float", "umol", "active sites in the well (campaign-format rules)"),
    ("site_basis", "text", "", "per_unit (formula units x sites_per_unit) or surface_metal (metal x dispersion)"),
    ("blank_rate_mM_per_h", "float", "mM/h", "the blank rate subtracted"),
    ("blank_se_mM_per_h", "float", "mM/h", "its SE"),
    ("blank_lod_mM_per_h", "float", "mM/h", "its detection limit"),
    ("blank_df", "float", "", "its degrees of freedom"),
    ("net_rate_mM_per_h", "float", "mM/h", "rate - blank rate"),
    ("net_rate_se_mM_per_h", "float", "mM/h", "SE of the net rate (in quadrature)"),
    ("tof_per_h", "float", "h-1", "net rate x volume / sites (initial TOF; average TOF for an end point)"),
    ("tof_se_per_h", "float", "h-1", "SE of the TOF"),
    ("tof_per_s", "float", "s-1", "tof_per_h / 3600"),
    ("ton", "float", "", "turnover number at the last reading, blank product removed"),
    ("enhancement", "float", "", "well rate / blank rate"),
    ("enhancement_ci_low", "float", "", "lower limit (log scale, Welch-Satterthwaite df)"),
    ("enhancement_ci_high", "float", "", "upper limit (inf when the blank is below its detection limit)"),
    ("ln_enhancement_se", "float", "", "SE of ln(enhancement)"),
    ("enhancement_df", "float", "", "degrees of freedom of that SE"),
    ("outlier", "bool", "", "modified z of the well among its replicates above settings.outlier_z"),
    ("tof_bound_per_h", "float", "h-1", "the TOF bound of a censored well (lower or upper); NaN when measured"),
    ("tof_max_per_h", "float", "h-1", "TOF at the steepest local slope"),
), extra=_FACTORS + "; `censored` may also be `upper` (the net rate is not above the blank)")

RATES = FrameSchema("rates", "screenlab.kinetics.turnover.group_rates (KineticsResult.rates)", _cols(
    ("catalyst", "text", "", "catalyst id"),
    ("role", "text", "", "sample or reference"),
    ("temperature_c", "float", "degC", "temperature"),
    ("loading", "float", "loading_unit", "loading of the group's wells"),
    ("loading_unit", "text", "", "umol, mg or mol%"),
    ("substrate_conc_mM", "float", "mM", "initial substrate concentration"),
    ("n_wells", "int", "", "wells with a finite rate (failed wells left out)"),
    ("rate_mM_per_h", "float", "mM/h", "mean initial rate"),
    ("rate_sd_mM_per_h", "float", "mM/h", "SD of the wells' rates"),
    ("tof_per_h", "float", "h-1", "mean TOF (the bound when censored)"),
    ("tof_sd_per_h", "float", "h-1", "SD of the wells' TOFs"),
    ("tof_se_per_h", "float", "h-1", "SE of the mean TOF, with the blank's share and the campaign's plate scatter"),
    ("tof_df", "float", "", "degrees of freedom of the TOF SE (Welch-Satterthwaite)"),
    ("tof_ci_low", "float", "h-1", "lower limit of the TOF interval (the bound when censored lower; NaN when upper)"),
    ("tof_ci_high", "float", "h-1", "upper limit (the bound when censored upper; NaN when lower)"),
    ("ton", "float", "", "mean TON at the last reading"),
    ("ton_se", "float", "", "its SE: the replicates' SD / sqrt(n), with the campaign's plate scatter"),
    ("enhancement", "float", "", "geometric mean rate enhancement over the blank"),
    ("enhancement_ci_low", "float", "", "lower limit (log scale)"),
    ("enhancement_ci_high", "float", "", "upper limit (inf for a lower bound)"),
    ("is_standard", "bool", "", "the catalyst's standard condition (what the Arrhenius fit and the ranking use)"),
    ("plates", "text", "", "plates the wells are on, joined with ', '"),
    ("flags", "text", "", "flag codes joined with ';'"),
    ("tof_per_s", "float", "s-1", "tof_per_h / 3600"),
    ("n_plates", "int", "", "plates behind the group"),
    ("n_outliers", "int", "", "wells flagged as outliers (they stay in)"),
    ("rate_se_mM_per_h", "float", "mM/h", "SE of the mean rate"),
    ("selectivity_pct", "float", "%", "selectivity to the main product (NaN without declared by-products)"),
    ("selectivity_se", "float", "%", "its SE"),
    ("selectivity_df", "float", "", "its degrees of freedom"),
    ("selectivity_ci_low", "float", "%", "lower limit"),
    ("selectivity_ci_high", "float", "%", "upper limit"),
    ("ee_pct", "float", "%", "enantiomeric excess of the main product, first enantiomer positive (NaN without)"),
    ("ee_se", "float", "%", "its SE"),
    ("ee_df", "float", "", "its degrees of freedom"),
    ("ee_ci_low", "float", "%", "lower limit"),
    ("ee_ci_high", "float", "%", "upper limit"),
    ("censored", "text", "", "'' measured, `lower` or `upper` (see tof_ci_low / tof_ci_high)"),
    ("rate_law", "text", "", "the rate law chosen for the catalyst x condition"),
    ("tof_max_per_h", "float", "h-1", "mean TOF at the steepest local slope"),
    ("tof_rep_se_per_h", "float", "h-1", "replicate + blank part of the TOF SE (the Arrhenius weights use it)"),
    ("ton_df", "float", "", "degrees of freedom of ton_se (Welch-Satterthwaite: wells with a TON - 1, plate scatter)"),
    ("enhancement_ln_se", "float", "", "SE of ln(enhancement) behind its interval (NaN without a two-sided one)"),
    ("enhancement_df", "float", "", "degrees of freedom of that SE (Welch-Satterthwaite)"),
    ("in_arrhenius_fit", "bool", "", "the row is a point of the catalyst's Arrhenius fit"),
    ("arrhenius_left_out", "text", "", "why a standard-condition row was left out of that fit, or ''"),
    ("plate_scatter_ln", "float", "", "the campaign's plate-to-plate scatter tau on the ln TOF scale"),
), extra=_FACTORS.replace("`volume_uL`", "`substrate_conc_mM`") + "; one row per catalyst x temperature x condition")

ARRHENIUS = FrameSchema("arrhenius", "screenlab.kinetics.arrhenius.arrhenius_table (KineticsResult.arrhenius)", _cols(
    ("catalyst", "text", "", "catalyst id, or `(uncatalysed)` for the row fitted on the blanks"),
    ("role", "text", "", "sample, reference or blank"),
    ("n_temperatures", "int", "", "temperatures fitted"),
    ("t_min_c", "float", "degC", "lowest temperature fitted"),
    ("t_max_c", "float", "degC", "highest temperature fitted"),
    ("ea_kj_mol", "float", "kJ/mol", "apparent activation energy, -slope x R"),
    ("ea_se", "float", "kJ/mol", "its SE"),
    ("ea_ci_low", "float", "kJ/mol", "lower limit"),
    ("ea_ci_high", "float", "kJ/mol", "upper limit"),
    ("ln_a", "float", "", "ln of the pre-exponential factor (A in h-1)"),
    ("ln_a_se", "float", "", "its SE"),
    ("dh_kj_mol", "float", "kJ/mol", "Eyring activation enthalpy"),
    ("dh_se", "float", "kJ/mol", "its SE"),
    ("ds_j_mol_k", "float", "J/(mol K)", "Eyring activation entropy"),
    ("ds_se", "float", "J/(mol K)", "its SE"),
    ("dg_ref_kj_mol", "float", "kJ/mol", "Eyring free energy of activation at the reference temperature"),
    ("tof_ref_per_h", "float", "h-1", "TOF at the reference temperature from the line"),
    ("tof_ref_ci_low", "float", "h-1", "lower limit"),
    ("tof_ref_ci_high", "float", "h-1", "upper limit"),
    ("delta_ea_kj_mol", "float", "kJ/mol", "Ea(uncatalysed) - Ea(catalyst)"),
    ("delta_ea_ci_low", "float", "kJ/mol", "lower limit (Welch-Satterthwaite df)"),
    ("delta_ea_ci_high", "float", "kJ/mol", "upper limit"),
    ("curvature_p", "float", "", "p-value of a 1/T^2 term (4 or more temperatures)"),
    ("fit_intercept", "float", "", "intercept of ln TOF on 1/T"),
    ("fit_slope_k", "float", "K", "slope of ln TOF on 1/T"),
    ("cov_ii", "float", "", "variance of the intercept"),
    ("cov_is", "float", "K", "covariance of intercept and slope"),
    ("cov_ss", "float", "K^2", "variance of the slope"),
    ("fit_df", "float", "", "degrees of freedom of the intervals: n - 2 where the scatter scales the covariance, "
                            "else the effective df of the point variances"),
    ("flags", "text", "", "flag codes joined with ';'"),
    ("dg_ref_se", "float", "kJ/mol", "SE of dg_ref_kj_mol"),
    ("fit_weighted", "bool", "", "weighted fit (1/(var + tau^2)); else unweighted"),
    ("reference_temperature_c", "float", "degC", "the reference temperature"),
    ("chi2_per_df", "float", "", "weighted residual sum of squares per degree of freedom"),
    ("plate_scatter_ln", "float", "", "the campaign's plate scatter tau (ln TOF)"),
    ("left_out", "text", "", "temperatures left out of the fit and why, or ''"),
), extra="none; one row per catalyst plus the `(uncatalysed)` row (TOF in h-1; that row in mM/h)")

PREDICTED_TOF = FrameSchema("predicted_tof", "screenlab.kinetics.arrhenius.predict_tof", _cols(
    ("catalyst", "text", "", "catalyst id"),
    ("temperature_c", "float", "degC", "temperature of the prediction"),
    ("tof_per_h", "float", "h-1", "TOF from the Arrhenius line"),
    ("tof_ci_low", "float", "h-1", "lower limit"),
    ("tof_ci_high", "float", "h-1", "upper limit"),
    ("ln_tof_se", "float", "", "SE of ln TOF"),
    ("df", "float", "", "degrees of freedom"),
))

ORDERS = FrameSchema("orders", "screenlab.kinetics.orders.apparent_orders (KineticsResult.orders)", _cols(
    ("catalyst", "text", "", "catalyst id"),
    ("temperature_c", "float", "degC", "temperature"),
    ("variable", "text", "", "substrate_conc or loading"),
    ("n_levels", "int", "", "levels of the variable"),
    ("order", "float", "", "slope of ln net rate on ln variable"),
    ("order_se", "float", "", "its SE"),
    ("order_ci_low", "float", "", "lower limit (t, df = wells - 2)"),
    ("order_ci_high", "float", "", "upper limit"),
    ("flags", "text", "", "flag codes joined with ';'"),
    ("n_wells", "int", "", "wells in the fit"),
    ("level_min", "float", "", "lowest level (mM or the loading unit)"),
    ("level_max", "float", "", "highest level"),
    ("fixed", "text", "", "the conditions held fixed"),
    ("tof_slope", "float", "", "loading series: slope of ln TOF on ln loading"),
    ("tof_slope_se", "float", "", "its SE"),
    ("tof_slope_ci_low", "float", "", "lower limit"),
    ("tof_slope_ci_high", "float", "", "upper limit"),
    ("order_df", "float", "", "degrees of freedom"),
))

ORDER_POINTS = FrameSchema("order_points", "screenlab.kinetics.orders.order_points", _cols(
    ("series", "int", "", "the row of the orders table this well belongs to"),
    ("catalyst", "text", "", "catalyst id"),
    ("temperature_c", "float", "degC", "temperature"),
    ("variable", "text", "", "substrate_conc or loading"),
    ("plate", "text", "", "plate id"),
    ("well", "text", "", "well name"),
    ("level", "float", "", "the well's substrate concentration or loading, in level_unit"),
    ("level_unit", "text", "", "mM, or the loading unit"),
    ("net_rate_mM_per_h", "float", "mM/h", "blank-corrected initial rate"),
    ("tof_per_h", "float", "h-1", "initial TOF"),
    ("in_fit", "bool", "", "in the log-log fit (net rate and level > 0)"),
))

SELECTIVITY = FrameSchema("selectivity", "screenlab.kinetics.selectivity.well_selectivity (KineticsResult.selectivity)",
                          _cols(
    ("plate", "text", "", "plate id"),
    ("well", "text", "", "well name"),
    ("selectivity_pct", "float", "%", "main product / all declared products (slope through the origin)"),
    ("selectivity_se", "float", "%", "its SE"),
    ("ee_pct", "float", "%", "enantiomeric excess, first enantiomer positive"),
    ("ee_se", "float", "%", "its SE"),
    ("flags", "text", "", "flag codes joined with ';'"),
    ("role", "text", "", "sample, blank or reference"),
    ("catalyst", "text", "", "catalyst id"),
    ("temperature_c", "float", "degC", "temperature"),
    ("blank_corrected", "bool", "", "the blank's products were subtracted"),
    ("selectivity_n", "float", "", "readings used"),
    ("selectivity_df", "float", "", "degrees of freedom"),
    ("selectivity_blank_se", "float", "%", "the background constants' share of the SE"),
    ("selectivity_drift_pct", "float", "%", "change of the instantaneous selectivity over the observed range (points)"),
    ("selectivity_drift_p", "float", "", "p-value of that change"),
    ("ee_n", "float", "", "readings used"),
    ("ee_df", "float", "", "degrees of freedom"),
    ("ee_blank_se", "float", "%", "the background's share of the SE"),
    ("ee_drift_pct", "float", "%", "change of the ee over the observed range (points)"),
    ("ee_drift_p", "float", "", "p-value of that change"),
    ("products_max_mM", "float", "mM", "largest net amount of all declared products over the course"),
    ("main_max_mM", "float", "mM", "largest net amount of the main product"),
    ("background_share_pct", "float", "%", "share of the products at the last reading due to the blank"),
), extra="none; one row per non-empty well (NaN columns for a campaign without [analytes])")


# --------------------------------------------------------------------------------------------
# quality and ranking (screenlab.stats)

QUALITY = FrameSchema("quality", "screenlab.stats.quality.plate_quality", _cols(
    ("plate", "text", "", "plate id"),
    ("format", "int", "", "wells per plate"),
    ("temperature_c", "float", "degC", "block temperature"),
    ("n_sample", "int", "", "sample wells"),
    ("n_reference", "int", "", "benchmark wells"),
    ("n_blank", "int", "", "blank wells"),
    ("reference_mean_mM_per_h", "float", "mM/h", "mean benchmark rate"),
    ("reference_sd_mM_per_h", "float", "mM/h", "its SD"),
    ("blank_mean_mM_per_h", "float", "mM/h", "mean blank rate"),
    ("blank_sd_mM_per_h", "float", "mM/h", "its SD"),
    ("zprime", "float", "", "Z'-factor between benchmark and blank wells (ddof 1)"),
    ("signal_window", "float", "", "(|mu+ - mu-| - 3(sd+ + sd-)) / sd+"),
    ("blank_lod_mM_per_h", "float", "mM/h", "detection limit of the blank mean (3 x its SE)"),
    ("sample_active_pct", "float", "%", "share of sample wells detectably above the blank"),
    ("upper_n", "int", "", "sample wells in the plate's upper quartile"),
    ("upper_median_mM_per_h", "float", "mM/h", "their median rate"),
    ("upper_cv_pct", "float", "%", "their pooled replicate CV"),
    ("separation_basis", "text", "", "replicates or upper_quartile: the spread robust_zprime and ssmd use"),
    ("robust_zprime", "float", "", "Z'-factor of the upper-quartile sample wells against the blanks (medians, MAD)"),
    ("ssmd", "float", "", "strictly standardised mean difference of the same"),
    ("n_replicate_groups", "int", "", "sample replicate groups of 2 or more wells"),
    ("replicate_cv_median_pct", "float", "%", "median CV of those groups"),
    ("reference_cv_pct", "float", "%", "CV of the benchmark wells"),
    ("blank_expected_mM_per_h", "float", "mM/h", "the blank rate the campaign's blank Arrhenius line expects"),
    ("blank_ratio", "float", "", "blank rate / that expectation"),
    ("blank_z", "float", "", "the plate's blank against the line, in SEs"),
    ("edge_basis", "text", "", "replicates, bscore, or '' when untested"),
    ("edge_n", "int", "", "ring wells in the edge test"),
    ("interior_n", "int", "", "interior wells in it"),
    ("edge_shift_pct", "float", "%", "how much faster ring wells run than their replicates inside"),
    ("edge_p", "float", "", "Mann-Whitney U p-value of the edge test"),
    ("bscore_max_abs", "float", "", "largest |B-score| on the plate"),
    ("reference_loo_t", "float", "", "the benchmark's leave-one-out t on the control chart"),
    ("status", "text", "", "ok, flagged, unchecked (no benchmark) or failed"),
    ("flags", "text", "", "flag codes joined with ';'"),
), extra="none; one row per plate")

CONTROL_CHART = FrameSchema("control_chart", "screenlab.stats.quality.control_chart", _cols(
    ("plate", "text", "", "plate id"),
    ("run_date", "text", "", "run date"),
    ("catalyst", "text", "", "the benchmark"),
    ("temperature_c", "float", "degC", "temperature"),
    ("n_wells", "int", "", "benchmark wells"),
    ("value", "float", "value_unit", "the benchmark's mean TOF (else rate) on the plate"),
    ("value_unit", "text", "", "h-1 for TOF, mM/h for rate"),
    ("expected", "float", "value_unit", "value predicted at the plate's temperature"),
    ("log_ratio", "float", "", "ln(value / expected)"),
    ("centre", "float", "", "centre line (mean log ratio)"),
    ("lower", "float", "", "lower Shewhart limit (3 SD)"),
    ("upper", "float", "", "upper Shewhart limit"),
    ("lower_tof_per_h", "float", "value_unit", "lower limit on the plate's own scale"),
    ("upper_tof_per_h", "float", "value_unit", "upper limit on the plate's own scale"),
    ("loo_t", "float", "", "the plate against the other plates (leave one out)"),
    ("loo_limit", "float", "", "the t limit it is judged by"),
    ("basis", "text", "", "arrhenius or per_temperature"),
    ("flags", "text", "", "flag codes joined with ';'"),
))

RANKING = FrameSchema("ranking", "screenlab.stats.ranking.rank_candidates", _cols(
    ("rank", "int", "", "1 = best by point estimate; missing for unrankable rows"),
    ("catalyst", "text", "", "catalyst id"),
    ("role", "text", "", "sample or reference"),
    ("family", "text", "", "family from catalysts.csv"),
    ("metric", "text", "", "tof, enhancement, ea, ton, selectivity or ee"),
    ("estimate", "float", "unit", "the metric's estimate"),
    ("ci_low", "float", "unit", "lower limit of its interval"),
    ("ci_high", "float", "unit", "upper limit"),
    ("censored", "text", "", "'' measured, `lower` or `upper`: the estimate is a bound (no rank, no probabilities)"),
    ("unit", "text", "", "unit of the estimate"),
    ("favours", "text", "", "ee: the enantiomer in excess"),
    ("rank_low", "int", "", "best rank in the rank interval over the draws"),
    ("rank_high", "int", "", "worst rank in it"),
    ("p_top", "float", "", "P(rank <= top K)"),
    ("p_best", "float", "", "P(rank 1)"),
    ("p_beats_reference", "float", "", "P(better than the benchmark)"),
    ("n", "float", "", "wells (temperatures for Ea)"),
    ("temperature_c", "float", "degC", "temperature compared at"),
    ("basis", "text", "", "measured or arrhenius"),
    ("flags", "text", "", "flag codes joined with ';'"),
    ("reason", "text", "", "why a row cannot be ranked, or ''"),
), extra="none; ranked rows first, then the unrankable ones")


# --------------------------------------------------------------------------------------------
# checking and documenting

def _kind_ok(dtype, kind: str, empty: bool) -> bool:
    import numpy as np
    import pandas as pd

    if isinstance(dtype, pd.StringDtype):
        return kind == "text"
    if isinstance(dtype, pd.BooleanDtype):
        return kind == "bool"
    if pd.api.types.is_extension_array_dtype(dtype):
        if pd.api.types.is_integer_dtype(dtype):
            return kind in ("int", "float")
        if pd.api.types.is_float_dtype(dtype):
            return kind == "float"
        return False
    dtype = np.dtype(dtype)
    if dtype == object:
        return kind == "text" or empty   # an empty frame's columns have no dtype of their own
    return dtype.kind in {"float": "fiu", "int": "iu", "bool": "b", "text": ""}[kind]


def frame_problems(frame, schema: FrameSchema) -> list[str]:
    """What keeps ``frame`` from meeting ``schema``: missing columns and columns of another kind."""
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        return [f"is a {type(frame).__name__}, not a table (pandas DataFrame)"]
    out = []
    missing = [c for c in schema.required if c not in frame.columns]
    if missing:
        out.append(f"missing column{'s' if len(missing) > 1 else ''} {', '.join(missing)}")
    empty = len(frame) == 0
    for col in schema.columns:
        if col.name in frame.columns:
            dtype = frame[col.name].dtype
            if not _kind_ok(dtype, col.dtype, empty):
                out.append(f"column {col.name} holds {dtype}, expected {col.dtype}")
    return out


def check_frame(frame, schema: FrameSchema, *, where: str = ""):
    """``frame`` itself when it has every required column of ``schema`` with a compatible dtype;
    else :class:`~screenlab.errors.FrameError` naming the frame, the caller (``where``) and every
    missing or mistyped column. Extra columns are allowed."""
    problems = frame_problems(frame, schema)
    if problems:
        head = f"{where}: " if where else ""
        raise FrameError(f"{head}the {schema.name} frame does not meet its schema (screenlab.schema."
                         f"{schema.name}): {'; '.join(problems)}")
    return frame


def check_campaign(data, *, where: str = ""):
    """``data`` (a CampaignData) itself when each of its four frames meets its schema; else
    :class:`~screenlab.errors.FrameError` (see :func:`check_frame`)."""
    for attr, frame_schema in CAMPAIGN_FRAMES.items():
        check_frame(getattr(data, attr), frame_schema, where=where)
    return data


_EMPTY_DTYPES = {"text": "str", "float": "float64", "int": "int64", "bool": "bool"}


def empty_frame(schema: FrameSchema):
    """A frame with no rows and the schema's required columns, each of its kind's plain dtype
    (text ``str``, float ``float64``, int ``int64``, bool ``bool``)."""
    import pandas as pd

    return pd.DataFrame({c.name: pd.Series(dtype=_EMPTY_DTYPES[c.dtype]) for c in schema.columns if not c.optional})


def markdown(schema: FrameSchema) -> str:
    """The schema as the Markdown table the contributor guide shows."""
    lines = [f"`{schema.name}` (made by `{schema.made_by}`)", "",
             "| column | dtype | unit | meaning |", "|---|---|---|---|"]
    for c in schema.columns:
        unit = f"`{c.unit}`" if c.unit else ""
        lines.append(f"| `{c.name}` | {c.dtype} | {unit} | {c.meaning}{' (optional)' if c.optional else ''} |")
    if schema.extra:
        lines += ["", f"Other columns: {schema.extra}."]
    return "\n".join(lines)


def all_schemas() -> list[FrameSchema]:
    """Every declared frame schema, in data-flow order."""
    return [v for v in globals().values() if isinstance(v, FrameSchema)]


#: the markers around the generated tables in DEVELOPERS.md
GUIDE_BEGIN = "<!-- frame schemas: written by `python -m screenlab.schema`; do not edit by hand -->"
GUIDE_END = "<!-- end of frame schemas -->"


def guide_tables() -> str:
    """Every schema as a Markdown table, between the guide's markers (what DEVELOPERS.md holds)."""
    return "\n\n".join([GUIDE_BEGIN, *(markdown(s) for s in all_schemas()), GUIDE_END])


if __name__ == "__main__":  # pragma: no cover - prints the tables for the contributor guide
    print(guide_tables())
