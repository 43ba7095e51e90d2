"""Z'-factor and median polish / B-score against outside reference values."""
from __future__ import annotations

import warnings

import numpy as np
import pytest

from screenlab.errors import DataQualityWarning
from screenlab.stats.quality import bscores, median_polish, z_factor, zprime

POS = [100, 102, 98, 101, 99]
NEG = [10, 12, 8, 11, 9]


def test_zprime_worked_example_ddof1():
    # docs/check-values.md section 4 (computed from the Zhang, Chung & Oldenburg 1999 /
    # IUPAC Gold Book 'Z' factor' definition): sample SD -> 0.894590744661054
    assert zprime(POS, NEG) == pytest.approx(0.894590744661054, rel=1e-12)


def test_zprime_worked_example_ddof0():
    # same source: population SD -> 0.905719095841794
    assert zprime(POS, NEG, ddof=0) == pytest.approx(0.905719095841794, rel=1e-12)


def test_z_factor_worked_example():
    # same source: Z of samples [60, 65, 55, 62, 58] against the negative control -> 0.676658477019031
    assert z_factor([60, 65, 55, 62, 58], NEG) == pytest.approx(0.676658477019031, rel=1e-12)


def test_zprime_edge_cases():
    # check-values.md section 4 edge cases: sd = 0 both sides -> 1; equal means must not crash
    assert zprime([5, 5, 5], [1, 1, 1]) == 1.0
    assert zprime([5, 6, 7], [5, 6, 7]) == -np.inf
    assert zprime([5, 5], [5, 5]) == -np.inf
    assert np.isnan(zprime([5], [1, 2, 3]))
    assert zprime([5, 6, np.nan, 7], [1, 1, 1]) == pytest.approx(1 - 3 * 1.0 / 5.0)


PARACHUTE = [[14, 15, 14], [7, 4, 7], [8, 2, 10], [15, 9, 10], [0, 2, 0]]


def test_medpolish_r_documented_example():
    # R stats::medpolish example (Tukey, EDA; sport-parachuting deaths); expected values from
    # check-values.md section 5a (line-by-line port of R's medpolish; 2 iterations, sum|res| = 19)
    t, r, c, res, it, conv = median_polish(PARACHUTE)
    assert t == 8
    np.testing.assert_array_equal(r, [6, -1, 0, 2, -8])
    np.testing.assert_array_equal(c, [0, -1, 0])
    np.testing.assert_array_equal(res, [[0, 2, 0], [0, -2, 0], [0, -5, 2], [5, 0, 0], [0, 3, 0]])
    assert conv and it == 2 and np.abs(res).sum() == 19
    np.testing.assert_array_equal(t + r[:, None] + c[None, :] + res, PARACHUTE)


def test_medpolish_zero_mad_gives_nan_and_warning():
    # section 5a: the residual MAD there is 0, so B-scores are undefined -> NaN with a warning
    *_, res, _, _ = median_polish(PARACHUTE)
    with pytest.warns(DataQualityWarning):
        b = bscores(res)
    assert np.isnan(b).all()


PLANTED = [[101, 101, 104, 101, 99, 103],
           [105, 108, 108, 104, 107, 106],
           [96, 99, 103, 125, 98, 101],
           [104, 102, 107, 101, 102, 105]]


def test_medpolish_planted_hit_and_bscore_scaling():
    # check-values.md section 5b (R-medpolish port; exact binary fractions)
    t, r, c, res, it, conv = median_polish(PLANTED)
    assert it == 3 and conv
    assert np.abs(res).sum() == 44.0
    assert t == 102.015625
    np.testing.assert_array_equal(r, [-1.015625, 2.703125, -2.984375, 1.015625])
    np.testing.assert_array_equal(c, [0.140625, -0.015625, 3.625, -0.359375, -1.03125, 1.96875])
    assert res[2, 3] == 26.328125
    raw = bscores(res, mad_scale=1.0)
    scaled = bscores(res)  # default 1.4826 x MAD
    assert raw[2, 3] == pytest.approx(74.8889, abs=1e-4)
    assert scaled[2, 3] == pytest.approx(50.5119, abs=1e-4)
    # next-largest |B| with the raw MAD: B2 = 9.3778, B5 = 9.4222, C1 = -9.0222
    assert raw[1, 1] == pytest.approx(9.3778, abs=1e-4)
    assert raw[1, 4] == pytest.approx(9.4222, abs=1e-4)
    assert raw[2, 0] == pytest.approx(-9.0222, abs=1e-4)
    order = np.argsort(-np.abs(raw), axis=None)
    assert np.unravel_index(order[0], raw.shape) == (2, 3)


def test_medpolish_stack_equals_single_plates_with_padding_and_missing():
    # a stack of plates (different sizes, NaN padded, a missing cell) converges plate by plate
    # exactly as the single-plate polish; R's na.rm = TRUE semantics for the missing cell
    a = np.array(PLANTED, dtype=float)
    a[0, 0] = np.nan
    b = np.array(PARACHUTE, dtype=float)
    stack = np.full((2, 5, 6), np.nan)
    stack[0, :4, :6] = a
    stack[1, :5, :3] = b
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # no RuntimeWarning leaks out of the all-NaN padding
        t, r, c, res, it, conv = median_polish(stack)
    for k, m in enumerate((a, b)):
        t1, r1, c1, res1, it1, conv1 = median_polish(m)
        assert t[k] == t1 and it[k] == it1
        np.testing.assert_array_equal(res[k, : m.shape[0], : m.shape[1]], res1)
        np.testing.assert_array_equal(r[k, : m.shape[0]], r1)
    assert np.isnan(res[1, :, 3:]).all()
