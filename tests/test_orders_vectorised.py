"""The batched apparent_orders against the plain per-series loop it replaced.

The reference below is the earlier implementation (pandas groupby, one numpy.linalg.lstsq fit per
series), kept here as the test's reference; scipy.stats.linregress checks the slope itself in
tests/test_orders.py.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from screenlab.kinetics.orders import COLUMNS, apparent_orders
from screenlab.kinetics.sites import join_flags
from screenlab.kinetics.turnover import _tkey, t_quantile
from screenlab.settings import AnalysisSettings


def _ols(x, y):
    n = len(x)
    X = np.column_stack([np.ones(n), x])
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    df = n - 2
    if df <= 0:
        return float(beta[1]), np.nan, df
    res = y - X @ beta
    cov = np.linalg.inv(X.T @ X) * (float(res @ res) / df)
    return float(beta[1]), float(np.sqrt(cov[1, 1])), df


def reference_orders(t, settings, factors):
    t = t[t["role"].isin(["sample", "reference"])].copy()
    t = t[np.isfinite(pd.to_numeric(t["rate_mM_per_h"], errors="coerce").to_numpy(float))]
    t["temperature_c"] = _tkey(t["temperature_c"])
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
            flags = {"nonpositive_rates": bool((np.isfinite(net) & (net <= 0)).any())}
            n_levels = len(np.unique(lv[ok]))
            if n_levels < 2:
                continue
            order, se, df = _ols(np.log(lv[ok]), np.log(net[ok]))
            q = float(t_quantile(settings.confidence, df)) if df > 0 else np.nan
            flags["no_replicates"] = df <= 0
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
                    s, sse, sdf = _ols(np.log(lv[okt]), np.log(tof[okt]))
                    sq = float(t_quantile(settings.confidence, sdf)) if sdf > 0 else np.nan
                    r.update(tof_slope=s, tof_slope_se=sse, tof_slope_ci_low=s - sq * sse,
                             tof_slope_ci_high=s + sq * sse)
                    flags["tof_falls_with_loading"] = bool(np.isfinite(sse) and s + sq * sse < 0)
            r["flags"] = ";".join(c for c, on in flags.items() if on)
            rows.append(r)
    out = pd.DataFrame(rows, columns=COLUMNS)
    if len(out):
        out["flags"] = join_flags(out["flags"], {}, index=out.index).to_numpy(dtype=object)
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
def test_batched_orders_equal_the_per_series_loop(seed):
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
