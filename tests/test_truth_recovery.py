"""Truth-recovery study of the rate step and everything on it (screenlab.recovery): seeded
campaigns of mixed rate laws (invented data, screenlab.synthetic.kinetics_campaign), analysed as a
user would, every estimate set against the value that generated it. scripts/truth_recovery.py
prints the same table for any number of seeds.

The thresholds are the project's acceptance figures for initial rates: TOF within 4 % (median)
and 12 % (90th percentile) with 95 % intervals covering 85-99 % of the time, TON within 5 % past
50 % conversion, Ea within 1.5 kJ/mol with intervals covering at least 85 %, bounds for catalysts
too fast to measure and for inactive ones, and a course flag on induction and consecutive courses.
The coverage of n intervals has a binomial standard error sqrt(0.95 x 0.05 / n) (about 0.6 points
at n = 1,300: docs/check-values.md, "Coverage").
"""
from __future__ import annotations

import pytest

from screenlab.recovery import by_behaviour, run_study, summary
from screenlab.synthetic import KineticsSpec

pytestmark = pytest.mark.slow


def _figures(study):
    return summary(study).set_index("figure")["value"]


@pytest.fixture(scope="module")
def mixed():
    return run_study(range(16))


def test_tof_errors_and_interval_coverage_on_measurable_rows(mixed):
    f = _figures(mixed)
    assert f["TOF |rel. error|, median (measurable rows)"] <= 0.04
    assert f["TOF |rel. error|, 90th percentile"] <= 0.12
    assert 0.85 <= f["TOF 95 % interval coverage"] <= 0.99
    assert f["measurable rows given a point estimate"] >= 0.98
    # no measurable behaviour is left far behind by the others
    per = by_behaviour(mixed)
    for law in ("first_order", "near_zero_order", "saturation", "deactivation", "consecutive"):
        assert per.loc[law, "tof_median_abs_err"] <= 0.06, law
        assert per.loc[law, "tof_coverage"] >= 0.8, law


def test_ton_past_half_conversion_and_its_interval(mixed):
    f = _figures(mixed)
    assert f["TON |rel. error|, median (rows past 50 % conversion)"] <= 0.05
    # the interval the ranking draws TON from: replicate n - 1 df and the plate scatter (before,
    # the TOF's Welch df and no plate term: 78 % on these campaigns)
    assert 0.9 <= f["TON 95 % interval coverage"] <= 0.995


def test_rate_enhancement_interval_and_its_lower_bounds(mixed):
    # the true enhancement (catalysed + background initial rate over the background) inside the
    # two-sided intervals; over a blank below its detection limit the estimate is a lower bound,
    # and it must not exceed the truth (the blank's df from its fits: 99.8 % coverage with n - 1)
    f = _figures(mixed)
    assert 0.9 <= f["rate enhancement 95 % interval coverage"] <= 0.99
    assert f["rate enhancement lower bounds that hold"] >= 0.98


def test_activation_energies_and_their_intervals(mixed):
    f = _figures(mixed)
    assert f["Ea |error| kJ/mol, median"] <= 1.5
    assert 0.9 <= f["Ea 95 % interval coverage"] <= 0.995
    # TOF at the reference temperature read off the line: with the replicate variances (three wells,
    # about 2 df each) taken as exact this held 87-90 % (160 series); on their effective df, ~94 %
    assert 0.9 <= f["TOF at the reference T from the Arrhenius line, 95 % interval coverage"] <= 0.99


def test_arrhenius_intervals_hold_when_dispensing_scatter_dominates():
    # 8 % dispensing scatter per well and no plate effect (the demo's situation): each point's SE
    # rests on three wells, the weights are noisy, and the intervals must still hold
    study = run_study(range(16), KineticsSpec(replicate_cv=0.08, plate_sd=0.0))
    f = _figures(study)
    assert 0.9 <= f["Ea 95 % interval coverage"] <= 0.995
    assert 0.9 <= f["TOF at the reference T from the Arrhenius line, 95 % interval coverage"] <= 0.99


def test_bounds_and_course_flags(mixed):
    f = _figures(mixed)
    assert f["too fast: rows censored lower"] >= 0.98            # at every temperature
    assert f["inactive: rows censored upper"] >= 0.95
    assert f["induction / consecutive: rows with a course flag"] >= 0.75
    r = mixed.rates
    fast = r[r["behaviour"] == "too_fast"]
    assert fast["tof_ci_high"].isna().all()                      # a bound has no upper end


def test_first_order_campaigns_do_no_worse_than_a_plain_per_well_first_order_fit():
    study = run_study(range(8), KineticsSpec(behaviours=("first_order",)), plain=True)
    c = study.campaigns
    assert c["ours_ea_median_abs_err"].median() <= c["plain_ea_median_abs_err"].median() * 1.05
    assert _figures(study)["Ea |error| kJ/mol, median"] <= 1.5


def test_noisier_sparser_campaigns_keep_their_intervals_honest():
    # 1 % noise, six readings and no reading at t = 0: larger errors, but intervals that still hold
    study = run_study(range(8), KineticsSpec(noise_pct=1.0, times_min=(10.0, 20.0, 40.0, 80.0, 160.0, 320.0)))
    f = _figures(study)
    assert f["TOF |rel. error|, median (measurable rows)"] <= 0.06
    assert 0.85 <= f["TOF 95 % interval coverage"] <= 0.99
    assert f["Ea 95 % interval coverage"] >= 0.85
    assert f["TON 95 % interval coverage"] >= 0.9
