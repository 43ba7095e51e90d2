"""Blanks, TOF/TON, enhancement and the per-group table (screenlab.kinetics.turnover).

Besides the worked cases, the replicate outlier score is checked against its rule written out
group by group, the blank lookup against a pandas left merge, and the per-group table of a seeded
synthetic campaign (``turnover_stages`` fixture) against a pandas group-by.
"""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab import _groups as grp
from screenlab.kinetics import turnover
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
    # enhancement over that limit (mean + t(0.975, df) SE; scipy.stats as the reference) is a
    # lower bound, never the detection limit taken as a point
    blanks = [0.01, -0.02, 0.02, 0.0]
    # the blank SE: the scatter, never below the blanks' own fit SEs (0.1 each here); the fit SEs
    # set it, so its df is theirs, 4 fits x 3 df (not the 3 of four blanks' scatter)
    se_blank = max(np.std(blanks, ddof=1), 0.1) / np.sqrt(4)
    assert b.set_index("plate").loc["P2", "blank_df"] == 12
    upper = max(np.mean(blanks), 0.0) + stats.t.ppf(0.975, 12) * se_blank
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


def test_ton_background_is_the_blank_product_rate_whatever_the_stoichiometry():
    # the same parallel first-order pathways with two product molecules per substrate
    # (product_per_substrate = 2): every product amount and rate doubles, so the TON doubles too;
    # the blank's rate is already a product rate and takes no second factor of 2
    from types import SimpleNamespace

    k_cat, k_b, s0, pps = 1.0, 0.05, 100.0, 2.0
    t = np.array([0, 0.5, 1, 2, 3, 4, 6, 8.0])
    x = -np.expm1(-(k_cat + k_b) * t)
    s_int = np.trapezoid(1 - x, t)
    rows = [well("P1", f"A{i}", "blank", None, pps * k_b * s0, se=0.01, conc=s0) for i in range(3)]
    rows += [well("P1", "B1", "sample", "C1", pps * (k_cat + k_b) * s0, last_t=8.0, last_p=pps * s0 * x[-1],
                  conc=s0, loading=1.0, unit="umol")]
    w = frame(rows).assign(substrate_integral_h=s_int, last_conversion_pct=np.r_[np.nan, np.nan, np.nan, 100 * x[-1]])
    data = SimpleNamespace(catalysts=CATS, manifest=SimpleNamespace(product_per_substrate=pps), factor_names=())
    r = well_turnover(data, w, blank_rates(w, S), S).set_index("well").loc["B1"]
    assert r.ton == pytest.approx(pps * s0 * x[-1] * k_cat / (k_cat + k_b), rel=0.01)


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


def test_a_blank_left_out_as_an_outlier_is_the_one_flagged_when_ring_blanks_are_left_out():
    # an edge-effect plate: the ring blanks (left out on purpose) read high like one interior
    # blank; judged among the blanks the mean uses, that interior blank is the outlier, and the
    # well flags say so as the blank row's count does
    rates = [1.00, 1.02, 0.99, 1.60, 1.60, 1.60]
    rows = [well("P1", f"B{i + 2}", "blank", None, r, se=0.02) for i, r in enumerate(rates)]
    w = frame(rows)
    ring = np.array([False, False, False, False, True, True])
    b = blank_rates(w, S, exclude=ring)
    t = well_turnover(CATS, w, b, S, excluded_blanks=ring).set_index("well")
    assert b["n_blank_outliers"].iloc[0] == 1 and b["blank_rate_mM_per_h"].iloc[0] == pytest.approx(np.mean(rates[:3]))
    assert t["outlier"].tolist() == [False, False, False, True, False, False]
    assert all("blank_left_out" in f for f in t["flags"].iloc[4:])


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


def test_a_replicate_left_out_as_a_bound_leaves_the_group_enhancement_measured():
    # one of three replicates done before its first reading is left out (censored_replicate); its
    # own enhancement is a lower bound, the group's rests on the two measured wells and is not
    blanks = [well("P1", f"A{i}", "blank", None, 0.1, se=0.01) for i in range(3)]
    reps = [dict(well("P1", "C1", "sample", "C2", 50.0), censored="lower", rate_se_mM_per_h=np.nan),
            well("P1", "C2", "sample", "C2", 20.0, se=0.5), well("P1", "C3", "sample", "C2", 22.0, se=0.5)]
    c2 = _group(blanks + reps).loc["C2"]
    assert "censored_replicate" in c2["flags"] and "enhancement_lower_bound" not in c2["flags"]
    assert c2.enhancement == pytest.approx(np.sqrt(200.0 * 220.0))      # geometric mean of 20/0.1 and 22/0.1
    assert np.isfinite(c2.enhancement_ci_high) and c2.enhancement_ci_low < c2.enhancement < c2.enhancement_ci_high


def test_a_single_well_group_takes_the_welch_df_of_its_fit_and_its_blank():
    # one well (fit SE 0.4 mM/h on 10 df) over two blanks (their mean's SE on 1 df): the group's
    # interval is the well's own, with the Welch-Satterthwaite df of the two errors
    # (Welch, Biometrika 1947) and the t quantile of scipy.stats
    blanks = [well("P1", "A1", "blank", None, 1.0, se=0.3, df=1.0), well("P1", "A2", "blank", None, 1.6, se=0.3, df=1.0)]
    one = [well("P1", "B1", "sample", "C1", 6.0, se=0.4, df=10.0)]
    w = frame(blanks + one)
    b = blank_rates(w, S)
    t = well_turnover(CATS, w, b, S)
    g = group_rates(t, S, factor_names=("solvent",)).set_index("catalyst").loc["C1"]
    b_se, b_df = b["blank_se_mM_per_h"].iloc[0], b["blank_df"].iloc[0]
    df = (0.4 ** 2 + b_se ** 2) ** 2 / (0.4 ** 4 / 10.0 + b_se ** 4 / b_df)
    assert g.tof_df == pytest.approx(df, rel=1e-9)
    per_site = 1.0 / 0.5                                   # 1000 uL x 1e-3 / 0.5 umol of sites
    half = stats.t.ppf(0.975, df) * np.hypot(0.4, b_se) * per_site
    assert g.tof_ci_high - g.tof_per_h == pytest.approx(half, rel=1e-9)
    # the group and its one well agree on whether it is active over the blank
    assert (g.censored == "upper") == (t.loc[t.well == "B1", "censored"].iloc[0] == "upper")


def test_a_computed_substrate_level_is_one_condition_with_its_blank():
    # 100 mM written as 100.0 and as a computed 100.0000000001: one blank level (9 significant
    # digits), so one condition too
    blanks = [well("P1", f"A{i}", "blank", None, 0.1, se=0.01) for i in range(3)]
    reps = [well("P1", "B1", "sample", "C1", 20.0, se=0.5), well("P1", "B2", "sample", "C1", 22.0, se=0.5, conc=100.0 + 1e-10)]
    g = _group(blanks + reps)
    assert len(g.loc[["C1"]]) == 1 and g.loc["C1", "n_wells"] == 2


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


# ------------------------------------------------------------------------------- replicate outliers

def robust_z_rule(values, groups, se=None):
    """The replicate outlier score written out group by group (a test-only loop), as the turnover
    module docstring states it: the modified z of Iglewicz & Hoaglin ("How to Detect and Handle
    Outliers", ASQC 1993), 0.6745 |x - median| / MAD, within each group of three or more finite
    values; with MAD = 0, |x - median| / (1.253314 x mean absolute deviation) (common practice, no
    source); a group with a positive median (active) is judged on ln x against the MAD of ln x
    pooled over all active groups (non-zero deviations), a non-positive value there scoring inf;
    with ``se``, the score is capped at |x - median| / se."""
    values = np.asarray(values, dtype=float)
    groups = np.asarray(groups)
    ok = np.isfinite(values) & (groups >= 0)
    members = {g: np.flatnonzero(ok & (groups == g)) for g in np.unique(groups[ok])}
    active = {g: idx for g, idx in members.items() if len(idx) >= 3 and np.median(values[idx]) > 0}
    pool = []
    for idx in active.values():
        x = values[idx]
        lx = np.log(x[x > 0])
        d = np.abs(lx - np.median(lx))
        pool.extend(d[d > 0])
    z = np.full(values.shape, np.nan)
    for g, idx in members.items():
        if len(idx) < 3:
            continue
        x = values[idx]
        dev = np.abs(x - np.median(x))
        mad = np.median(dev)
        if mad > 0:
            zr = 0.6745 * dev / mad
        else:
            mean_ad = dev.mean()
            zr = dev / (1.253314 * mean_ad) if mean_ad > 0 else np.zeros(len(x))
        if g in active and pool:
            ln_med = np.median(np.log(x[x > 0]))
            with np.errstate(divide="ignore", invalid="ignore"):
                zr = np.where(x > 0, 0.6745 * np.abs(np.log(np.where(x > 0, x, 1.0)) - ln_med) / np.median(pool), np.inf)
        if se is not None:
            s = np.asarray(se, dtype=float)[idx]
            with np.errstate(divide="ignore", invalid="ignore"):
                zr = np.minimum(zr, np.where(np.isfinite(s) & (s > 0), dev / s, np.inf))
        z[idx] = zr
    return z


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_robust_z_follows_the_stated_rule(seed):
    rng = np.random.default_rng(seed)
    sizes = rng.integers(1, 7, 150)
    sizes[:3] = [30, 12, 3]
    g = rng.permutation(np.repeat(np.arange(sizes.size), sizes))
    v = np.exp(rng.normal(3.0, 0.3, g.size)) * np.where(rng.random(g.size) < 0.2, -0.1, 1.0)
    v[rng.random(g.size) < 0.05] = 0.0
    v[np.isin(g, [5, 6])] = 7.0                           # MAD = 0 groups
    v[rng.random(g.size) < 0.05] = np.nan
    g = np.where(rng.random(g.size) < 0.05, -1, g)      # rows outside any group
    se = np.where(rng.random(g.size) < 0.5, rng.uniform(0.01, 2.0, g.size), np.nan)
    np.testing.assert_array_equal(turnover._robust_z(v, g), robust_z_rule(v, g))
    np.testing.assert_array_equal(turnover._robust_z(v, g, se), robust_z_rule(v, g, se))
    assert np.isinf(turnover._robust_z(v, g)).any()         # dead wells among active replicates were scored


def test_role_matches_string_conversion():
    # the rule: a role's text, "" where missing (pandas string conversion as the reference)
    s = pd.Series(["sample", None, "blank", "empty", "sample"], dtype="str")
    ref = s.astype(object).where(s.notna(), "").astype(str).to_numpy(dtype=object)
    assert turnover._role(pd.DataFrame({"role": s})).tolist() == ref.tolist()
    o = pd.Series(["sample", np.nan, 3], dtype=object)
    ref = o.astype(object).where(o.notna(), "").astype(str).to_numpy(dtype=object)
    assert turnover._role(pd.DataFrame({"role": o})).tolist() == ref.tolist()


# ------------------------------------------------------------------------------- blank lookup

@pytest.mark.parametrize("seed", [0, 1])
def test_blank_rows_equal_the_left_merge(seed):
    rng = np.random.default_rng(seed)
    plates = pd.Series(rng.choice(["P1", "P2", "P3", "Q"], 400), dtype="str")
    t = rng.choice([40.0, 50.0, 60.0000000001, np.nan], 400)
    tkey = turnover._tkey(t)
    blanks = pd.DataFrame({"plate": pd.Series(["P1", "P1", "P2", "P2", "P3", "Z"], dtype="str"),
                           "temperature_c": [40.0, 50.0, 40.0, 40.0, np.nan, 40.0]})
    got = turnover._blank_rows(grp.factorize(plates), tkey, np.full(len(t), 200.0), blanks)
    # pandas reference: a left merge on (plate, temperature to 1e-6 degC), the first blank row of a key
    bl = blanks.assign(tkey=np.round(blanks["temperature_c"].to_numpy(float), 6), row=np.arange(len(blanks)))
    bl = bl.drop_duplicates(["plate", "tkey"])
    ref = pd.DataFrame({"plate": plates.astype(object), "tkey": np.round(t, 6)}).merge(
        bl[["plate", "tkey", "row"]].astype({"plate": object}), on=["plate", "tkey"], how="left")
    np.testing.assert_array_equal(got, ref["row"].fillna(-1).to_numpy(dtype=np.int64))


# ------------------------------------------------------------------------------- a synthetic campaign

def test_group_rates_statistics_equal_a_pandas_aggregation(turnover_stages):
    d, s, _, _, w, got = turnover_stages
    t = w[w["role"].isin(["sample", "reference"]) & w["rate_mM_per_h"].notna()].copy()
    t["temperature_c"] = np.round(t["temperature_c"].to_numpy(float), 6)      # temperatures to 1e-6 degC
    keys = ["catalyst", "role", "temperature_c", "loading", "loading_unit", "substrate_conc_mM", *d.factor_names]
    failed = has_flag(t["flags"], "failed_well")
    for c in ("rate_mM_per_h", "tof_per_h", "ton"):
        t.loc[failed, c] = np.nan
    # pandas reference: one group-by agg
    ref = t.groupby(keys, dropna=False, sort=False).agg(
        n_wells=("rate_mM_per_h", "count"), rate=("rate_mM_per_h", "mean"), rate_sd=("rate_mM_per_h", "std"),
        tof=("tof_per_h", "mean"), ton=("ton", "mean")).reset_index()
    ref = ref.sort_values(["catalyst", "temperature_c", "loading", "substrate_conc_mM"], kind="stable",
                          na_position="last").reset_index(drop=True)
    pd.testing.assert_frame_equal(got[keys].reset_index(drop=True), ref[keys])
    np.testing.assert_array_equal(got["n_wells"].to_numpy(), ref["n_wells"].to_numpy())
    measured = (got["censored"].astype(str) == "").to_numpy()        # bounds report their bound, not the mean
    assert measured.mean() > 0.8
    for a, b in (("rate_mM_per_h", "rate"), ("rate_sd_mM_per_h", "rate_sd"), ("tof_per_h", "tof"), ("ton", "ton")):
        np.testing.assert_array_equal(got[a].to_numpy()[measured], ref[b].to_numpy()[measured], err_msg=a)


def test_rates_table_states_the_ton_df_and_the_enhancement_log_se_behind_its_interval(turnover_stages):
    # ton_df: the TON SE is the replicates' SD / sqrt(n), so n - 1 (pandas count of the wells' TONs);
    # enhancement: its interval is exp(ln E -/+ t(conf, df) x ln_se), the t quantile of scipy.stats
    d, s, _, _, w, got = turnover_stages
    t = w[w["role"].isin(["sample", "reference"]) & w["rate_mM_per_h"].notna()].copy()
    t["temperature_c"] = np.round(t["temperature_c"].to_numpy(float), 6)
    t.loc[has_flag(t["flags"], "failed_well"), "ton"] = np.nan
    keys = ["catalyst", "role", "temperature_c", "loading", "loading_unit", "substrate_conc_mM", *d.factor_names]
    n_ton = t.groupby(keys, dropna=False, sort=False)["ton"].count().reset_index()
    merged = got.merge(n_ton, on=keys, how="left", suffixes=("", "_n"))
    expect = np.where(merged["ton_n"] >= 2, merged["ton_n"] - 1.0, np.nan)
    np.testing.assert_array_equal(got["ton_df"].to_numpy(float), expect)
    ok = np.isfinite(got["enhancement_ln_se"]) & np.isfinite(got["enhancement_ci_high"])
    assert ok.mean() > 0.5 and (got.loc[ok, "enhancement_df"] > 0).all()
    q = stats.t.ppf(0.5 + s.confidence / 2, got.loc[ok, "enhancement_df"])
    ln_e, se = np.log(got.loc[ok, "enhancement"]), got.loc[ok, "enhancement_ln_se"]
    np.testing.assert_allclose(got.loc[ok, "enhancement_ci_low"], np.exp(ln_e - q * se), rtol=1e-9)
    np.testing.assert_allclose(got.loc[ok, "enhancement_ci_high"], np.exp(ln_e + q * se), rtol=1e-9)


def test_well_flags_follow_the_output_columns(turnover_stages):
    data, s, per_well, blanks, wells, _ = turnover_stages
    catalysed = wells["role"].isin(["sample", "reference"]).to_numpy()
    # the rule: each code set here where its condition holds on the output columns
    expect = {
        "no_blank": (catalysed | (wells["role"] == "blank").to_numpy()) & wells["blank_rate_mM_per_h"].isna().to_numpy(),
        "no_sites": catalysed & wells["sites_umol"].isna().to_numpy(),
        "outlier": wells["outlier"].to_numpy(bool),
    }
    got = wells["flags"]
    for code, mask in expect.items():
        np.testing.assert_array_equal(has_flag(got, code), mask | has_flag(per_well["flags"], code), err_msg=code)
    # flags that came in from well_rates are kept, in front
    kept = per_well["flags"].fillna("").astype(str)
    assert all(str(g).startswith(k) for g, k in zip(got, kept) if k)


def test_group_plates_and_flags_against_wells(turnover_stages):
    data, s, _, _, wells, groups = turnover_stages
    cat = wells[wells["role"].isin(["sample", "reference"]) & wells["rate_mM_per_h"].notna()]
    keys = ["catalyst", "temperature_c", "loading", "substrate_conc_mM"]
    # pandas reference: the sorted distinct plates of each group, joined
    ref = cat.groupby(keys, dropna=False)["plate"].agg(lambda s: ";".join(sorted(set(s.astype(str)))))
    got = groups.set_index(keys)["plates"]
    assert len(got) == len(ref)
    assert got.sort_index().tolist() == ref.sort_index().tolist()
    assert (groups["n_plates"] == groups["plates"].str.count(";") + 1).all()
    outl = cat.groupby(keys, dropna=False)["outlier"].sum()
    assert (has_flag(groups.set_index(keys).loc[outl.index, "flags"], "has_outlier") == (outl > 0).to_numpy()).all()
