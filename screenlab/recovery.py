"""Truth-recovery study of the kinetics: seeded campaigns of mixed rate laws with known truth
(:func:`screenlab.synthetic.kinetics_campaign`), analysed as a user would, every estimate set
against the value that generated it.

:func:`run_study` analyses ``seeds`` campaigns and returns a :class:`Study` of three frames (one
row per rates-table row, per Arrhenius row, per campaign); :func:`summary` reduces them to the
figures a kineticist asks for: median and 90th percentile of |relative error| of TOF on the rows
whose initial rate is measurable, the coverage of the TOF intervals, the TON error on rows past
50 % conversion and the coverage of its interval, the coverage of the rate-enhancement intervals
and how often its lower bounds hold, the Ea error and the coverage of its interval, and how often too-fast, inactive,
induction and consecutive courses get their bound or flag. ``scripts/truth_recovery.py`` prints
the table; ``tests/test_truth_recovery.py`` asserts it. Everything here is invented data.

The plain per-well reference (:func:`plain_first_order_ea`) is the textbook route for a
first-order campaign: each well's first-order fit ``P = P_max (1 - exp(-k t))`` with the plateau
at the theoretical maximum (rate P_max k, the NIST StRD-checked fitter of
:mod:`screenlab.kinetics.fit`), minus the plate's mean blank rate, averaged per catalyst and
temperature, and an unweighted least-squares line of ln TOF on 1/T.
"""
from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from screenlab.synthetic import UNCATALYSED, KineticsSpec, kinetics_campaign
from screenlab.uncertainty import t_quantile

#: group flags that mark a course as not initial-rate kinetics
IRREGULAR_FLAGS = ("induction", "product_decline", "deactivation", "law_misfit")


@dataclass(frozen=True)
class Study:
    """Per-row results of a truth-recovery study.

    ``rates``: one row per rates-table row joined to its truth (``tof_true``, ``ton_true``,
    ``behaviour``, ``measurable``, ``final_conversion_pct``, ``seed``), with ``tof_rel_err``,
    ``tof_covered``, ``ton_rel_err`` and ``irregular`` (an irregular-course flag on the row).
    ``arrhenius``: one row per catalyst with ``ea_true``, ``ea_err_kj_mol``, ``ea_covered``,
    ``behaviour``, ``seed``. ``campaigns``: one row per seed (plate scatter found, and the plain
    per-well first-order Ea error when asked for).
    """

    rates: pd.DataFrame
    arrhenius: pd.DataFrame
    campaigns: pd.DataFrame


def _has(flags: pd.Series, code: str) -> np.ndarray:
    return flags.fillna("").astype(str).str.split(";").apply(lambda parts: code in parts).to_numpy(bool)


def plain_first_order_ea(data) -> pd.DataFrame:
    """Ea per catalyst from the plain per-well first-order route (module docstring): catalyst,
    ea_kj_mol."""
    from screenlab import units
    from screenlab.kinetics import fit
    from screenlab.kinetics.amounts import product_amounts

    am = product_amounts(data)
    wells = data.wells[data.wells["role"] != "empty"].reset_index(drop=True)
    key = wells["plate"].astype(str) + "|" + wells["well"].astype(str)
    code = pd.Index(key).get_indexer(am["plate"].astype(str) + "|" + am["well"].astype(str))
    keep = code >= 0
    theo = wells["substrate_conc_mM"].to_numpy(float) * float(data.manifest.product_per_substrate)
    f = fit.fit_first_order(am["time_h"].to_numpy(float)[keep], am["product_mM"].to_numpy(float)[keep],
                            code[keep], len(wells), plateau=theo)
    w = wells.assign(rate=np.where(f.status == fit.OK, f.rate, np.nan))
    blank = w[w["role"] == "blank"].groupby("plate")["rate"].mean()
    w["net"] = w["rate"] - w["plate"].map(blank).to_numpy(float)
    cat = w[w["role"].isin(["sample", "reference"])]
    sites = cat["loading"].to_numpy(float)            # umol loadings, one site per unit (the study's design)
    cat = cat.assign(tof=cat["net"] * units.amount_umol(1.0, cat["volume_uL"].to_numpy(float)) / sites)
    g = cat.groupby(["catalyst", "temperature_c"])["tof"].mean().reset_index()
    g = g[g["tof"] > 0]
    rows = []
    for c, s in g.groupby("catalyst"):          # a loop over catalysts, not wells
        if len(s) < 2:
            continue
        x = 1.0 / units.c_to_k(s["temperature_c"].to_numpy(float))
        slope = np.polyfit(x, np.log(s["tof"].to_numpy(float)), 1)[0]
        rows.append((c, -slope * units.R_J_MOL_K / 1000.0))
    return pd.DataFrame(rows, columns=["catalyst", "ea_kj_mol"])


def run_study(seeds, spec: KineticsSpec | None = None, settings=None, *, plain: bool = False) -> Study:
    """Analyse the campaign of ``spec`` (default :class:`KineticsSpec`) for every seed."""
    from screenlab.kinetics import analyse_kinetics
    from screenlab.settings import AnalysisSettings

    spec = spec or KineticsSpec()
    rate_parts, arr_parts, camp = [], [], []
    for seed in seeds:                          # a loop over campaigns
        kc = kinetics_campaign(replace(spec, seed=int(seed)))
        st = settings or AnalysisSettings.from_mapping(kc.data.manifest.analysis)
        res = analyse_kinetics(kc.data, st)
        truth = kc.truth.rename(columns={"tof_per_h": "tof_true", "ton": "ton_true", "ea_kj_mol": "ea_true",
                                         "tof_max_per_h": "tof_max_true"})
        r = res.rates.merge(truth.drop(columns=["role"]), on=["catalyst", "temperature_c"], how="left")
        with np.errstate(invalid="ignore", divide="ignore"):
            r["tof_rel_err"] = r["tof_per_h"] / r["tof_true"] - 1.0
            r["ton_rel_err"] = r["ton"] / r["ton_true"] - 1.0
        r["tof_covered"] = (r["tof_ci_low"] <= r["tof_true"]) & (r["tof_true"] <= r["tof_ci_high"])
        # the true rate enhancement: (catalysed initial rate + background) / background, both in mM/h
        bg = truth.loc[truth["catalyst"] == UNCATALYSED].set_index("temperature_c")["tof_true"]
        site_mM = kc.spec.loading_umol / kc.spec.volume_uL * 1e3
        b_t = r["temperature_c"].map(bg).to_numpy(float)
        r["enh_true"] = np.where(r["catalyst"] != UNCATALYSED, (r["tof_true"] * site_mM + b_t) / b_t, np.nan)
        two_sided = np.isfinite(r["enhancement_ci_low"]) & np.isfinite(r["enhancement_ci_high"])
        r["enh_covered"] = np.where(two_sided, (r["enhancement_ci_low"] <= r["enh_true"])
                                    & (r["enh_true"] <= r["enhancement_ci_high"]), np.nan)
        # a lower bound (the blank below its detection limit): the estimate must not exceed the truth
        r["enh_bound_holds"] = np.where(np.isposinf(r["enhancement_ci_high"]), r["enhancement"] <= r["enh_true"],
                                        np.nan)
        # TON's interval as the ranking draws it: log-normal, ton_se / ton on t(ton_df) (a TON near
        # zero with an SE hundreds of times itself: exp overflows to an upper end at infinity)
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            q_ton = t_quantile(st.confidence, r["ton_df"].to_numpy(float))
            ln_half = q_ton * r["ton_se"].to_numpy(float) / r["ton"].to_numpy(float)
            ton_lo, ton_hi = r["ton"] * np.exp(-ln_half), r["ton"] * np.exp(ln_half)
        r["ton_covered"] = np.where(np.isfinite(ln_half) & (r["ton"] > 0),
                                    (ton_lo <= r["ton_true"]) & (r["ton_true"] <= ton_hi), np.nan)
        r["irregular"] = np.any([_has(r["flags"], f) for f in IRREGULAR_FLAGS], axis=0)
        r["seed"] = int(seed)
        rate_parts.append(r)
        a = res.arrhenius.copy()
        ea_true = truth.drop_duplicates("catalyst").set_index("catalyst")
        a["ea_true"] = a["catalyst"].map(ea_true["ea_true"])
        a["behaviour"] = a["catalyst"].map(ea_true["behaviour"])
        a["ea_err_kj_mol"] = a["ea_kj_mol"] - a["ea_true"]
        a["ea_covered"] = (a["ea_ci_low"] <= a["ea_true"]) & (a["ea_true"] <= a["ea_ci_high"])
        # TOF at the reference temperature from the Arrhenius line, against the nominal TOF there
        at_ref = truth[np.isclose(truth["temperature_c"], st.reference_temperature_c)].drop_duplicates("catalyst")
        a["tof_ref_true"] = a["catalyst"].map(at_ref.set_index("catalyst")["tof_true"])
        a["tof_ref_covered"] = np.where(np.isfinite(a["tof_ref_ci_low"]) & np.isfinite(a["tof_ref_true"]),
                                        (a["tof_ref_ci_low"] <= a["tof_ref_true"])
                                        & (a["tof_ref_true"] <= a["tof_ref_ci_high"]), np.nan)
        a["seed"] = int(seed)
        arr_parts.append(a)
        row = {"seed": int(seed), "plate_scatter_ln": res.arrhenius.attrs.get("plate_scatter_ln", np.nan)}
        if plain:
            p = plain_first_order_ea(kc.data).set_index("catalyst")["ea_kj_mol"]
            ours = a[a["catalyst"] != UNCATALYSED].set_index("catalyst")["ea_err_kj_mol"].abs()
            both = p.index.intersection(ours.dropna().index)
            err = (p.reindex(both) - ea_true["ea_true"].reindex(both)).abs()
            ours = ours.reindex(both)
            row.update(plain_ea_median_abs_err=float(err.median()), ours_ea_median_abs_err=float(ours.median()))
        camp.append(row)
    return Study(rates=pd.concat(rate_parts, ignore_index=True), arrhenius=pd.concat(arr_parts, ignore_index=True),
                 campaigns=pd.DataFrame(camp))


def summary(study: Study) -> pd.DataFrame:
    """The study's figures, one row each: ``figure, value, n`` (see the module docstring)."""
    r = study.rates
    cat = r[r["catalyst"] != UNCATALYSED]
    meas = cat[cat["measurable"].fillna(False).astype(bool)]
    point = meas[meas["censored"].astype(str) == ""]
    err = point["tof_rel_err"].abs()
    ton = cat[(cat["final_conversion_pct"] >= 50) & np.isfinite(cat["ton_true"]) & (cat["ton_true"] > 0)]
    ton_cov = cat.loc[np.isfinite(cat["ton_true"]) & (cat["ton_true"] > 0), "ton_covered"].dropna().astype(bool)
    enh_rows = cat[cat["behaviour"].isin(["first_order", "near_zero_order", "saturation", "deactivation"])
                   & (cat["censored"].astype(str) == "")]
    enh_cov = enh_rows["enh_covered"].dropna().astype(bool)
    enh_lb = enh_rows["enh_bound_holds"].dropna().astype(bool)
    a = study.arrhenius
    ea = a[(a["catalyst"] != UNCATALYSED) & np.isfinite(a["ea_kj_mol"])]
    ea_meas = ea[ea["behaviour"].isin(["first_order", "near_zero_order", "saturation", "deactivation",
                                       "consecutive"])]
    fast = cat[cat["behaviour"] == "too_fast"]
    inactive = cat[cat["behaviour"] == "inactive"]
    odd = cat[cat["behaviour"].isin(["induction", "consecutive"])]
    covered = ea_meas["ea_covered"].dropna()
    ref_cov = ea_meas["tof_ref_covered"].dropna().astype(bool)
    rows = [
        ("TOF |rel. error|, median (measurable rows)", err.median(), len(err)),
        ("TOF |rel. error|, 90th percentile", err.quantile(0.9), len(err)),
        ("TOF 95 % interval coverage", point["tof_covered"].mean(), len(point)),
        ("measurable rows given a point estimate", len(point) / max(len(meas), 1), len(meas)),
        ("TON |rel. error|, median (rows past 50 % conversion)", ton["ton_rel_err"].abs().median(), len(ton)),
        ("TON 95 % interval coverage", ton_cov.mean() if len(ton_cov) else np.nan, len(ton_cov)),
        ("rate enhancement 95 % interval coverage", enh_cov.mean() if len(enh_cov) else np.nan, len(enh_cov)),
        ("rate enhancement lower bounds that hold", enh_lb.mean() if len(enh_lb) else np.nan, len(enh_lb)),
        ("Ea |error| kJ/mol, median", ea_meas["ea_err_kj_mol"].abs().median(), len(ea_meas)),
        ("Ea |error| kJ/mol, 90th percentile", ea_meas["ea_err_kj_mol"].abs().quantile(0.9), len(ea_meas)),
        ("Ea 95 % interval coverage", covered.mean() if len(covered) else np.nan, len(covered)),
        ("TOF at the reference T from the Arrhenius line, 95 % interval coverage", ref_cov.mean()
         if len(ref_cov) else np.nan, len(ref_cov)),
        ("too fast: rows censored lower", (fast["censored"].astype(str) == "lower").mean(), len(fast)),
        ("inactive: rows censored upper", (inactive["censored"].astype(str) == "upper").mean(), len(inactive)),
        ("induction / consecutive: rows with a course flag", odd["irregular"].mean(), len(odd)),
    ]
    if "plain_ea_median_abs_err" in study.campaigns:
        c = study.campaigns
        rows += [("plain per-well first-order fit: Ea |error| median", c["plain_ea_median_abs_err"].median(), len(c)),
                 ("this analysis on the same campaigns: Ea |error| median", c["ours_ea_median_abs_err"].median(),
                  len(c))]
    return pd.DataFrame(rows, columns=["figure", "value", "n"])


def by_behaviour(study: Study) -> pd.DataFrame:
    """TOF error, coverage and censoring per generating behaviour (the table behind :func:`summary`)."""
    r = study.rates[study.rates["catalyst"] != UNCATALYSED]

    def one(x):
        pt = x[x["censored"].astype(str) == ""]
        err = pt["tof_rel_err"].abs()
        err = err[np.isfinite(err)]                      # rows whose true initial rate is 0 have none
        return pd.Series({
            "rows": len(x),
            "point_estimates": len(pt),
            "tof_median_abs_err": err.median() if len(err) else np.nan,
            "tof_p90_abs_err": err.quantile(0.9) if len(err) else np.nan,
            "tof_coverage": pt["tof_covered"].mean(),
            "censored_lower": (x["censored"].astype(str) == "lower").mean(),
            "censored_upper": (x["censored"].astype(str) == "upper").mean(),
            "course_flag": x["irregular"].mean(),
        })

    return r.groupby("behaviour")[list(r.columns)].apply(one)


__all__ = ["IRREGULAR_FLAGS", "Study", "by_behaviour", "plain_first_order_ea", "run_study", "summary"]
