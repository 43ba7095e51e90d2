"""``screenlab rates``, ``screenlab arrhenius`` and ``screenlab orders``: kinetics tables of a stored campaign.

rates      one row per catalyst x temperature x condition (``--per-well``: one row per well), with
           selectivity to the main product and ee where the campaign declares several analytes
arrhenius  one row per catalyst at its standard condition, plus the "(uncatalysed)" row
orders     apparent orders in substrate concentration and in catalyst loading

Settings come from the campaign's [analysis] table, overridden by the flags given here.
"""
from __future__ import annotations

from screenlab import schema
from screenlab.cli.common import add_format_option, add_store_option, emit

# the columns each command prints, checked against the frames' schemas (screenlab.schema)
RATES_COLUMNS = schema.RATES.pick([
    "catalyst", "role", "temperature_c", "loading", "loading_unit", "substrate_conc_mM", "n_wells", "rate_law",
    "censored", "rate_mM_per_h", "tof_per_h", "tof_ci_low", "tof_ci_high", "tof_max_per_h", "ton", "enhancement",
    "enhancement_ci_low", "enhancement_ci_high", "selectivity_pct", "selectivity_ci_low", "selectivity_ci_high",
    "ee_pct", "ee_ci_low", "ee_ci_high", "is_standard", "in_arrhenius_fit", "flags"])
WELL_COLUMNS = schema.TURNOVER.pick([
    "plate", "well", "role", "catalyst", "temperature_c", "loading", "loading_unit", "substrate_conc_mM",
    "method", "censored", "rate_mM_per_h", "rate_se_mM_per_h", "blank_rate_mM_per_h", "net_rate_mM_per_h",
    "sites_umol", "tof_per_h", "tof_se_per_h", "tof_max_per_h", "ton", "enhancement", "enhancement_ci_low",
    "enhancement_ci_high", "selectivity_pct", "selectivity_se", "ee_pct", "ee_se", "noise_ratio", "outlier",
    "flags"], schema.SELECTIVITY)
ARRHENIUS_COLUMNS = schema.ARRHENIUS.pick([
    "catalyst", "n_temperatures", "t_min_c", "t_max_c", "ea_kj_mol", "ea_se", "ea_ci_low", "ea_ci_high", "ln_a",
    "dh_kj_mol", "ds_j_mol_k", "dg_ref_kj_mol", "tof_ref_per_h", "tof_ref_ci_low", "tof_ref_ci_high",
    "delta_ea_kj_mol", "delta_ea_ci_low", "delta_ea_ci_high", "fit_df", "chi2_per_df", "curvature_p",
    "plate_scatter_ln", "left_out", "flags"])
ORDERS_COLUMNS = schema.ORDERS.pick([
    "catalyst", "temperature_c", "variable", "n_levels", "order", "order_se", "order_ci_low", "order_ci_high",
    "fixed", "tof_slope", "flags"])


def _common(p) -> None:
    p.add_argument("--campaign", metavar="NAME", required=True, help="campaign name in the store")
    add_format_option(p)
    add_store_option(p)
    p.add_argument("--window", metavar="PCT", type=float, default=None,
                   help="early window of the generic rate law (used for courses that are not initial-rate "
                        "kinetics): percent of the course's largest product (default: campaign setting, else 50)")
    p.add_argument("--confidence", metavar="C", type=float, default=None,
                   help="confidence level of every interval, e.g. 0.95")


def register(sub) -> None:
    r = sub.add_parser("rates", help="per-group (or per-well) rates, TOF, TON and enhancement of a campaign",
                       description="Blank-corrected rates, TOF (h-1) with t-based intervals, TON at the last "
                       "reading and rate enhancement over the blank, per catalyst x temperature x condition.")
    _common(r)
    r.add_argument("--per-well", action="store_true", help="one row per well instead of per group")
    r.set_defaults(func=run_rates)

    a = sub.add_parser("arrhenius", help="Arrhenius / Eyring parameters per catalyst",
                       description="Weighted fit of ln TOF on 1/T per catalyst at its standard condition: Ea, "
                       "ln A, dH, dS, dG and TOF at the reference temperature, and Ea relative to the blank.")
    _common(a)
    a.add_argument("--reference-temperature", metavar="C", type=float, default=None,
                   help="temperature (degC) for TOF and dG comparison (default: campaign setting, else 60)")
    a.set_defaults(func=run_arrhenius)

    o = sub.add_parser("orders", help="apparent orders in substrate and in catalyst loading",
                       description="Slopes of ln rate on ln substrate concentration and on ln loading, at fixed "
                       "temperature and other conditions, with intervals; flags TOF that falls with loading.")
    _common(o)
    o.set_defaults(func=run_orders)


def _check(args) -> None:
    from screenlab.errors import UsageError

    from screenlab.settings import setting_problem

    for flag, name, value in (("--confidence", "confidence", args.confidence),
                              ("--window", "conversion_window_pct", args.window),
                              ("--reference-temperature", "reference_temperature_c",
                               getattr(args, "reference_temperature", None))):
        if value is not None and (why := setting_problem(name, value)):
            raise UsageError(f"{flag} {value:g}: {why}")


def _kinetics(args):
    from screenlab.cli.common import load_stored_campaign
    from screenlab.pipeline import settings_for

    _check(args)
    data, _, _ = load_stored_campaign(args.store, args.campaign)
    from screenlab.pipeline import kinetics

    settings = settings_for(data, conversion_window_pct=args.window, confidence=args.confidence,
                            reference_temperature_c=getattr(args, "reference_temperature", None))
    return data, kinetics(data, settings)   # as the ranking and the app: edge-effect ring blanks left out


def _pick(frame, cols):
    return frame[[c for c in cols if c in frame.columns]]


def _wells_with_selectivity(kin):
    """The per-well table with the selectivity / ee columns and flags of kin.selectivity joined in."""
    import numpy as np

    wells = kin.wells
    sel = kin.selectivity
    extra = ["selectivity_pct", "selectivity_se", "ee_pct", "ee_se"]
    if sel is None or not len(sel):
        return wells.assign(**{c: np.nan for c in extra})
    s = sel[["plate", "well", *extra, "flags"]].rename(columns={"flags": "_sel_flags"})
    out = wells.astype({"plate": object, "well": object}).merge(
        s.astype({"plate": object, "well": object}), on=["plate", "well"], how="left")
    cur = out["flags"].astype(object).where(out["flags"].notna(), "").astype(str).to_numpy(dtype=object)
    add = out["_sel_flags"].astype(object).where(out["_sel_flags"].notna(), "").astype(str).to_numpy(dtype=object)
    out["flags"] = np.where(add == "", cur, np.where(cur == "", add, cur + ";" + add))
    return out.drop(columns="_sel_flags")


def bounds_as_text(frame, value: str = "tof_per_h"):
    """For the aligned table only: a censored row's ``value`` written as the bound it is, ">= 800"
    (lower: faster than the readings can show) or "<= 0.32" (upper: not above the blank); CSV and
    JSON keep the number and the ``censored`` column."""
    import numpy as np

    if "censored" not in frame.columns or value not in frame.columns:
        return frame
    cens = frame["censored"].astype("string").fillna("").to_numpy(dtype=object)
    if not (cens != "").any():
        return frame
    v = frame[value].to_numpy(dtype=float)
    text = np.array([f"{x:.4g}" if np.isfinite(x) else "" for x in v], dtype=object)
    text = np.where(cens == "lower", ">= " + text, np.where(cens == "upper", "<= " + text, text))
    return frame.assign(**{value: text})


def run_rates(args) -> int:
    data, kin = _kinetics(args)
    if args.per_well:
        cols = WELL_COLUMNS[:8] + list(data.factor_names) + WELL_COLUMNS[8:]
        out = _pick(_wells_with_selectivity(kin), cols)
    else:
        cols = RATES_COLUMNS[:6] + list(data.factor_names) + RATES_COLUMNS[6:]
        out = _pick(kin.rates, cols)
    emit(bounds_as_text(out) if args.format == "table" else out, args.format)
    return 0


def run_arrhenius(args) -> int:
    _, kin = _kinetics(args)
    emit(_pick(kin.arrhenius, ARRHENIUS_COLUMNS), args.format)
    return 0


def run_orders(args) -> int:
    _, kin = _kinetics(args)
    emit(_pick(kin.orders, ORDERS_COLUMNS), args.format)
    return 0
