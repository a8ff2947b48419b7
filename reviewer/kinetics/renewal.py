"""Figures that hold for renewal processes in general, not only Poisson ones: a gamma-renewal rate
interval, a gamma-shape interval calibrated by simulation for the actual number of intervals, and the
simulated coverage of the bootstrap CV interval. Each figure says what it assumes."""

from __future__ import annotations

import math

import numpy as np

from reviewer.kinetics import stats

MIN_CV_INTERVALS = 10     # fewer: the bootstrap CV interval is not meaningful (coverage below 0.8)
EQUAL_CV = 1e-3          # waits this alike: no renewal interval (nothing to base a shape on)
MIN_SHAPE_INTERVALS = 5   # fewer: no gamma-shape interval
CALIBRATION_SIMS = 999    # simulated tables behind the calibrated shape interval
CALIBRATION_BUDGET = 5_000_000  # simulated tables x intervals (fewer tables on long tables; stated)
# Coverage of the 95 % BCa bootstrap CV interval (999 resamples) by number of intervals: the lowest
# over exponential, gamma(4) and gamma(0.3) waits, 400 simulated tables each (our simulation; about
# +-0.02). It stays below 0.95: the figure is printed with it.
CV_COVERAGE = ((5, 0.67), (10, 0.84), (15, 0.85), (20, 0.88), (30, 0.88), (50, 0.86), (100, 0.89))


# Coverage of the gamma-renewal 95 % rate interval by number of intervals: the lowest over exponential,
# gamma(4) and gamma(0.3) waits, 1,000 simulated tables each (our simulation, sd about 0.007;
# benchmarks/bench_kinetics_coverage.py prints the whole table). The chi-square interval beside it
# covers 0.95 only for exponential waits: 1.00 for gamma(4), 0.70-0.74 for gamma(0.3).
RATE_COVERAGE = ((5, 0.92), (10, 0.94), (20, 0.93), (30, 0.94), (50, 0.94), (100, 0.95))


def rate_coverage(k: int) -> float:
    """Simulated coverage of the gamma-renewal rate interval at the tabulated k nearest below k."""
    return next((c for kk, c in reversed(RATE_COVERAGE) if k >= kk), RATE_COVERAGE[0][1])


def cv_coverage(k: int) -> float:
    """Simulated coverage of the bootstrap CV interval at the tabulated k nearest below k."""
    return next((c for kk, c in reversed(CV_COVERAGE) if k >= kk), CV_COVERAGE[0][1])


def _num(v):
    return float(v) if v is not None and math.isfinite(v) else None


def add_renewal(out: dict, x: np.ndarray, seed: int, budget: float = 1.0) -> None:
    """Add the renewal-valid figures to a summary (new keys; the Poisson ones stay as they are)."""
    k, span, cv = x.size, out["span_s"], out.get("interval_cv")
    out["rate_ci95_assumes"] = "Poisson arrivals (independent exponential waits)"
    out["rate_renewal_ci95_per_s"] = None
    out["rate_renewal_method"] = None
    out["rate_renewal_ci_coverage"] = None
    out["velocity_renewal_ci95_nm_per_s"] = None
    if k >= 2 and cv is not None and cv > EQUAL_CV:
        shape = out.get("gamma_shape")
        source = "fitted gamma shape" if shape else "shape 1 / CV^2: zero waits prevent the fit"
        shape = shape if shape else 1.0 / cv**2
        a = stats.shape_bias_corrected(shape, k)
        lo, hi = stats.renewal_rate_ci95(k, span, a)
        out["rate_renewal_ci95_per_s"] = [_num(lo), _num(hi)] if _num(lo) and _num(hi) else None
        out["rate_renewal_ci_coverage"] = (rate_coverage(k) if out["rate_renewal_ci95_per_s"]
                                           and k >= RATE_COVERAGE[0][0] else None)
        out["rate_renewal_method"] = (f"gamma renewal: independent gamma waits with shape {a:.3g} "
                                      f"({source}, small-sample bias removed)")
        if out["rate_renewal_ci95_per_s"] and out.get("layer_nm"):
            out["velocity_renewal_ci95_nm_per_s"] = [v * out["layer_nm"]
                                                     for v in out["rate_renewal_ci95_per_s"]]
    if out.get("interval_cv_ci95") is not None and k < MIN_CV_INTERVALS:
        out["interval_cv_ci95"] = None
        out["interval_cv_ci_method"] = (f"not meaningful below {MIN_CV_INTERVALS} intervals "
                                        f"(simulated coverage of the bootstrap interval "
                                        f"{cv_coverage(k):.2f} or less)")
    out["interval_cv_ci_coverage"] = (cv_coverage(k) if out.get("interval_cv_ci95") is not None
                                      and k <= stats.BIG_N else None)
    _shape_interval(out, x, seed, budget)


def _shape_interval(out: dict, x: np.ndarray, seed: int, budget: float) -> None:
    k, shape = x.size, out.get("gamma_shape")
    out["gamma_shape_ci95_calibrated"] = None
    out["gamma_shape_ci_coverage"] = None
    out["gamma_shape_calibration"] = None
    if shape is None:
        return
    if k < MIN_SHAPE_INTERVALS:
        out["gamma_shape_ci95"] = None
        out["gamma_shape_calibration"] = f"not meaningful below {MIN_SHAPE_INTERVALS} intervals"
        return
    if k > stats.BIG_N:  # Wilks: the chi-square cut holds at this size; nothing to calibrate
        out["gamma_shape_calibration"] = (f"not simulated above {stats.BIG_N} intervals: the "
                                          "chi-square interval holds (Wilks)")
        return
    sims = int(min(CALIBRATION_SIMS, max(199, CALIBRATION_BUDGET * budget // k)))
    try:
        with np.errstate(all="ignore"):
            cut, cover = stats.calibrated_cut(shape, k, seed, sims)
            lo, hi = stats.gamma_shape_ci95(x, shape, cut)
    except (ArithmeticError, ValueError, RuntimeError):
        return
    out["gamma_shape_ci95_calibrated"] = [_num(lo), _num(hi)]
    out["gamma_shape_ci_coverage"] = cover
    out["gamma_shape_calibration"] = (
        f"likelihood-ratio cut {cut:.3g}: the 95 % point over {sims} simulated tables of {k} "
        f"gamma({shape:.3g}) waits (seed {seed}); the chi-square cut 3.84 covers {cover:.2f} there")
