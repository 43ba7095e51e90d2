"""Selectivity and enantiomeric excess from the time course (screenlab.kinetics.selectivity).

Outside references: NIST StRD NoInt1 (line through the origin), statsmodels OLS (quadratic through
the origin and its t-test), scipy.stats.t (interval quantiles), the textbook solutions of parallel
and consecutive first-order reactions. Synthetic campaigns are invented data built here.
"""
from __future__ import annotations

import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from screenlab.kinetics import analyse_kinetics, selectivity, sites
from screenlab.kinetics.amounts import product_amounts
from screenlab.kinetics.selectivity import FLAGS, origin_fit, summarise_groups, well_selectivity
from screenlab.kinetics.turnover import FLAGS as TURNOVER_FLAGS
from screenlab.kinetics.turnover import group_rates
from screenlab.model import CampaignData, Manifest
from screenlab.plates import well_name

ROOT = Path(__file__).resolve().parents[1]
HENRY = ROOT / "demo_campaign" / "henry-chiral-2026"
HENRY_TRUTH = ROOT / "demo_campaign" / "_truth" / "henry-chiral-2026" / "truth.csv"
TIMES = np.array([0.0, 0.5, 1.0, 2.0, 4.0, 6.0, 8.0])
S0 = 100.0            # mM


# ------------------------------------------------------------------------------- synthetic campaigns

def _campaign(k_paths: np.ndarray, roles, catalysts, plates, amounts_fn=None, noise=0.3, seed=0,
              analytes=("P_R", "P_S", "B"), byproducts=("B",), enantiomers=("P_R", "P_S"), main="P",
              times=TIMES, temperature_c=25.0):
    """A product_conc (mM) campaign; one row of ``k_paths`` (first-order constants, h-1, one column per
    analyte) per well. Parallel first-order paths from one substrate: amount_i(t) = S0 k_i/k (1 - e^-kt)
    (textbook parallel first-order reactions; the product ratio is k_i/k_j at every time)."""
    rng = np.random.default_rng(seed)
    roles = np.asarray(roles, dtype=object)
    n = len(roles)
    plates = np.asarray(plates, dtype=object)
    idx_in_plate = pd.Series(np.arange(n)).groupby(plates).cumcount().to_numpy()
    row, col = idx_in_plate // 24, idx_in_plate % 24
    wells = pd.DataFrame({
        "plate": plates, "well": well_name(row, col), "row": row, "col": col, "role": roles,
        "catalyst": pd.array(list(catalysts), dtype="string"),
        "loading": np.where(roles == "blank", np.nan, 1.0),
        "loading_unit": pd.array([None if r == "blank" else "umol" for r in roles], dtype="string"),
        "substrate_conc_mM": S0, "volume_uL": 1000.0, "temperature_c": temperature_c,
    })
    t = np.asarray(times, float)
    if amounts_fn is None:
        k = k_paths.sum(axis=1)
        frac = -np.expm1(-k[:, None] * t[None, :])                                   # (wells, times)
        share = np.divide(k_paths, k[:, None], out=np.zeros_like(k_paths), where=k[:, None] > 0)
        amt = S0 * share[:, None, :] * frac[:, :, None]                              # (wells, times, analytes)
    else:
        amt = amounts_fn(t)
    amt = amt + rng.normal(0.0, noise, amt.shape)
    na = len(analytes)
    readings = pd.DataFrame({
        "plate": np.repeat(plates, len(t) * na),
        "well": np.repeat(wells["well"].to_numpy(object), len(t) * na),
        "analyte": np.tile(np.array(analytes, dtype=object), n * len(t)),
        "time_h": np.tile(np.repeat(t, na), n),
        "value": amt.reshape(-1),
    }).astype({"plate": "str", "well": "str", "analyte": "str"})
    readings = readings.sort_values(["plate", "well", "analyte", "time_h"], kind="stable").reset_index(drop=True)
    cats = sorted({c for c in catalysts if isinstance(c, str)})
    catalysts_f = pd.DataFrame({"catalyst": cats, "name": cats, "family": "x", "molar_mass_g_mol": np.nan,
                                "sites_per_unit": 1.0, "metal_wt_pct": np.nan, "metal_molar_mass_g_mol": np.nan,
                                "dispersion": 1.0})
    up = sorted(set(plates))
    plates_f = pd.DataFrame({"plate": up, "format": 384, "n_rows": 16, "n_cols": 24, "temperature_c": temperature_c,
                             "run_date": pd.NA, "notes": pd.NA})
    man = Manifest(name="syn", readout_kind="product_conc", concentration_unit="mM", time_unit="h",
                   analyte_main=main, byproducts=tuple(byproducts), enantiomers=enantiomers)
    return CampaignData(manifest=man, catalysts=catalysts_f, plates=plates_f, wells=wells, readings=readings)


def _paths(k_main, sel, ee, kb=0.004, kb_sel=0.7):
    """First-order constants (P_R, P_S, B) of a catalysed path plus a racemic background."""
    k_main = np.asarray(k_main, float)
    sel = np.asarray(sel, float)
    ee = np.asarray(ee, float)
    return np.column_stack([k_main * (1 + ee) / 2 + kb * kb_sel / 2,
                            k_main * (1 - ee) / 2 + kb * kb_sel / 2,
                            k_main * (1 - sel) / sel + kb * (1 - kb_sel)])


def _screen(n_cat, n_rep, n_blank, n_plates, seed, noise=0.3):
    """n_plates plates, each with n_cat catalysts x n_rep wells and n_blank blanks; truths per catalyst."""
    rng = np.random.default_rng(seed + 1000)
    sel_t = rng.uniform(0.6, 0.98, (n_plates, n_cat))
    ee_t = rng.uniform(-0.95, 0.95, (n_plates, n_cat))
    k_t = rng.uniform(0.05, 0.4, (n_plates, n_cat))
    roles, cats, plates, k_m, s, e = [], [], [], [], [], []
    for p in range(n_plates):            # a loop over a few plates while building the test data
        for c in range(n_cat):
            roles += ["sample"] * n_rep
            cats += [f"C{p:02d}-{c:02d}"] * n_rep
            k_m += [k_t[p, c]] * n_rep
            s += [sel_t[p, c]] * n_rep
            e += [ee_t[p, c]] * n_rep
        roles += ["blank"] * n_blank
        cats += [None] * n_blank
        k_m += [0.0] * n_blank
        s += [1.0] * n_blank
        e += [0.0] * n_blank
        plates += [f"P{p:02d}"] * (n_cat * n_rep + n_blank)
    kp = _paths(k_m, s, e)
    data = _campaign(kp, roles, cats, plates, noise=noise, seed=seed)
    truth = pd.DataFrame({"catalyst": [f"C{p:02d}-{c:02d}" for p in range(n_plates) for c in range(n_cat)],
                          "sel": 100 * sel_t.ravel(), "ee": 100 * ee_t.ravel()})
    return data, truth


# ------------------------------------------------------------------------------------ the fit itself

def test_origin_fit_nist_noint1():
    # NIST StRD NoInt1 (itl.nist.gov/div898/strd/lls/data/NoInt1.shtml), y = B1 x, certified:
    # B1 = 2.07438016528926, sd(B1) = 0.165289256198347E-01, residual SD 3.56753034006338, df 10.
    # (values as embedded in the GSL, Apache Commons Math and GLM.jl test suites)
    x = np.arange(60.0, 71.0)
    y = np.arange(130.0, 141.0)
    f = origin_fit(np.zeros(11, int), x, y, 1)
    assert f["slope"][0] == pytest.approx(2.07438016528926, rel=1e-12)
    assert f["se"][0] == pytest.approx(0.0165289256198347, rel=1e-10)
    assert f["resid_sd"][0] == pytest.approx(3.56753034006338, rel=1e-10)
    assert f["df"][0] == 10
    assert f["n"][0] == 11


def test_origin_fit_groups_match_statsmodels_per_group():
    # statsmodels OLS without a constant as the reference, for the line and for the quadratic
    # y = a x + c x^2 (t-test of c); several groups at once, with NaN rows left out.
    rng = np.random.default_rng(3)
    G, n = 5, 9
    code = np.repeat(np.arange(G), n)
    x = rng.uniform(0, 80, G * n)
    y = 0.8 * x - 0.002 * x ** 2 * (code % 2) + rng.normal(0, 0.7, G * n)
    y[4] = np.nan
    f = origin_fit(code, x, y, G)
    for g in range(G):
        m = (code == g) & np.isfinite(y)
        ref = sm.OLS(y[m], x[m][:, None]).fit()
        assert f["slope"][g] == pytest.approx(ref.params[0], rel=1e-10)
        assert f["se"][g] == pytest.approx(ref.bse[0], rel=1e-9)
        assert f["df"][g] == ref.df_resid
        q = sm.OLS(y[m], np.column_stack([x[m], x[m] ** 2])).fit()
        xmax = x[m].max()
        assert f["curv_change"][g] == pytest.approx(2 * q.params[1] * xmax, rel=1e-7)
        assert f["curv_p"][g] == pytest.approx(q.pvalues[1], rel=1e-6, abs=1e-12)


def test_summarise_groups_t_interval_against_scipy():
    rows = pd.DataFrame({"selectivity_pct": [90.0, 91.0, 95.0, 80.0], "selectivity_se": [1, 1, 1, 0.5],
                         "selectivity_df": [6, 6, 6, 6], "ee_pct": np.nan, "flags": ["", "", "", ""]})
    g = summarise_groups(rows, np.array([0, 0, 0, 1]), 2, 0.95)
    v = np.array([90.0, 91.0, 95.0])
    lo, hi = stats.t.interval(0.95, 2, loc=v.mean(), scale=stats.sem(v))          # scipy.stats reference
    assert g["selectivity_pct"][0] == pytest.approx(v.mean())
    assert g["selectivity_ci_low"][0] == pytest.approx(lo, rel=1e-12)
    assert g["selectivity_ci_high"][0] == pytest.approx(hi, rel=1e-12)
    # one well: its own SE and df
    q = stats.t.ppf(0.975, 6)
    assert g["selectivity_ci_low"][1] == pytest.approx(80.0 - q * 0.5)
    assert np.isnan(g["ee_pct"]).all()


def test_percent_intervals_stay_within_the_range_of_the_quantity():
    # near-complete selectivity and ee: the t interval is cut at 100 % (and ee at -100 %), the
    # estimate and SE are left as they are (common practice, no source)
    rows = pd.DataFrame({"selectivity_pct": [99.9, 99.95, 99.7, 0.1], "selectivity_se": [0.2, 0.2, 0.2, 0.3],
                         "selectivity_df": 6, "ee_pct": [-99.8, -99.9, -99.5, 20.0], "ee_se": 0.3, "ee_df": 6,
                         "flags": ""})
    g = summarise_groups(rows, np.array([0, 0, 0, 1]), 2, 0.95)
    assert g["selectivity_ci_high"][0] == 100.0 and g["selectivity_ci_low"][0] < g["selectivity_pct"][0]
    assert g["selectivity_ci_low"][1] == 0.0 and g["ee_ci_low"][0] == -100.0
    assert g["selectivity_pct"][0] == pytest.approx(np.mean([99.9, 99.95, 99.7]))
    # an estimate past the end (readings noise) is kept, and its interval still holds it
    past = pd.DataFrame({"selectivity_pct": [100.2, 100.4, 100.3], "selectivity_se": 0.2, "selectivity_df": 6,
                         "ee_pct": [-100.2, -100.3, -100.1], "ee_se": 0.2, "ee_df": 6, "flags": ""})
    p = summarise_groups(past, np.zeros(3, dtype=np.int64), 1, 0.95)
    assert p["selectivity_pct"][0] == pytest.approx(100.3)
    assert p["selectivity_ci_low"][0] < p["selectivity_pct"][0] == p["selectivity_ci_high"][0]
    assert p["ee_ci_low"][0] == p["ee_pct"][0] < p["ee_ci_high"][0]


# --------------------------------------------------------------------------- recovery and coverage

def test_known_selectivity_and_ee_recovered_through_analyse_kinetics():
    # parallel first-order paths: selectivity = k1/(k1 + k2), ee = (kR - kS)/(kR + kS) (textbook parallel
    # reactions: the products form in the ratio of their rate constants at every time), recovered within
    # the stated uncertainty after the racemic, less selective background is subtracted.
    spec = [("A", 0.30, 0.95, 0.90), ("B", 0.10, 0.80, -0.60), ("C", 0.03, 0.70, 0.30), ("D", 0.20, 0.99, 0.0)]
    roles, cats, km, s, e = [], [], [], [], []
    for c, k, sel, ee in spec:
        roles += ["sample"] * 3
        cats += [c] * 3
        km += [k] * 3
        s += [sel] * 3
        e += [ee] * 3
    roles += ["blank"] * 4
    cats += [None] * 4
    km += [0.0] * 4
    s += [1.0] * 4
    e += [0.0] * 4
    data = _campaign(_paths(km, s, e), roles, cats, ["P1"] * len(roles), seed=11)
    kin = analyse_kinetics(data)
    r = kin.rates.set_index("catalyst")
    for c, k, sel, ee in spec:
        row = r.loc[c]
        assert abs(row["selectivity_pct"] - 100 * sel) < 4 * row["selectivity_se"] + 0.05, c
        assert abs(row["ee_pct"] - 100 * ee) < 4 * row["ee_se"] + 0.05, c
        assert row["selectivity_ci_low"] < row["selectivity_pct"] < row["selectivity_ci_high"]
        assert row["ee_ci_low"] < row["ee_pct"] < row["ee_ci_high"]
    # the per-well frame: one row per non-empty well, contract columns first
    sel = kin.selectivity
    assert list(sel.columns[:7]) == ["plate", "well", "selectivity_pct", "selectivity_se", "ee_pct", "ee_se",
                                     "flags"]
    assert len(sel) == len(data.wells)
    blank = sel[sel["role"] == "blank"]
    assert (~blank["blank_corrected"]).all() and sel.loc[sel["role"] == "sample", "blank_corrected"].all()
    # blank wells report the background's own selectivity (70 %) and ee (racemic)
    for col, tv in (("selectivity", 70.0), ("ee", 0.0)):
        se_mean = np.sqrt((blank[f"{col}_se"] ** 2).sum()) / len(blank)
        assert abs(blank[f"{col}_pct"].mean() - tv) < 4 * se_mean, col
    # the slow catalyst C: without the blank subtraction the racemic background would pull its ee down
    raw = _raw_slopes(data)
    c_wells = sel["catalyst"] == "C"
    assert (raw.loc[c_wells.to_numpy(), "ee"].mean() < sel.loc[c_wells, "ee_pct"].mean() - 1.0)


def _raw_slopes(data):
    """Uncorrected ee per well, sum((R-S)(R+S)) / sum((R+S)^2), computed here by hand."""
    am = product_amounts(data)
    w = am.pivot_table(index=["plate", "well", "time_h"], columns="analyte", values="product_mM").reset_index()
    x, y = w["P_R"] + w["P_S"], w["P_R"] - w["P_S"]
    g = pd.DataFrame({"plate": w["plate"], "well": w["well"], "xy": x * y, "xx": x * x}).groupby(
        ["plate", "well"], sort=False).sum()
    ee = (100 * g["xy"] / g["xx"]).rename("ee").reset_index()
    return data.wells[["plate", "well"]].merge(ee, on=["plate", "well"], how="left")


@pytest.mark.slow
def test_interval_coverage_near_nominal():
    # 4 x 6 plates x 20 catalysts x 3 wells (+ 4 blanks per plate), random true selectivity and ee per
    # catalyst: the 95 % group intervals should cover the truth about 95 % of the time (binomial SD
    # ~0.7 % over 960 intervals), and so should the per-well intervals (fit SE with the blank term).
    hits_g, hits_w = [], []
    for seed in (1, 2, 3, 4):
        data, truth = _screen(n_cat=20, n_rep=3, n_blank=4, n_plates=6, seed=seed)
        sel = well_selectivity(data)
        samples = sel[sel["role"] == "sample"].reset_index(drop=True)
        codes = pd.Categorical(samples["catalyst"], categories=truth["catalyst"]).codes
        g = summarise_groups(samples, codes, len(truth), 0.95)
        for key in ("sel", "ee"):
            col = "selectivity" if key == "sel" else "ee"
            tr = truth[key].to_numpy()
            hits_g.append((g[f"{col}_ci_low"].to_numpy() <= tr) & (tr <= g[f"{col}_ci_high"].to_numpy()))
            tw = tr[codes]
            q = stats.t.ppf(0.975, samples[f"{col}_df"].to_numpy())
            est, se = samples[f"{col}_pct"].to_numpy(), samples[f"{col}_se"].to_numpy()
            hits_w.append(np.abs(est - tw) <= q * se)
    cov_g = np.concatenate(hits_g).mean()
    cov_w = np.concatenate(hits_w).mean()
    assert 0.925 <= cov_g <= 0.98, cov_g
    assert 0.925 <= cov_w <= 0.97, cov_w
    # the estimates are not biased: mean error well inside its own standard error
    data, truth = _screen(n_cat=20, n_rep=3, n_blank=4, n_plates=4, seed=7)
    sel = well_selectivity(data)
    samples = sel[sel["role"] == "sample"]
    err = samples["selectivity_pct"].to_numpy() - truth.set_index("catalyst").loc[samples["catalyst"], "sel"].to_numpy()
    assert abs(err.mean()) < 4 * err.std(ddof=1) / np.sqrt(len(err))


# ---------------------------------------------------------------------------------------- flags

def _consecutive(k1, k2, t):
    """A -> P -> B, first order in each step (Bateman 1910; textbook consecutive first-order reactions,
    e.g. Atkins' Physical Chemistry, 'consecutive elementary reactions' — from memory):
    A = A0 e^-k1 t, P = A0 k1/(k2 - k1) (e^-k1 t - e^-k2 t), B = A0 - A - P."""
    a = S0 * np.exp(-k1 * t)
    p = S0 * k1 / (k2 - k1) * (np.exp(-k1 * t) - np.exp(-k2 * t))
    return p, S0 - a - p


def test_bateman_solution_is_what_we_think():
    # the consecutive-reaction formula above satisfies dP/dt = k1 A - k2 P (checked numerically here)
    t = np.linspace(0, 5, 20001)
    p, _ = _consecutive(0.5, 0.2, t)
    a = S0 * np.exp(-0.5 * t)
    dp = np.gradient(p, t)
    assert np.allclose(dp[1:-1], (0.5 * a - 0.2 * p)[1:-1], atol=1e-4)
    # maximum of P at t = ln(k1/k2)/(k1 - k2)
    assert t[np.argmax(p)] == pytest.approx(np.log(0.5 / 0.2) / 0.3, abs=1e-3)


def test_consecutive_reaction_flagged_as_drift_parallel_not():
    # 6 wells A -> P -> B (k1 0.4, k2 0.15 h-1), 6 wells parallel P/B at the same conversion; no background
    n = 12
    k1 = np.full(n, 0.4)

    def amounts(t):
        p, b = _consecutive(0.4, 0.15, t)
        out = np.zeros((n, len(t), 3))
        out[:6, :, 0] = p / 2 * 1.8        # P_R (ee 80 %)
        out[:6, :, 1] = p / 2 * 0.2        # P_S
        out[:6, :, 2] = b
        k = 0.4
        frac = -np.expm1(-k * t)
        out[6:, :, 0] = S0 * 0.8 * 0.9 * frac
        out[6:, :, 1] = S0 * 0.8 * 0.1 * frac
        out[6:, :, 2] = S0 * 0.2 * frac
        return out

    data = _campaign(np.zeros((n, 3)) + k1[:, None] / 3, ["sample"] * n, ["CONS"] * 6 + ["PAR"] * 6,
                     ["P1"] * n, amounts_fn=amounts, noise=0.3, seed=5)
    sel = well_selectivity(data)
    drift = sel["flags"].str.contains("selectivity_drift")
    assert drift[:6].all()
    assert not drift[6:].any()
    assert (sel["selectivity_drift_pct"][:6] < -20).all()       # selectivity falls with conversion
    assert sel["selectivity_pct"][6:].to_numpy() == pytest.approx(80.0, abs=1.0)
    # ee of the consecutive wells is constant (both enantiomers react on alike): no ee drift, 80 %
    assert not sel["flags"].str.contains("ee_drift").any()
    assert sel["ee_pct"].to_numpy() == pytest.approx(80.0, abs=2.0)
    # the group carries the flag through the rates table
    kin = analyse_kinetics(data)
    r = kin.rates.set_index("catalyst")
    assert "selectivity_drift" in r.loc["CONS", "flags"]
    assert "selectivity_drift" not in r.loc["PAR", "flags"]


def test_false_drift_rate_is_low_for_parallel_paths():
    data, _ = _screen(n_cat=20, n_rep=3, n_blank=4, n_plates=4, seed=21)
    sel = well_selectivity(data)
    s = sel[sel["role"] == "sample"]
    # alpha 0.01 plus a 5-point minimum change: at most a few percent of honest wells flagged
    assert s["flags"].str.contains("selectivity_drift").mean() <= 0.03
    assert s["flags"].str.contains("ee_drift").mean() <= 0.03
    # the p-values of the quadratic term are roughly uniform under the null (no drift)
    p = s["selectivity_drift_p"].dropna().to_numpy()
    assert 0.35 < np.mean(p) < 0.65


def test_ee_low_product_threshold():
    # 3 wells at ~0.5 % conversion to product (below 1 %), 3 wells at ~30 %; noise 0.05 mM
    k = np.r_[np.full(3, 0.0007), np.full(3, 0.045)]
    kp = _paths(k, np.full(6, 0.9), np.full(6, 0.5), kb=0.0)
    data = _campaign(kp, ["sample"] * 6, ["LOW"] * 3 + ["OK"] * 3, ["P1"] * 6, noise=0.05, seed=2)
    sel = well_selectivity(data)
    low = sel["flags"].str.contains("ee_low_product")
    assert low[:3].all() and not low[3:].any()
    assert sel["flags"][:3].str.contains("selectivity_low_product").all()
    # noise rule: 20 % conversion but reading noise 10 mM (product below 5 x noise) is flagged too
    data2 = _campaign(_paths(np.full(3, 0.03), np.full(3, 0.9), np.full(3, 0.5), kb=0.0), ["sample"] * 3,
                      ["NOISY"] * 3, ["P1"] * 3, noise=10.0, seed=4)
    assert well_selectivity(data2)["flags"].str.contains("ee_low_product").all()


# --------------------------------------------------------------------------- campaigns without analytes

def test_one_analyte_campaign_unchanged():
    # same wells read as one analyte (the main product only, no [analytes]) -> new columns present and
    # NaN, every other rates column identical to the table built without selectivity
    kp = _paths(np.r_[np.full(3, 0.2), np.full(3, 0.05), np.zeros(3)], np.r_[np.full(6, 0.9), np.ones(3)],
                np.zeros(9))
    multi = _campaign(kp, ["sample"] * 6 + ["blank"] * 3, ["A"] * 3 + ["B"] * 3 + [None] * 3, ["P1"] * 9, seed=9)
    rd = multi.readings
    main_only = rd[rd["analyte"].isin(["P_R", "P_S"])].groupby(["plate", "well", "time_h"], as_index=False)[
        "value"].sum().assign(analyte="product")[["plate", "well", "analyte", "time_h", "value"]]
    main_only = main_only.astype({"plate": "str", "well": "str", "analyte": "str"})
    one = CampaignData(manifest=Manifest(name="one", readout_kind="product_conc", concentration_unit="mM",
                                         time_unit="h"),
                       catalysts=multi.catalysts, plates=multi.plates, wells=multi.wells, readings=main_only)
    k1 = analyse_kinetics(one)
    new = ["selectivity_pct", "selectivity_ci_low", "selectivity_ci_high", "ee_pct", "ee_ci_low", "ee_ci_high"]
    assert set(new) <= set(k1.rates.columns)
    assert k1.rates[new].isna().all().all()
    assert k1.selectivity[["selectivity_pct", "ee_pct"]].isna().all().all()
    assert (k1.selectivity["flags"] == "").all()
    old = group_rates(k1.wells, k1.settings, factor_names=one.factor_names)
    # the rates table adds the Arrhenius step's verdict and the plate-scatter intervals on top
    plain = [c for c in old.columns if c not in ("tof_se_per_h", "tof_df", "tof_ci_low", "tof_ci_high")]
    pd.testing.assert_frame_equal(k1.rates[plain], old[plain])
    # rates, TOF, TON and enhancement count the main product: the multi-analyte campaign gives the same
    km = analyse_kinetics(multi)
    cols = ["catalyst", "temperature_c", "rate_mM_per_h", "tof_per_h", "tof_ci_low", "enhancement"]
    pd.testing.assert_frame_equal(km.rates[cols], k1.rates[cols], rtol=1e-12)
    # TON too, but for its background share: with the by-products known, the substrate a well had
    # left is the main product over its share, so the background (run on that substrate) is smaller
    # and the TON a little higher than when the by-products are not read
    assert (km.rates["ton"].to_numpy() >= k1.rates["ton"].to_numpy()).all()
    assert km.rates["ton"].to_numpy() == pytest.approx(k1.rates["ton"].to_numpy(), rel=0.01)
    assert km.rates["selectivity_pct"].notna().all()


def test_enantiomers_only_and_byproducts_only():
    kp = _paths(np.full(3, 0.2), np.full(3, 0.85), np.full(3, 0.4), kb=0.0)
    ens_only = _campaign(kp[:, :2], ["sample"] * 3, ["A"] * 3, ["P1"] * 3, analytes=("P_R", "P_S"),
                         byproducts=(), seed=1)
    s = well_selectivity(ens_only)
    assert s["selectivity_pct"].isna().all()
    assert s["ee_pct"].to_numpy() == pytest.approx(40.0, abs=2.0)
    byp_only = _campaign(np.column_stack([kp[:, 0] + kp[:, 1], kp[:, 2]]), ["sample"] * 3, ["A"] * 3, ["P1"] * 3,
                         analytes=("P", "B"), enantiomers=None, seed=1)
    s2 = well_selectivity(byp_only)
    assert s2["ee_pct"].isna().all()
    assert s2["selectivity_pct"].to_numpy() == pytest.approx(85.0, abs=1.0)


def test_inputs_not_mutated_and_flags_documented():
    data, _ = _screen(n_cat=2, n_rep=3, n_blank=2, n_plates=1, seed=3)
    before = (data.wells.copy(), data.readings.copy())
    am = product_amounts(data)
    am_before = am.copy()
    well_selectivity(data, am)
    pd.testing.assert_frame_equal(data.wells, before[0])
    pd.testing.assert_frame_equal(data.readings, before[1])
    pd.testing.assert_frame_equal(am, am_before)
    # every code is explained, and the explanations reach the shared flag help through turnover.FLAGS
    assert set(FLAGS) <= set(TURNOVER_FLAGS)
    from screenlab.flags import flag_help
    assert set(FLAGS) <= set(flag_help())


# ------------------------------------------------------------------------------------- demo campaign

@pytest.mark.skipif(not HENRY.exists(), reason="demo campaign missing")
def test_demo_henry_campaign_against_its_truth():
    from screenlab.ingest.reader import read_campaign

    data = read_campaign(HENRY).data
    kin = analyse_kinetics(data)
    truth = pd.read_csv(HENRY_TRUTH).set_index("catalyst")
    r = kin.rates
    inside = []
    for _, row in r.iterrows():                     # 18 rows of a result table
        t = truth.loc[row["catalyst"]]
        for col in ("selectivity", "ee"):
            tv = t[f"{col}_pct"]
            # truth is of the catalysed path; the blank's products are subtracted
            assert abs(row[f"{col}_pct"] - tv) < max(4 * row[f"{col}_se"], 1.5), (row["catalyst"], col)
            inside.append(row[f"{col}_ci_low"] <= tv <= row[f"{col}_ci_high"])
    assert np.mean(inside) >= 0.8
    assert r.loc[r["catalyst"] == "CU-DA2", "ee_pct"].lt(0).all()              # S-selective: negative ee
    # the blanks: the racemic background, 70 % nitroaldol
    bl = kin.selectivity[kin.selectivity["role"] == "blank"]
    unc = truth.loc["(uncatalysed)"]
    assert bl["selectivity_pct"].mean() == pytest.approx(unc["selectivity_pct"], abs=3.0)
    assert abs(bl["ee_pct"].mean() - unc["ee_pct"]) < 5.0
    # no parallel-path catalyst is flagged as drifting
    assert not r["flags"].str.contains("selectivity_drift").any()


@pytest.mark.slow
@pytest.mark.skipif(not HENRY.exists(), reason="demo campaign missing")
def test_cli_rates_shows_selectivity_and_ee(tmp_path, capsys):
    from screenlab.cli import main

    store = tmp_path / "s.duckdb"
    assert main(["ingest", str(HENRY), "--store", str(store)]) == 0
    capsys.readouterr()
    assert main(["rates", "--campaign", "henry-chiral-2026", "--store", str(store), "--format", "json"]) == 0
    rows = json.loads(capsys.readouterr().out)
    need = {"selectivity_pct", "selectivity_ci_low", "selectivity_ci_high", "ee_pct", "ee_ci_low", "ee_ci_high"}
    assert need <= set(rows[0])
    da2 = [x for x in rows if x["catalyst"] == "CU-DA2"]
    assert da2 and all(x["ee_pct"] < -60 for x in da2)
    assert main(["rates", "--campaign", "henry-chiral-2026", "--store", str(store), "--format", "csv",
                 "--per-well"]) == 0
    wells = pd.read_csv(io.StringIO(capsys.readouterr().out))
    assert {"selectivity_pct", "selectivity_se", "ee_pct", "ee_se"} <= set(wells.columns)
    assert wells["ee_pct"].notna().sum() == len(wells)


# ------------------------------------------------------------------------------- group summaries

def _summarise_groups_by_hand(rows, codes, n_groups, confidence=0.95):
    """The group summary written out group by group, as the summarise_groups docstring states it
    (a few plain lines per rule, the reference for the vectorised code):

    * n wells with a finite value; mean; SD with n - 1 (statistics.stdev);
    * SE = sqrt(SD^2 / n + mean(blank SE^2) / plates) for n >= 2, the single well's own SE for n = 1;
    * df = Welch-Satterthwaite (Welch 1947; Satterthwaite 1946) of the expected replicate variance
      max(mean(fit SE^2 - blank SE^2), 0) / n with n - 1 df and the blank term with infinite df (a
      term whose variance is not positive contributes nothing; nothing at all gives infinity),
      capped by the summed fit df, never below n - 1;
    * interval = mean -/+ t quantile (scipy.stats.t.ppf) x SE;
    * a group flag where at least half of the wells with a selectivity or an ee carry it."""
    import statistics

    codes = np.asarray(codes)
    n_rows = len(rows)
    flags = [str(f).split(";") if isinstance(f, str) else [] for f in
             (rows["flags"] if "flags" in rows else [""] * n_rows)]
    plates = [str(p) for p in rows["plate"]] if "plate" in rows else ["P"] * n_rows

    def col(c, default):
        return [float(x) for x in pd.to_numeric(rows[c], errors="coerce")] if c in rows else [default] * n_rows

    def welch(terms):      # [(variance, df), ...]
        parts = [(v, d) for v, d in terms if v > 0]
        den = sum(v * v / d for v, d in parts)
        return (sum(v for v, _ in parts) ** 2 / den) if den > 0 else np.inf

    table = {c: [np.nan] * n_groups for c in selectivity.GROUP_COLUMNS}
    with_value = [set() for _ in range(n_groups)]
    for key in ("selectivity", "ee"):
        v, se1, df1, bse = (col(f"{key}_pct", np.nan), col(f"{key}_se", np.nan), col(f"{key}_df", np.nan),
                            col(f"{key}_blank_se", 0.0))
        for g in range(n_groups):
            idx = [i for i in range(n_rows) if codes[i] == g and np.isfinite(v[i])]
            with_value[g].update(idx)
            n = len(idx)
            if n == 0:
                continue
            mean = sum(v[i] for i in idx) / n
            b2 = [(0.0 if np.isnan(bse[i]) else bse[i]) ** 2 for i in idx]
            if n == 1:
                se, df = se1[idx[0]], df1[idx[0]]
            else:
                v_blank = (sum(b2) / n) / len({plates[i] for i in idx})
                se = np.sqrt(statistics.stdev([v[i] for i in idx]) ** 2 / n + v_blank)
                fit2 = [se1[i] ** 2 - b for i, b in zip(idx, b2) if np.isfinite(se1[i])]
                v_exp = max(sum(fit2) / len(fit2), 0.0) / n if fit2 else np.nan
                dfsum = sum(df1[i] for i in idx if np.isfinite(df1[i]))
                df = min(welch([(v_exp, n - 1.0), (v_blank, np.inf)]), dfsum)
                df = n - 1.0 if not np.isfinite(df) else max(df, n - 1.0)
            q = stats.t.ppf(0.5 + confidence / 2.0, df) if np.isfinite(df) and df > 0 else np.nan
            # the interval within the quantity's range: selectivity 0..100 %, ee -100..100 %
            low_end = 0.0 if key == "selectivity" else -100.0
            for name, value in (("pct", mean), ("se", se), ("df", df),
                                ("ci_low", max(mean - q * se, min(low_end, mean))),
                                ("ci_high", min(mean + q * se, max(100.0, mean)))):
                table[f"{key}_{name}"][g] = value
    group_flags = []
    for g in range(n_groups):
        idx = sorted(with_value[g])
        words = [c for c in ("selectivity_drift", "selectivity_low_product", "background_dominant", "ee_drift",
                             "ee_low_product") if idx and 2 * sum(c in flags[i] for i in idx) >= len(idx)
                 and any(c in flags[i] for i in idx)]
        group_flags.append(";".join(words))
    out = pd.DataFrame(table, index=pd.RangeIndex(n_groups))
    out["flags"] = pd.Series(group_flags, dtype=object)
    return out


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_summarise_groups_follows_the_rules_written_out(seed):
    rng = np.random.default_rng(seed)
    n, G = 400, 70
    rows = pd.DataFrame({
        "plate": rng.choice(["P1", "P2", "P3"], n),
        "selectivity_pct": np.where(rng.random(n) < 0.8, rng.normal(90, 5, n), np.nan),
        "selectivity_se": np.where(rng.random(n) < 0.9, rng.uniform(0.1, 3, n), np.nan),
        "selectivity_df": rng.integers(1, 8, n).astype(float),
        "selectivity_blank_se": np.where(rng.random(n) < 0.5, rng.uniform(0, 1, n), np.nan),
        "ee_pct": np.where(rng.random(n) < 0.6, rng.normal(40, 10, n), np.nan),
        "ee_se": rng.uniform(0.1, 3, n),
        "ee_df": rng.uniform(1, 9, n),
        "flags": pd.Series(rng.choice(["", "ee_drift", "selectivity_low_product;ee_drift", None], n), dtype=object),
    })
    codes = np.where(rng.random(n) < 0.1, -1, rng.integers(0, G - 5, n))      # some groups empty
    num = list(selectivity.GROUP_COLUMNS)
    for got, want in ((selectivity.summarise_groups(rows, codes, G, 0.9), _summarise_groups_by_hand(rows, codes, G, 0.9)),
                      (selectivity.summarise_groups(pd.DataFrame({"flags": []}), np.zeros(0, dtype=np.int64), G),
                       _summarise_groups_by_hand(pd.DataFrame({"flags": []}), np.zeros(0, dtype=np.int64), G))):
        pd.testing.assert_frame_equal(got[num], want[num], check_exact=False, rtol=1e-12)
        assert got["flags"].fillna("").tolist() == want["flags"].tolist()
