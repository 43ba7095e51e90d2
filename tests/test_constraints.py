"""Requirements on the rates table (screenlab.stats.constraints): the expression form, the
interval a column is judged on (its CI columns, else its SE with a Student t quantile: scipy.stats.t
/ scipy.stats.norm as the reference) and the judgement on that interval (the rule of the module
docstring, stated in the checks)."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from screenlab.errors import UsageError
from screenlab.stats.constraints import Requirement, interval, judge, parse_requirement, requirement_columns


def test_requirement_expressions_and_their_errors(fake_kin):
    rates = fake_kin([1.0], [0.1]).rates.assign(selectivity_pct=90.0, selectivity_se=1.0, ee_pct=80.0)
    cols = requirement_columns(rates)
    assert {"tof_per_h", "ton", "selectivity_pct", "ee_pct"} <= set(cols)
    assert not {"tof_se_per_h", "tof_df", "enhancement_ci_low", "temperature_c", "n_wells"} & set(cols)
    assert parse_requirement(" selectivity_pct >= 90 ", cols) == Requirement("selectivity_pct", ">=", 90.0)
    assert parse_requirement("ton<=5e1", cols).value == 50.0
    for bad in ("selectivity_pct>90", "selectivity_pct=>90", "selectivity_pct>=ninety", "90<=selectivity_pct", ""):
        with pytest.raises(UsageError, match="COLUMN>=VALUE"):
            parse_requirement(bad, cols)
    with pytest.raises(UsageError, match="not a numeric column"):
        parse_requirement("selectivty_pct>=90", cols)


def test_requirement_judged_on_the_interval():
    req = Requirement("selectivity_pct", ">=", 90.0)
    status, text = judge(req, [95, 91, 85, np.nan], [92, 88, 80, np.nan], [98, 94, 89, np.nan])
    assert status.tolist() == ["met", "uncertain", "outside", "missing"]
    assert text[2] == "selectivity_pct 85 (80-89) is below 90 (--require selectivity_pct>=90)"
    assert "not measured" in text[3]
    up = judge(Requirement("ton", "<=", 50.0), [40, 49, 60], [35, 45, 51], [45, 55, 70])[0]
    assert up.tolist() == ["met", "uncertain", "outside"]


def test_interval_from_the_se_uses_the_t_quantile():
    # est -/+ t(0.975, df) se (scipy.stats.t.ppf); a missing or non-positive df: the normal quantile
    rates = pd.DataFrame({"ton": [100.0, 100.0, 100.0, 100.0], "ton_se": [5.0, 5.0, 5.0, 5.0],
                          "ton_df": [4.0, np.nan, 0.0, np.inf]})
    est, lo, hi = interval(rates, "ton", confidence=0.95)
    q = np.array([stats.t.ppf(0.975, 4), stats.norm.ppf(0.975), stats.norm.ppf(0.975), stats.norm.ppf(0.975)])
    np.testing.assert_allclose(lo, 100 - q * 5, rtol=1e-12)
    np.testing.assert_allclose(hi, 100 + q * 5, rtol=1e-12)
    # interval columns, when there are any, win over the SE
    est, lo, hi = interval(rates.assign(ton_ci_low=90.0, ton_ci_high=111.0), "ton")
    assert lo.tolist() == [90.0] * 4 and hi.tolist() == [111.0] * 4


def test_censored_rates_are_open_on_one_side():
    rates = pd.DataFrame({"tof_per_h": [1500.0, 0.4, 20.0], "tof_ci_low": [1500.0, np.nan, 18.0],
                          "tof_ci_high": [np.nan, 0.4, 22.0], "censored": ["lower", "upper", ""]})
    est, lo, hi = interval(rates, "tof_per_h")
    assert lo.tolist() == [1500.0, -np.inf, 18.0] and hi.tolist() == [np.inf, 0.4, 22.0]
