"""Per-well initial rates: methods, recovery of known laws (synthetic, invented data), coverage, flags."""
from __future__ import annotations

import time

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.kinetics import rates
from screenlab.kinetics.rates import FLAGS, well_rates
from screenlab.model import CampaignData, Manifest
from screenlab.settings import AnalysisSettings

CONTRACT = ["plate", "well", "row", "col", "role", "catalyst", "temperature_c", "loading", "loading_unit",
            "substrate_conc_mM", "volume_uL", "n_points", "method", "rate_mM_per_h", "rate_se_mM_per_h",
            "rate_df", "k_per_h", "last_time_h", "last_product_mM", "last_conversion_pct", "flags"]
TIMES = np.array([0, 0.25, 0.5, 1, 2, 4, 8, 16.0])


def make(times_per_well, values_per_well, s0=100.0, roles=None, kind="product_conc", factors=None, **manifest):
    """A one-plate campaign: well i gets times_per_well[i] and values_per_well[i] (vectorised build)."""
    G = len(times_per_well)
    lens = np.array([len(t) for t in times_per_well])
    names = np.array([f"W{i}" for i in range(G)])
    wells = pd.DataFrame({"plate": "P1", "well": names, "row": np.arange(G) // 24, "col": np.arange(G) % 24,
                          "role": roles if roles is not None else "sample", "catalyst": "C1", "loading": 1.0,
                          "loading_unit": "umol", "substrate_conc_mM": s0, "volume_uL": 200.0,
                          "temperature_c": 60.0})
    for name, vals in (factors or {}).items():
        wells[name] = vals
    readings = pd.DataFrame({
        "plate": "P1", "well": np.repeat(names, lens), "analyte": "product",
        "time_h": np.concatenate([np.asarray(t, float) for t in times_per_well]) if G else [],
        "value": np.concatenate([np.asarray(v, float) for v in values_per_well]) if G else []})
    return CampaignData(manifest=Manifest(name="t", readout_kind=kind, **manifest), catalysts=pd.DataFrame(),
                        plates=pd.DataFrame(), wells=wells, readings=readings,
                        factor_names=tuple(factors or ()))


def flags_of(frame, i):
    return set(str(frame["flags"].iloc[i]).split(";")) - {""}


def test_contract_columns_one_row_per_non_empty_well_and_no_mutation():
    d = make([TIMES, TIMES, TIMES], [0.5 * TIMES, 0.0 * TIMES, 0.3 * TIMES],
             roles=["sample", "empty", "blank"], factors={"solvent": ["MeCN", "MeCN", "THF"]})
    before_w, before_r = d.wells.copy(), d.readings.copy()
    out = well_rates(d, AnalysisSettings())
    assert list(out.columns[:11]) == CONTRACT[:11] and "solvent" in out.columns
    assert all(c in out.columns for c in CONTRACT)
    assert list(out["well"]) == ["W0", "W2"]                  # empty well left out
    assert out["role"].tolist() == ["sample", "blank"]        # blanks get rates too
    assert out["rate_mM_per_h"].to_numpy() == pytest.approx([0.5, 0.3])
    pd.testing.assert_frame_equal(d.wells, before_w)
    pd.testing.assert_frame_equal(d.readings, before_r)
    assert set(FLAGS) >= {"end_point_only", "above_window", "induction", "deactivation", "fixed_plateau",
                          "fit_failed", "few_points", "no_readings", "negative_rate", "baseline_first_reading"}


def test_initial_slope_matches_linregress_on_the_window():
    # reference library: scipy.stats.linregress on the readings at or below 20 % conversion
    rng = np.random.default_rng(5)
    y = 100 * (1 - np.exp(-0.05 * TIMES)) + rng.normal(0, 0.2, TIMES.size)
    out = well_rates(make([TIMES], [y]), AnalysisSettings())
    win = np.maximum.accumulate(y) <= 20.0
    ref = stats.linregress(TIMES[win], y[win])
    assert out["method"].iloc[0] == "initial_slope"
    assert out["rate_mM_per_h"].iloc[0] == pytest.approx(ref.slope, rel=1e-10)
    assert out["rate_se_mM_per_h"].iloc[0] == pytest.approx(ref.stderr, rel=1e-10)
    assert out["rate_df"].iloc[0] == win.sum() - 2
    half = stats.t.ppf(0.975, win.sum() - 2) * ref.stderr
    assert out["rate_ci_high_mM_per_h"].iloc[0] == pytest.approx(ref.slope + half, rel=1e-10)


def test_first_order_wells_recovered_within_se():
    # synthetic first-order wells with noise (invented data): fast enough that the window holds < 3 points
    rng = np.random.default_rng(21)
    G = 2000
    k = rng.uniform(1.0, 3.0, G)
    ys = [100 * (1 - np.exp(-ki * TIMES)) + rng.normal(0, 0.5, TIMES.size) for ki in k]
    out = well_rates(make([TIMES] * G, ys), AnalysisSettings())
    fo = (out["method"] == "first_order").to_numpy()
    assert fo.mean() > 0.95
    z = (out["rate_mM_per_h"].to_numpy() - 100 * k)[fo] / out["rate_se_mM_per_h"].to_numpy()[fo]
    assert np.mean(np.abs(z) < stats.t.ppf(0.975, 6)) == pytest.approx(0.95, abs=0.025)
    assert out["k_per_h"].to_numpy()[fo] == pytest.approx(k[fo], rel=0.05)


@pytest.mark.slow
def test_initial_slope_interval_coverage_near_nominal():
    # zero-order (straight) courses inside the window: the 95 % t interval should cover the true slope
    # ~95 % of the time (t distribution with n-2 df, scipy.stats.t)
    rng = np.random.default_rng(99)
    G = 4000
    slope = rng.uniform(0.5, 2.0, G)
    ys = [s * TIMES + rng.normal(0, 0.3, TIMES.size) for s in slope]
    out = well_rates(make([TIMES] * G, ys, s0=1000.0), AnalysisSettings())
    assert (out["method"] == "initial_slope").all() and (out["rate_df"] == 6).all()
    cover = (out["rate_ci_low_mM_per_h"] <= slope) & (slope <= out["rate_ci_high_mM_per_h"])
    # binomial SD at n = 4000 is 0.0034; +-0.015 is > 4 SD
    assert cover.mean() == pytest.approx(0.95, abs=0.015)


def test_flag_end_point_only_and_no_readings():
    d = make([[0.0, 2.0], [3.0], [0.0], []], [[1.0, 5.0], [6.0], [0.0], []])
    out = well_rates(d, AnalysisSettings())
    assert out["method"].tolist() == ["end_point", "end_point", "no_data", "no_data"]
    assert out["rate_mM_per_h"].to_numpy()[:2] == pytest.approx([2.0, 2.0])   # net of t = 0; 6 / 3
    assert np.isnan(out["rate_se_mM_per_h"].iloc[0]) and out["rate_df"].iloc[0] == 0
    assert "end_point_only" in flags_of(out, 0) and "no_readings" in flags_of(out, 2)
    assert np.isnan(out["rate_mM_per_h"].iloc[3]) and "no_readings" in flags_of(out, 3)


def test_flag_above_window():
    out = well_rates(make([TIMES], [100 * (1 - np.exp(-3.0 * TIMES))]), AnalysisSettings())
    assert "above_window" in flags_of(out, 0)


def test_flag_fixed_plateau_when_b1_undetermined():
    # t0 + 2 readings past the window: fewer than 4 points -> plateau fixed at substrate x stoichiometry
    t = np.array([0.0, 1.0, 2.0])
    y = 60 * (1 - np.exp(-0.5 * t))                         # plateau 60, theoretical max 120 (pps 1.2)
    out = well_rates(make([t], [y], product_per_substrate=1.2), AnalysisSettings())
    assert out["method"].iloc[0] == "first_order"
    assert flags_of(out, 0) >= {"fixed_plateau", "few_points"}
    assert out["plateau_mM"].iloc[0] == pytest.approx(120.0)
    k = out["k_per_h"].iloc[0]
    assert out["rate_mM_per_h"].iloc[0] == pytest.approx(k * 120.0)
    assert out["rate_df"].iloc[0] == 2


def test_flag_fit_failed_for_course_complete_at_first_reading():
    t = np.array([0.0, 1.0, 2.0, 3.0, 4.0])
    y = np.array([0.0, 100.0, 100.0, 100.0, 100.0])
    out = well_rates(make([t], [y]), AnalysisSettings())
    assert "fit_failed" in flags_of(out, 0) and np.isnan(out["rate_mM_per_h"].iloc[0])
    assert "above_window" in flags_of(out, 0)


def test_flag_negative_rate_for_noisy_blank():
    out = well_rates(make([TIMES], [-0.05 * TIMES]), AnalysisSettings())
    assert out["rate_mM_per_h"].iloc[0] < 0 and "negative_rate" in flags_of(out, 0)


def test_flag_induction():
    # lag then linear growth, all inside the window; noise small (invented data)
    rng = np.random.default_rng(2)
    t = np.linspace(0, 4, 9)
    y = np.clip(t - 2.0, 0, None) * 4.0 + rng.normal(0, 0.05, t.size)
    out = well_rates(make([t], [y]), AnalysisSettings())
    assert out["method"].iloc[0] == "initial_slope" and "induction" in flags_of(out, 0)
    # a straight course is not flagged
    out2 = well_rates(make([t], [2.0 * t + rng.normal(0, 0.05, t.size)]), AnalysisSettings())
    assert "induction" not in flags_of(out2, 0)


def test_flag_deactivation():
    # fast start that stops at 25 % of the theoretical product: the catalyst died
    t = np.array([0, 0.25, 0.5, 1, 2, 4, 8, 16.0])
    y = 25 * (1 - np.exp(-1.0 * t))
    out = well_rates(make([t], [y], s0=100.0), AnalysisSettings())
    assert "deactivation" in flags_of(out, 0)
    # a plain first-order course to the full plateau is not flagged
    out2 = well_rates(make([t], [100 * (1 - np.exp(-0.3 * t))]), AnalysisSettings())
    assert "deactivation" not in flags_of(out2, 0)


def test_flag_baseline_first_reading_for_absorbance():
    t = np.array([0.5, 1.0, 1.5, 2.0])
    a = 0.1 + 0.018 * t                                    # 1 uM/h x eps 18000 x 1 cm / 1e6
    out = well_rates(make([t], [a], kind="absorbance", epsilon_M_cm=18000.0, path_length_cm=1.0),
                     AnalysisSettings())
    assert "baseline_first_reading" in flags_of(out, 0)
    assert out["rate_mM_per_h"].iloc[0] == pytest.approx(1.0e-3 * 1000 / 1000 * 1.0, rel=1e-9)


def test_flag_no_substrate():
    out = well_rates(make([TIMES], [0.5 * TIMES], s0=np.nan), AnalysisSettings())
    assert "no_substrate" in flags_of(out, 0) and out["method"].iloc[0] == "initial_slope"
    assert np.isnan(out["last_conversion_pct"].iloc[0])


def test_settings_window_and_min_points_are_honoured():
    y = 100 * (1 - np.exp(-0.05 * TIMES))
    narrow = well_rates(make([TIMES], [y]), AnalysisSettings(conversion_window_pct=5.0))
    wide = well_rates(make([TIMES], [y]), AnalysisSettings())
    assert narrow["window_points"].iloc[0] < wide["window_points"].iloc[0]
    # the narrower window is less biased by depletion (true initial rate 5 mM/h)
    assert abs(narrow["rate_mM_per_h"].iloc[0] - 5.0) < abs(wide["rate_mM_per_h"].iloc[0] - 5.0)


def test_speed_32500_wells(capsys):
    rng = np.random.default_rng(0)
    G = 32_500
    k = 10 ** rng.uniform(-1.5, 0.5, G)
    names = np.array([f"W{i}" for i in range(G)])
    plates = np.repeat([f"P{i}" for i in range(G // 96 + 1)], 96)[:G]
    wells = pd.DataFrame({"plate": plates, "well": names, "row": 0, "col": 0, "role": "sample",
                          "catalyst": "C1", "loading": 1.0, "loading_unit": "umol", "substrate_conc_mM": 100.0,
                          "volume_uL": 200.0, "temperature_c": 60.0})
    tt = np.tile(TIMES, G)
    vals = 100 * (1 - np.exp(-np.repeat(k, 8) * tt)) + rng.normal(0, 0.5, tt.size)
    readings = pd.DataFrame({"plate": np.repeat(plates, 8), "well": np.repeat(names, 8), "analyte": "product",
                             "time_h": tt, "value": vals})
    d = CampaignData(manifest=Manifest(name="t", readout_kind="product_conc"), catalysts=pd.DataFrame(),
                     plates=pd.DataFrame(), wells=wells, readings=readings)
    t0 = time.perf_counter()
    from screenlab.kinetics.amounts import product_amounts
    am = product_amounts(d)
    t1 = time.perf_counter()
    out = well_rates(d, AnalysisSettings(), amounts=am)
    t2 = time.perf_counter()
    with capsys.disabled():
        print(f"\n[speed] {G} wells x 8 readings: amounts {t1 - t0:.3f} s, well_rates {t2 - t1:.3f} s "
              f"({(out['method'] == 'first_order').mean():.0%} first-order fits)")
    assert len(out) == G and out["rate_mM_per_h"].notna().mean() > 0.98
    assert rates.FLAGS
