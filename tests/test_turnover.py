"""Blanks, TOF/TON, enhancement and the per-group table (screenlab.kinetics.turnover)."""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.kinetics.sites import has_flag
from screenlab.kinetics.turnover import FLAGS, blank_rates, group_rates, tof_per_s, well_turnover
from screenlab.settings import AnalysisSettings

S = AnalysisSettings()
CATS = pd.DataFrame({"catalyst": ["C1", "C2", "REF"], "molar_mass_g_mol": [np.nan, 250.0, np.nan],
                     "sites_per_unit": [1.0, 1.0, 1.0], "metal_wt_pct": np.nan, "metal_molar_mass_g_mol": np.nan,
                     "dispersion": np.nan})


def well(plate, name, role, catalyst, rate, se=0.1, df=3.0, t=60.0, loading=0.5, unit="mol%", conc=100.0,
         vol=1000.0, last_t=1.0, last_p=None, solvent="MeCN"):
    return dict(plate=plate, well=name, role=role, catalyst=catalyst, temperature_c=t,
                loading=loading if role != "blank" else np.nan, loading_unit=unit if role != "blank" else None,
                substrate_conc_mM=conc, volume_uL=vol, solvent=solvent, n_points=5, method="initial_slope",
                rate_mM_per_h=rate, rate_se_mM_per_h=se, rate_df=df, last_time_h=last_t,
                last_product_mM=rate * last_t if last_p is None else last_p, flags="")


def frame(rows):
    return pd.DataFrame(rows)


def test_blank_statistics_against_numpy_and_lod_definition():
    rates = [0.8, 1.0, 1.3, 0.9]
    rows = [well("P1", f"A{i}", "blank", None, r) for i, r in enumerate(rates, 1)]
    rows += [well("P1", "B1", "sample", "C1", 20.0), well("P2", "A1", "sample", "C1", 20.0),
             well("P1", "C1", "blank", None, 0.5, se=0.05, df=4, t=80.0)]
    b = blank_rates(frame(rows), S)
    p1 = b[(b.plate == "P1") & (b.temperature_c == 60)].iloc[0]
    assert p1.n_blanks == 4
    assert p1.blank_rate_mM_per_h == pytest.approx(np.mean(rates))
    assert p1.blank_sd_mM_per_h == pytest.approx(np.std(rates, ddof=1))
    assert p1.blank_se_mM_per_h == pytest.approx(stats.sem(rates))           # scipy.stats.sem (ddof=1)
    assert p1.blank_lod_mM_per_h == pytest.approx(3 * stats.sem(rates))    # 3-sigma of the mean, common practice
    assert p1.blank_df == 3 and p1["flags"] == ""
    p2 = b[b.plate == "P2"].iloc[0]
    assert p2.n_blanks == 0 and np.isnan(p2.blank_rate_mM_per_h) and p2["flags"] == "no_blank"
    one = b[(b.plate == "P1") & (b.temperature_c == 80)].iloc[0]   # a well-level temperature override
    assert one.n_blanks == 1 and one.blank_se_mM_per_h == 0.05 and one.blank_lod_mM_per_h == pytest.approx(0.15)
    assert one["flags"] == "single_blank" and one.blank_df == 4


def test_tof_ton_worked_arithmetic_check_values_section6():
    # check-values.md section 6: 100 umol substrate, 0.5 mol% (0.5 umol), 8 % yield after 10 min on a
    # linear segment -> 8 umol product, TON 16, TOF 96 h-1 = 0.026667 s-1.  rate = 8 mM / (1/6 h) = 48 mM/h.
    rows = [well("P1", "A1", "blank", None, 0.0, se=0.0), well("P1", "A2", "blank", None, 0.0, se=0.0),
            well("P1", "B1", "sample", "C1", 48.0, last_t=1 / 6, last_p=8.0)]
    w = frame(rows)
    before = w.copy()
    b = blank_rates(w, S)
    t = well_turnover(CATS, w, b, S)
    pd.testing.assert_frame_equal(w, before)
    r = t[t.well == "B1"].iloc[0]
    assert r.sites_umol == pytest.approx(0.5)
    assert r.tof_per_h == pytest.approx(96.0)
    assert r.ton == pytest.approx(16.0)
    assert r.tof_per_s == pytest.approx(16 / 600, rel=1e-12)
    assert tof_per_s(96.0) == pytest.approx(0.0266667, rel=1e-5)


def test_blank_correction_se_propagation_and_ton_net_of_blank():
    rows = [well("P1", f"A{i}", "blank", None, r, se=0.01) for i, r in enumerate([1.0, 1.2, 0.8], 1)]
    rows += [well("P1", "B1", "sample", "C2", 11.0, se=0.3, last_t=2.0, last_p=20.0, loading=1.0, unit="mg",
                  vol=500.0)]
    w = frame(rows)
    t = well_turnover(CATS, w, blank_rates(w, S), S)
    r = t[t.well == "B1"].iloc[0]
    se_b = np.std([1.0, 1.2, 0.8], ddof=1) / np.sqrt(3)
    sites = 1.0 / 250.0 * 1000
    assert r.net_rate_mM_per_h == pytest.approx(10.0)
    assert r.net_rate_se_mM_per_h == pytest.approx(np.hypot(0.3, se_b))
    assert r.tof_per_h == pytest.approx(10.0 * 0.5 / sites)
    assert r.tof_se_per_h == pytest.approx(np.hypot(0.3, se_b) * 0.5 / sites)
    assert r.ton == pytest.approx((20.0 - 1.0 * 2.0) * 0.5 / sites)      # net of blank product at 2 h
    # enhancement: delta method on the log scale, Welch-Satterthwaite df
    e = 11.0 / 1.0
    a, c = (0.3 / 11.0) ** 2, (se_b / 1.0) ** 2
    dfw = (a + c) ** 2 / (a ** 2 / 3 + c ** 2 / 2)
    q = stats.t.ppf(0.975, dfw)
    assert r.enhancement == pytest.approx(e)
    assert r.enhancement_ci_low == pytest.approx(e * np.exp(-q * np.sqrt(a + c)))
    assert r.enhancement_ci_high == pytest.approx(e * np.exp(q * np.sqrt(a + c)))
    assert r["flags"] == ""


def test_no_blank_plate_and_lod_lower_bound():
    rows = [well("P1", "B1", "sample", "C1", 10.0)]                                  # no blank on P1
    rows += [well("P2", f"A{i}", "blank", None, r) for i, r in enumerate([0.01, -0.02, 0.02, 0.0], 1)]
    rows += [well("P2", "B1", "sample", "C1", 10.0, se=0.2)]
    w = frame(rows)
    b = blank_rates(w, S)
    assert has_flag(b.set_index("plate").loc[["P2"], "flags"], "blank_below_lod").all()
    t = well_turnover(CATS, w, b, S).set_index(["plate", "well"])
    nb = t.loc[("P1", "B1")]
    assert "no_blank" in nb["flags"].split(";") and np.isnan(nb.enhancement)
    assert nb.net_rate_mM_per_h == 10.0                 # not corrected, and says so
    lb = t.loc[("P2", "B1")]
    # a blank below its detection limit may be anywhere below its upper confidence limit: the
    # enhancement over that limit (mean + t(0.975, n - 1) SE; scipy.stats as the reference) is a
    # lower bound, never the detection limit taken as a point
    blanks = [0.01, -0.02, 0.02, 0.0]
    # the blank SE: the scatter, never below the blanks' own fit SEs (0.1 each here)
    se_blank = max(np.std(blanks, ddof=1), 0.1) / np.sqrt(4)
    upper = max(np.mean(blanks), 0.0) + stats.t.ppf(0.975, 3) * se_blank
    assert "enhancement_lower_bound" in lb["flags"].split(";")
    assert lb.enhancement == pytest.approx(10.0 / upper)
    assert lb.enhancement_ci_high == np.inf
    assert lb.enhancement_ci_low == pytest.approx(10.0 / upper * np.exp(-stats.t.ppf(0.975, 3) * 0.2 / 10.0))
    for code in ("no_blank", "enhancement_lower_bound", "outlier", "single_well", "no_sites"):
        assert code in FLAGS


def test_outlier_modified_z_iglewicz_hoaglin():
    vals = np.array([50.0, 51.0, 49.5, 50.5, 80.0])
    rows = [well("P1", "A1", "blank", None, 1.0), well("P1", "A2", "blank", None, 1.1)]
    rows += [well("P1", f"B{i}", "sample", "C1", v) for i, v in enumerate(vals, 1)]
    w = frame(rows)
    t = well_turnover(CATS, w, blank_rates(w, S), S)
    tof = t.loc[t.role == "sample", "tof_per_h"].to_numpy()
    med = np.median(tof)
    mad = np.median(np.abs(tof - med))
    z = 0.6745 * np.abs(tof - med) / mad              # Iglewicz & Hoaglin 1993, modified z
    np.testing.assert_array_equal(t.loc[t.role == "sample", "outlier"].to_numpy(), z > 3.5)
    assert t.loc[t.role == "sample", "outlier"].sum() == 1
    g = group_rates(t, S, factor_names=("solvent",))
    assert g.n_wells.iloc[0] == 5 and "has_outlier" in g["flags"].iloc[0]    # kept, not deleted
    assert g.tof_per_h.iloc[0] == pytest.approx(tof.mean())


def test_group_statistics_against_scipy_t_interval():
    rng = np.random.default_rng(1)
    vals = 40 + rng.normal(0, 2, 6)
    rows = [well("P1", "A1", "blank", None, 1.0, se=0.0), well("P1", "A2", "blank", None, 1.0, se=0.0)]
    rows += [well("P1", f"B{i}", "sample", "C1", v) for i, v in enumerate(vals, 1)]
    rows += [well("P1", "C1", "sample", "C1", 30.0, se=0.5, df=4, loading=1.0)]                # single well
    rows += [well("P1", f"D{i}", "reference", "REF", 20.0 + i, unit="umol", loading=0.1) for i in range(3)]
    w = frame(rows)
    t = well_turnover(CATS, w, blank_rates(w, S), S)
    g = group_rates(t, S, factor_names=("solvent",))
    main = g[(g.catalyst == "C1") & (g.loading == 0.5)].iloc[0]
    tof = (vals - 1.0) * 1.0 / 0.5
    lo, hi = stats.t.interval(0.95, len(tof) - 1, loc=tof.mean(), scale=stats.sem(tof))   # scipy reference
    assert main.tof_per_h == pytest.approx(tof.mean())
    assert main.tof_sd_per_h == pytest.approx(np.std(tof, ddof=1))
    assert main.tof_ci_low == pytest.approx(lo) and main.tof_ci_high == pytest.approx(hi)
    assert main.tof_df == pytest.approx(5)
    assert main.is_standard and main.plates == "P1"
    single = g[(g.catalyst == "C1") & (g.loading == 1.0)].iloc[0]
    assert "single_well" in single["flags"] and not single.is_standard
    assert single.tof_se_per_h == pytest.approx(0.5 * 1.0 / 1.0)
    assert single.tof_ci_high - single.tof_per_h == pytest.approx(stats.t.ppf(0.975, 4) * 0.5)
    ref = g[g.catalyst == "REF"].iloc[0]
    assert ref.role == "reference" and ref.is_standard and ref.n_wells == 3
    # geometric-mean enhancement
    e = vals / 1.0
    assert main.enhancement == pytest.approx(np.exp(np.mean(np.log(e))))
    # 95 % CI of the geometric mean on the log scale, t with n-1 df (blank SE 0 here)
    q = stats.t.ppf(0.975, 5)
    assert main.enhancement_ci_low == pytest.approx(np.exp(np.log(e).mean() - q * stats.sem(np.log(e))))


def test_group_factor_levels_make_separate_conditions_and_confidence_setting():
    rows = [well("P1", "A1", "blank", None, 1.0), well("P1", "A2", "blank", None, 1.2)]
    rows += [well("P1", f"B{i}", "sample", "C1", 10.0 + i) for i in range(3)]
    rows += [well("P1", f"C{i}", "sample", "C1", 20.0 + i, solvent="THF") for i in range(2)]
    w = frame(rows)
    t = well_turnover(CATS, w, blank_rates(w, S), S)
    g = group_rates(t, S, factor_names=("solvent",))
    assert sorted(g.solvent) == ["MeCN", "THF"]
    assert g.set_index("solvent").loc["MeCN", "is_standard"] and not g.set_index("solvent").loc["THF", "is_standard"]
    g90 = group_rates(t, AnalysisSettings(confidence=0.90), factor_names=("solvent",))
    assert (g90.tof_ci_high - g90.tof_ci_low < g.tof_ci_high - g.tof_ci_low).all()


@pytest.mark.slow
def test_seeded_campaigns_recover_truth_and_intervals_cover():
    """1000 synthetic catalyst groups (4 replicates, 3 blanks on each group's own plate): the 95 %
    intervals of TOF and of enhancement cover the truth about 95 % of the time."""
    rng = np.random.default_rng(20260101)
    n_groups, n_rep, n_bl = 1000, 4, 3
    true_blank, true_rate, sd_w, sd_b = 2.0, 30.0, 1.5, 0.2
    rows = []
    for gidx in range(n_groups):          # building the synthetic input only; the analysis is vectorised
        p = f"P{gidx}"
        rows += [well(p, f"A{i}", "blank", None, true_blank + rng.normal(0, sd_b), se=0.0) for i in range(n_bl)]
        rows += [well(p, f"B{i}", "sample", f"K{gidx}", true_rate + rng.normal(0, sd_w), se=0.0)
                 for i in range(n_rep)]
    w = frame(rows)
    cats = pd.DataFrame({"catalyst": [f"K{i}" for i in range(n_groups)], "molar_mass_g_mol": np.nan,
                         "sites_per_unit": 1.0, "metal_wt_pct": np.nan, "metal_molar_mass_g_mol": np.nan,
                         "dispersion": np.nan})
    t = well_turnover(cats, w, blank_rates(w, S), S)
    g = group_rates(t, S, factor_names=("solvent",))
    true_tof = (true_rate - true_blank) * 1.0 / 0.5
    cover = ((g.tof_ci_low <= true_tof) & (true_tof <= g.tof_ci_high)).mean()
    assert 0.93 <= cover <= 0.97
    assert abs(g.tof_per_h.mean() - true_tof) < 0.1
    # the enhancement of each well: well / blank mean; the group CI targets the geometric mean ratio
    true_e = true_rate / true_blank
    cover_e = ((g.enhancement_ci_low <= true_e) & (true_e <= g.enhancement_ci_high)).mean()
    assert 0.92 <= cover_e <= 0.985


def test_outlier_rule_pools_scatter_and_catches_a_dead_well():
    # 60 groups of 3 replicates with 10 % log-normal scatter (invented): a per-group MAD would flag
    # roughly one group in six by chance (two wells agreeing makes the third look wild); the
    # pooled scale (modified z of Iglewicz & Hoaglin 1993 with the MAD pooled over groups) flags
    # few, and a dead well (zero rate) among active replicates is always flagged.
    from screenlab.kinetics.turnover import _robust_z

    rng = np.random.default_rng(3)
    vals = np.exp(np.log(50.0) + rng.normal(0, 0.10, (60, 3)))
    groups = np.repeat(np.arange(60), 3)
    z = _robust_z(vals.ravel(), groups)
    assert np.mean(z > 3.5) < 0.02
    own_mad = np.array([np.median(np.abs(v - np.median(v))) for v in vals])
    naive = 0.6745 * np.abs(vals - np.median(vals, axis=1, keepdims=True)) / own_mad[:, None]
    assert np.mean(naive > 3.5) > 0.05                      # what the per-group rule would have done
    vals[0, 1] = 0.0
    z = _robust_z(vals.ravel(), groups, se=np.where(vals.ravel() == 0, 0.0, 1.0))
    assert z[1] == np.inf and z[0] < 3.5


def test_failed_well_is_flagged_and_left_out_of_the_group():
    # a dispensing failure (no product) among active replicates: shown per well, not averaged in
    rows = [well("P1", "A1", "blank", None, 1.0), well("P1", "A2", "blank", None, 1.1), well("P1", "A3", "blank", None, 0.9)]
    rows += [well("P1", f"B{i}", "sample", "C1", v) for i, v in enumerate([50.0, 52.0, 0.0], 1)]
    rows += [well("P1", f"C{i}", "sample", "C2", v) for i, v in enumerate([20.0, 21.0, 19.0], 1)]
    w = frame(rows)
    t = well_turnover(CATS, w, blank_rates(w, S), S)
    assert t.loc[t.well == "B3", "flags"].iloc[0].count("failed_well") == 1
    assert not t.loc[t.well != "B3", "flags"].str.contains("failed_well").any()
    g = group_rates(t, S, factor_names=("solvent",)).set_index("catalyst")
    kept = t.loc[t.well.isin(["B1", "B2"]), "tof_per_h"]
    assert g.loc["C1", "n_wells"] == 2 and g.loc["C1", "tof_per_h"] == pytest.approx(kept.mean())
    assert "excluded_failed_well" in g.loc["C1", "flags"] and "excluded_failed_well" not in g.loc["C2", "flags"]


# ------------------------------------------------------------------ substrate left, levels, bounds

def test_ton_counts_the_background_on_the_substrate_the_well_had_left():
    # parallel first-order pathways, invented numbers: S0 = 100 mM, the catalysed well converts with
    # k_cat = 1 h-1 and the blank with k_b = 0.05 h-1; at t the catalysed product is
    # k_cat/(k_cat + k_b) of all product (two parallel first-order paths share one exponential)
    k_cat, k_b, s0 = 1.0, 0.05, 100.0
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8.0])
    x = -np.expm1(-(k_cat + k_b) * t)
    # the rate step's integral of the substrate left, by the trapezoid rule over these readings
    s_int = np.trapezoid(1 - x, t)
    rows = [well("P1", f"A{i}", "blank", None, k_b * s0, se=0.01, conc=s0) for i in range(3)]
    rows += [well("P1", "B1", "sample", "C1", (k_cat + k_b) * s0, last_t=8.0, last_p=s0 * x[-1], conc=s0,
                  loading=1.0, unit="umol")]
    w = frame(rows).assign(substrate_integral_h=s_int, last_conversion_pct=np.r_[np.nan, np.nan, np.nan, 100 * x[-1]])
    r = well_turnover(CATS, w, blank_rates(w, S), S).set_index("well").loc["B1"]
    true_ton = s0 * x[-1] * k_cat / (k_cat + k_b) * 1.0 / 1.0          # mM x 1 mL / 1 umol
    assert r.ton == pytest.approx(true_ton, rel=0.01)
    # the old rule (blank rate x time, as if the well kept its substrate) is 28 % low here
    assert (s0 * x[-1] - k_b * s0 * 8.0) / true_ton < 0.75
    assert "ton_capped" in r["flags"].split(";")                      # 100 % converted: TON = S / sites


def test_blank_per_substrate_level_and_scaled_where_a_level_has_none():
    rows = [well("P1", f"A{i}", "blank", None, 0.5 + 0.01 * i, conc=50.0) for i in range(3)]
    rows += [well("P1", f"B{i}", "blank", None, 2.0 + 0.01 * i, conc=200.0) for i in range(4)]
    rows += [well("P1", "C1", "sample", "C1", 10.0, conc=50.0), well("P1", "C2", "sample", "C1", 20.0, conc=200.0),
             well("P1", "C3", "sample", "C1", 30.0, conc=400.0)]
    b = blank_rates(frame(rows), S)
    lv = b.set_index("substrate_conc_mM")
    assert lv.loc[50.0, "blank_rate_mM_per_h"] == pytest.approx(0.51)
    assert lv.loc[200.0, "blank_rate_mM_per_h"] == pytest.approx(2.015)
    # 400 mM has no blank: the level with most blanks (200 mM), scaled as a first-order background
    assert lv.loc[400.0, "blank_rate_mM_per_h"] == pytest.approx(2.015 * 2)
    assert "blank_scaled" in lv.loc[400.0, "flags"] and lv.loc[400.0, "blank_conc_mM"] == 200.0
    t = well_turnover(CATS, frame(rows), b, S).set_index("well")
    assert t.loc["C1", "net_rate_mM_per_h"] == pytest.approx(10.0 - 0.51)
    assert t.loc["C2", "net_rate_mM_per_h"] == pytest.approx(20.0 - 2.015)


def test_a_blank_outlier_does_not_pull_the_blank_mean():
    rates = [1.0, 1.05, 0.95, 1.02, 3.0]                   # one blank on an evaporating edge reads 3x
    rows = [well("P1", f"A{i}", "blank", None, r, se=0.02) for i, r in enumerate(rates)]
    b = blank_rates(frame(rows), S).iloc[0]
    assert b.blank_rate_mM_per_h == pytest.approx(np.mean(rates[:4]))
    assert b.n_blanks == 4 and b.n_blank_outliers == 1 and "blank_outlier_excluded" in b["flags"]


def _group(rows):
    w = frame(rows)
    t = well_turnover(CATS, w, blank_rates(w, S), S)
    return group_rates(t, S, factor_names=("solvent",)).set_index("catalyst")


def test_a_group_of_wells_done_before_their_first_reading_is_a_lower_bound():
    blanks = [well("P1", f"A{i}", "blank", None, 0.1, se=0.01) for i in range(3)]
    fast = [dict(well("P1", f"B{i}", "sample", "C1", 190.0 + i), censored="lower", rate_se_mM_per_h=np.nan)
            for i in range(3)]
    two_of_three = [dict(well("P1", "C1", "sample", "C2", 50.0), censored="lower", rate_se_mM_per_h=np.nan),
                    well("P1", "C2", "sample", "C2", 20.0, se=0.5), well("P1", "C3", "sample", "C2", 22.0, se=0.5)]
    g = _group(blanks + fast + two_of_three)
    c1 = g.loc["C1"]
    assert c1.censored == "lower" and np.isnan(c1.tof_ci_high) and c1.tof_ci_low == pytest.approx(c1.tof_per_h)
    assert "done_at_first_reading" in c1["flags"]
    # a minority of bounds: left out, the estimate rests on the measured replicates (and says so)
    c2 = g.loc["C2"]
    assert c2.censored == "" and "censored_replicate" in c2["flags"]
    assert c2.rate_mM_per_h == pytest.approx(21.0)


def test_a_group_not_above_its_blank_reports_an_upper_bound():
    blanks = [well("P1", f"A{i}", "blank", None, r, se=0.05) for i, r in enumerate([1.0, 1.1, 0.9])]
    dead = [well("P1", f"B{i}", "sample", "C1", r, se=0.05) for i, r in enumerate([1.05, 0.95, 1.1])]
    c1 = _group(blanks + dead).loc["C1"]
    assert c1.censored == "upper" and np.isnan(c1.tof_ci_low)
    assert c1.tof_per_h == pytest.approx(c1.tof_ci_high) and c1.tof_per_h > 0
    assert "not_above_blank" in c1["flags"]


def test_group_se_never_below_the_wells_own_fit_errors():
    # three replicates that agree to 0.1 % by chance, each with a 5 % fit SE: the interval rests on
    # the fit errors (SE of the mean = 5 % / sqrt 3), not on the chance agreement
    blanks = [well("P1", f"A{i}", "blank", None, 0.0, se=0.0) for i in range(2)]
    reps = [well("P1", f"B{i}", "sample", "C1", 10.0 + 0.01 * i, se=0.5) for i in range(3)]
    c1 = _group(blanks + reps).loc["C1"]
    tof_per_rate = 1.0 / 0.5          # 1000 uL x 1e-3 / (0.5 mol% of 100 umol = 0.5 umol)
    assert c1.tof_rep_se_per_h == pytest.approx(0.5 / np.sqrt(3) * tof_per_rate, rel=1e-6)
