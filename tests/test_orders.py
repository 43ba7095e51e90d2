"""Apparent orders and the loading check (screenlab.kinetics.orders)."""
import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.kinetics.orders import apparent_orders
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
