"""Renewal-valid intervals: simulated coverage for Poisson, regular and bursty waits, the calibrated
gamma-shape interval, and the figures withheld below their minimum number of intervals.

Coverage is counted over seeded simulated tables; a short version runs in CI, the full one with
REVIEWER_HEAVY=1. A 95 % interval over n tables covers binomially: sd = sqrt(0.95 x 0.05 / n).
"""

from __future__ import annotations

import os

import numpy as np
import pytest
from scipy import stats

from reviewer.kinetics import summarise
from reviewer.kinetics.renewal import MIN_CV_INTERVALS, cv_coverage
from reviewer.kinetics.stats import calibrated_cut, gamma_shape_ci95, renewal_rate_ci95

HEAVY = os.environ.get("REVIEWER_HEAVY") == "1"


def test_renewal_interval_with_shape_1_is_the_chi_square_one():
    # gamma(k * 1) quantiles / span = chi2(2k) quantiles / (2 span) (scipy.stats identity)
    lo, hi = renewal_rate_ci95(12, 30.0, 1.0)
    assert lo == pytest.approx(stats.chi2.ppf(0.025, 24) / 60, rel=1e-10)
    assert hi == pytest.approx(stats.chi2.ppf(0.975, 24) / 60, rel=1e-10)


def _coverage(shape: float, events: int, tables: int) -> tuple[float, float]:
    """Coverage of the true rate 1 by the gamma-renewal and the chi-square intervals."""
    rng = np.random.default_rng([int(shape * 10), events])
    renewal = poisson = 0
    for _ in range(tables):
        t = np.concatenate([[0.0], np.cumsum(rng.gamma(shape, 1 / shape, events - 1))])
        s = summarise(t, n_boot=99, n_gof=99)
        lo, hi = s["rate_renewal_ci95_per_s"]
        renewal += lo <= 1.0 <= hi
        lo, hi = s["rate_ci95_per_s"]
        poisson += lo <= 1.0 <= hi
    return renewal / tables, poisson / tables


@pytest.mark.heavy
@pytest.mark.skipif(not HEAVY, reason="REVIEWER_HEAVY=1 runs the full coverage check")
@pytest.mark.parametrize("shape", [1.0, 4.0, 0.3])
def test_renewal_rate_interval_coverage_at_30_events(shape):
    renewal, poisson = _coverage(shape, 30, 1000)
    assert 0.92 <= renewal <= 0.98, renewal
    if shape != 1.0:  # the chi-square interval is off for non-Poisson waits (what this fixes)
        assert abs(poisson - 0.95) > abs(renewal - 0.95)


@pytest.mark.parametrize("shape", [4.0, 0.3])
def test_renewal_rate_interval_coverage_short(shape):
    renewal, poisson = _coverage(shape, 30, 150)
    # 150 tables: sd of a 0.95 coverage is 0.018; allow 3 sd
    assert 0.89 <= renewal <= 1.0, renewal
    assert abs(poisson - 0.95) > 0.03  # 1.00 for gamma(4), about 0.7 for gamma(0.3)


def test_calibrated_cut_reproduces_chi_square_coverage_for_many_waits():
    # Wilks: for many waits the likelihood-ratio statistic is chi-square(1) distributed
    cut, cover = calibrated_cut(2.0, 400, seed=0, sims=999)
    assert cut == pytest.approx(stats.chi2.ppf(0.95, 1), rel=0.15) and abs(cover - 0.95) < 0.03


def test_calibrated_shape_interval_covers_at_10_intervals():
    rng = np.random.default_rng(17)
    tables, hit_cal, hit_chi = 120, 0, 0
    for _ in range(tables):
        x = rng.gamma(4.0, 1.0, 10)
        shape = stats.gamma.fit(x, floc=0)[0]  # scipy reference fit
        cut, _ = calibrated_cut(shape, 10, seed=1, sims=499)
        lo, hi = gamma_shape_ci95(x, shape, cut)
        hit_cal += lo <= 4.0 <= hi
        lo, hi = gamma_shape_ci95(x, shape)
        hit_chi += lo <= 4.0 <= hi
    assert hit_cal / tables >= 0.89 and hit_cal >= hit_chi


def test_small_tables_withhold_cv_and_shape_intervals():
    t = np.cumsum(np.random.default_rng(2).exponential(1.0, 5))  # 4 intervals
    s = summarise(t, n_boot=99, n_gof=99)
    assert s["interval_cv_ci95"] is None and "not meaningful" in s["interval_cv_ci_method"]
    assert s["gamma_shape_ci95"] is None and "not meaningful" in s["gamma_shape_calibration"]
    t = np.cumsum(np.random.default_rng(2).exponential(1.0, MIN_CV_INTERVALS + 1))
    s = summarise(t, n_boot=99, n_gof=99)
    assert s["interval_cv_ci95"] is not None
    assert s["interval_cv_ci_coverage"] == cv_coverage(MIN_CV_INTERVALS)


def test_velocity_renewal_interval_is_rate_interval_times_height():
    t = np.cumsum(np.random.default_rng(3).gamma(4.0, 0.25, 40))
    s = summarise(t, layer_nm=0.3, n_boot=99, n_gof=99)
    assert s["velocity_renewal_ci95_nm_per_s"] == pytest.approx(
        [0.3 * v for v in s["rate_renewal_ci95_per_s"]])
    assert s["rate_unbiased_per_s"] == pytest.approx((s["intervals"] - 1) / s["span_s"])
    assert s["velocity_nm_per_s"] == pytest.approx(0.3 * s["rate_per_s"])  # velocity uses k/span
