"""Apparent orders and the loading check (screenlab.kinetics.orders).

References: scipy.stats.linregress (slope and its standard error of ln rate on ln level) and the
t quantile of scipy.stats; on random turnover frames every series is found by a pandas group-by
and fitted by linregress, with the rules of the module docstring written out in a few lines.
"""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.kinetics.orders import COLUMNS, POINT_COLUMNS, apparent_orders, order_points
from screenlab.settings import AnalysisSettings


def _turnover(conc, loading, net, tof=None, cat="C1", t=60.0, solvent="MeCN"):
    n = len(conc)
    return pd.DataFrame({"plate": "P1", "well": [f"A{i + 1}" for i in range(n)], "role": "sample",
                         "catalyst": cat, "temperature_c": t, "loading": loading, "loading_unit": "umol",
                         "substrate_conc_mM": conc, "volume_uL": 1000.0, "solvent": solvent,
                         "rate_mM_per_h": np.asarray(net) + 1.0, "net_rate_mM_per_h": net,
                         "tof_per_h": np.asarray(net) / np.asarray(loading) if tof is None else tof, "flags": ""})


def test_substrate_order_matches_scipy_linregress():
    rng = np.random.default_rng(3)
    conc = np.repeat([25.0, 50.0, 100.0, 200.0], 3)
    net = 0.4 * conc ** 0.7 * np.exp(rng.normal(0, 0.05, conc.size))
    o = apparent_orders(_turnover(conc, np.full(conc.size, 0.5), net), AnalysisSettings(), factor_names=("solvent",))
    row = o[o.variable == "substrate_conc"].iloc[0]
    lr = stats.linregress(np.log(conc), np.log(net))          # scipy reference
    assert row.order == pytest.approx(lr.slope, rel=1e-10)
    assert row.order_se == pytest.approx(lr.stderr, rel=1e-8)
    q = stats.t.ppf(0.975, conc.size - 2)
    assert row.order_ci_low == pytest.approx(lr.slope - q * lr.stderr)
    assert row.n_levels == 4 and row.n_wells == 12 and row["flags"] == ""
    assert row.order_ci_low < 0.7 < row.order_ci_high
    assert (o.variable == "loading").sum() == 0          # loading was not varied


def test_loading_series_madon_boudart_flag():
    load = np.repeat([0.1, 0.2, 0.4, 0.8], 2)
    jitter = np.tile([1.01, 0.99], 4)
    linear = _turnover(np.full(8, 100.0), load, 50 * load * jitter)            # TOF constant: order 1
    damped = _turnover(np.full(8, 100.0), load, 50 * load ** 0.5 * jitter, cat="C2")   # TOF falls
    o = apparent_orders(pd.concat([linear, damped], ignore_index=True), AnalysisSettings(),
                        factor_names=("solvent",)).set_index("catalyst")
    assert o.loc["C1", "order"] == pytest.approx(1.0, abs=0.02)
    assert "tof_falls_with_loading" not in o.loc["C1", "flags"]
    assert o.loc["C2", "order"] == pytest.approx(0.5, abs=0.02)
    assert o.loc["C2", "tof_slope"] == pytest.approx(-0.5, abs=0.02)
    assert "tof_falls_with_loading" in o.loc["C2", "flags"]


def test_two_levels_no_ci_and_nonpositive_rates_left_out():
    t = _turnover(np.array([50.0, 100.0, 200.0]), np.full(3, 0.5), np.array([1.0, 2.0, -0.5]))
    o = apparent_orders(t, AnalysisSettings(), factor_names=("solvent",)).iloc[0]
    assert o.order == pytest.approx(1.0) and np.isnan(o.order_ci_low)
    assert set(o["flags"].split(";")) == {"nonpositive_rates", "no_replicates"}
    # different solvents are different series, so no order from one level each
    t2 = pd.concat([_turnover([50.0], [0.5], [1.0]), _turnover([100.0], [0.5], [2.0], solvent="THF")])
    assert apparent_orders(t2, AnalysisSettings(), factor_names=("solvent",)).empty


# ------------------------------------------------------------------------------- many series at once

def _slope(x, y):
    """Slope, its SE and df of y on x by scipy.stats.linregress (the outside reference); no SE
    from two points (df 0)."""
    lr = stats.linregress(x, y)
    df = len(x) - 2
    return float(lr.slope), (float(lr.stderr) if df > 0 else np.nan), df


def _t(confidence, df):
    return float(stats.t.ppf(0.5 + confidence / 2.0, df)) if df > 0 else np.nan      # scipy.stats


def reference_orders(t, settings, factors):
    """The series by a pandas group-by, each fitted by linregress. The rules (orders module
    docstring): catalysed wells with a rate; temperatures matched to 1e-6 degC; a series is a
    catalyst x temperature x the other conditions; levels and rates must be positive; an order
    needs two levels; flags nonpositive_rates (a rate <= 0 left out), no_replicates (df 0) and,
    for a loading series, tof_falls_with_loading (the upper limit of the slope of ln TOF < 0)."""
    t = t[t["role"].isin(["sample", "reference"])].copy()
    t = t[np.isfinite(pd.to_numeric(t["rate_mM_per_h"], errors="coerce").to_numpy(float))]
    t["temperature_c"] = np.round(t["temperature_c"].to_numpy(float), 6)
    rows = []
    series = {"substrate_conc": ("substrate_conc_mM", ["loading", "loading_unit", *factors]),
              "loading": ("loading", ["loading_unit", "substrate_conc_mM", *factors])}
    for variable, (col, fixed) in series.items():
        for key, g in t.groupby(["catalyst", "temperature_c", *fixed], dropna=False, sort=True):
            lv = g[col].to_numpy(float)
            if len(np.unique(lv[np.isfinite(lv) & (lv > 0)])) < 2:
                continue
            net = g["net_rate_mM_per_h"].to_numpy(float)
            ok = np.isfinite(lv) & (lv > 0) & np.isfinite(net) & (net > 0)
            n_levels = len(np.unique(lv[ok]))
            if n_levels < 2:
                continue
            order, se, df = _slope(np.log(lv[ok]), np.log(net[ok]))
            q = _t(settings.confidence, df)
            flags = {"nonpositive_rates": bool((np.isfinite(net) & (net <= 0)).any()), "no_replicates": df <= 0}
            r = dict(catalyst=key[0], temperature_c=float(key[1]), variable=variable, n_levels=n_levels,
                     order=order, order_se=se, order_ci_low=order - q * se, order_ci_high=order + q * se,
                     n_wells=int(ok.sum()), level_min=float(lv[ok].min()), level_max=float(lv[ok].max()),
                     fixed="; ".join(f"{k}={v}" for k, v in zip(fixed, key[2:]) if not pd.isna(v)),
                     order_df=float(df), tof_slope=np.nan, tof_slope_se=np.nan, tof_slope_ci_low=np.nan,
                     tof_slope_ci_high=np.nan)
            if variable == "loading":
                tof = g["tof_per_h"].to_numpy(float)
                okt = ok & np.isfinite(tof) & (tof > 0)
                if len(np.unique(lv[okt])) >= 2:
                    s, sse, sdf = _slope(np.log(lv[okt]), np.log(tof[okt]))
                    sq = _t(settings.confidence, sdf)
                    r.update(tof_slope=s, tof_slope_se=sse, tof_slope_ci_low=s - sq * sse,
                             tof_slope_ci_high=s + sq * sse)
                    flags["tof_falls_with_loading"] = bool(np.isfinite(sse) and s + sq * sse < 0)
            # flag codes in this order, joined with ";"
            r["flags"] = ";".join(c for c in ("nonpositive_rates", "no_replicates", "tof_falls_with_loading")
                                  if flags.get(c))
            rows.append(r)
    out = pd.DataFrame(rows, columns=COLUMNS)
    if len(out):
        out["n_levels"] = out["n_levels"].astype(np.int64)
    return out


def _random_turnover(seed: int, n: int = 3000) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    cat = rng.choice([f"C{i}" for i in range(25)], n)
    conc = rng.choice([25.0, 50.0, 100.0, 200.0, np.nan, -1.0], n, p=[.27, .27, .2, .2, .03, .03])
    load = rng.choice([0.1, 0.2, 0.4, 0.8], n)
    true = 3.0 * load ** rng.uniform(0.3, 1.1) * np.nan_to_num(np.abs(conc), nan=1.0) ** 0.8
    net = true * np.exp(rng.normal(0, 0.1, n))
    net[rng.random(n) < 0.05] *= -1
    net[rng.random(n) < 0.02] = np.nan
    rate = net + 0.1
    rate[rng.random(n) < 0.02] = np.nan
    solvent = rng.choice(["MeCN", "THF", None], n, p=[.45, .45, .1])
    return pd.DataFrame({
        "plate": "P1", "well": [f"W{i}" for i in range(n)],
        "role": rng.choice(["sample", "reference", "blank"], n, p=[.8, .12, .08]),
        "catalyst": cat, "temperature_c": rng.choice([40.0, 60.0 + 1e-9, 60.0], n), "loading": load,
        "loading_unit": rng.choice(["umol", "mg"], n, p=[.9, .1]), "substrate_conc_mM": conc,
        "volume_uL": 200.0, "solvent": solvent, "rate_mM_per_h": rate, "net_rate_mM_per_h": net,
        "tof_per_h": np.where(rng.random(n) < 0.03, np.nan, net / load), "flags": ""})


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_batched_orders_equal_linregress_per_series(seed):
    t = _random_turnover(seed)
    s = AnalysisSettings()
    new = apparent_orders(t, s, factor_names=("solvent",))
    ref = reference_orders(t, s, ["solvent"])
    assert len(ref) > 50                                       # the random frame holds many series
    assert list(new.columns) == COLUMNS
    assert len(new) == len(ref)
    for c in COLUMNS:
        a, b = new[c].to_numpy(), ref[c].to_numpy()
        if c in ("catalyst", "variable", "fixed", "flags"):
            assert list(a) == list(b), c
        else:
            np.testing.assert_allclose(a.astype(float), b.astype(float), rtol=1e-9, atol=1e-12, err_msg=c)


def test_no_series_gives_the_empty_frame_with_columns():
    t = _random_turnover(5, n=40)
    t["substrate_conc_mM"] = 100.0
    t["loading"] = 0.5
    out = apparent_orders(t, AnalysisSettings(), factor_names=("solvent",))
    assert out.empty and list(out.columns) == COLUMNS


# ------------------------------------------------------------------------------- the points behind a series

@pytest.mark.parametrize("seed", [0, 3])
def test_the_points_of_each_series_give_its_order_by_linregress(seed):
    # every series' in-fit wells, fitted alone by scipy.stats.linregress on ln rate vs ln level
    # (the outside reference), give the table's order and SE; out-of-fit points are the wells with
    # a net rate or level <= 0 (a log cannot take them)
    t = _random_turnover(seed)
    s = AnalysisSettings()
    o = apparent_orders(t, s, factor_names=("solvent",))
    p = order_points(t, s, factor_names=("solvent",))
    assert list(p.columns) == POINT_COLUMNS
    assert set(p["series"]) == set(range(len(o)))
    for i, pts in p.groupby("series"):
        row = o.iloc[i]
        assert (pts["catalyst"] == row["catalyst"]).all() and (pts["variable"] == row["variable"]).all()
        fit = pts[pts["in_fit"]]
        assert len(fit) == row["n_wells"] and fit["level"].nunique() == row["n_levels"]
        assert fit["level"].min() == row["level_min"] and fit["level"].max() == row["level_max"]
        assert ((fit["net_rate_mM_per_h"] > 0) & (fit["level"] > 0)).all()
        assert not ((pts.loc[~pts["in_fit"], "net_rate_mM_per_h"] > 0) & (pts.loc[~pts["in_fit"], "level"] > 0)).any()
        lr = stats.linregress(np.log(fit["level"]), np.log(fit["net_rate_mM_per_h"]))
        assert row["order"] == pytest.approx(lr.slope, rel=1e-9)
        if len(fit) > 2:
            assert row["order_se"] == pytest.approx(lr.stderr, rel=1e-7)
        # the level's unit: mM for a substrate series, the wells' own loading unit for a loading one
        unit_of = t.set_index("well")["loading_unit"]
        want = "mM" if row["variable"] == "substrate_conc" else unit_of.loc[pts["well"]].to_numpy()
        assert (pts["level_unit"].to_numpy() == want).all()
        if row["variable"] == "loading":
            assert pts["level_unit"].nunique() == 1 and f"loading_unit={pts['level_unit'].iloc[0]}" in row["fixed"]


def test_points_carry_the_loading_unit_and_the_left_out_well():
    t = _turnover(np.array([50.0, 100.0, 200.0]), np.full(3, 0.5), np.array([1.0, 2.0, -0.5]))
    p = order_points(t, AnalysisSettings(), factor_names=("solvent",))
    assert p["in_fit"].tolist() == [True, True, False] and p["level_unit"].eq("mM").all()
    load = _turnover(np.full(4, 100.0), np.array([0.1, 0.2, 0.4, 0.8]), np.array([5.0, 10.0, 20.0, 40.0]))
    q = order_points(load, AnalysisSettings(), factor_names=("solvent",))
    assert q["variable"].eq("loading").all() and q["level_unit"].eq("umol").all()
    assert q["level"].tolist() == [0.1, 0.2, 0.4, 0.8]
    empty = order_points(_turnover([50.0], [0.5], [1.0]), AnalysisSettings(), factor_names=("solvent",))
    assert empty.empty and list(empty.columns) == POINT_COLUMNS
