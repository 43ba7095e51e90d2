"""uncertainty.t_ppf / norm_ppf / quantiles: the numbers of scipy.stats.t.ppf and norm.ppf without
loading scipy.stats (reference: scipy.stats itself, bit for bit, where the core calls them)."""
from __future__ import annotations

import numpy as np
from scipy import stats

from screenlab.uncertainty import norm_ppf, quantiles, t_ppf


def test_t_and_normal_quantiles_equal_scipy_stats():
    q = np.array([0.5, 0.8, 0.9, 0.95, 0.975, 0.995, 0.99865, 1 - 1e-9])
    df = np.array([1.0, 1.5, 2.0, 3.0, 7.0, 30.0, 1e3, 1e7])
    qq, dd = np.meshgrid(q, df)
    np.testing.assert_array_equal(t_ppf(qq, dd), stats.t.ppf(qq, dd))
    np.testing.assert_array_equal(quantiles.t.ppf(qq, dd), stats.t.ppf(qq, dd))
    np.testing.assert_array_equal(norm_ppf(q), stats.norm.ppf(q))
    np.testing.assert_array_equal(quantiles.norm.ppf(q), stats.norm.ppf(q))
    # scalar in, scalar out, as the callers use it (the Shewhart limit: 3-sigma tail, df 5)
    assert float(t_ppf(1 - 0.0027 / 2, 5)) == float(stats.t.ppf(1 - 0.0027 / 2, 5))
