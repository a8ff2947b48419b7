"""Waits in whole frames: the frame-quantised likelihood against scipy and simulation, fits that
keep ties, and a goodness-of-fit test that keeps its level on frame-quantised Poisson times."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from reviewer.kinetics import summarise
from reviewer.kinetics.frames import fit, frame_probabilities, gof_p, integrated_cdf
from reviewer.kinetics.stats import gof_exponential_p


def quantised(rng, waits: np.ndarray, frame: float) -> np.ndarray:
    """Event times on the frame grid (random phase), as a recording stores them."""
    t = rng.uniform(0, frame) + np.cumsum(waits)
    return np.floor(t / frame) * frame


@pytest.mark.parametrize("a, s, x", [(2.5, 0.3, 1.1), (0.4, 2.0, 0.7), (1.0, 1.0, 3.0)])
def test_integrated_cdf_equals_numerical_integral(a, s, x):
    ref = integrate.quad(lambda u: stats.gamma.cdf(u, a, scale=s), 0, x)[0]  # scipy quadrature
    assert integrated_cdf(x, a, s) == pytest.approx(ref, rel=1e-8)


def test_frame_probabilities_match_simulated_frequencies():
    rng = np.random.default_rng(0)
    f, a, s = 0.1, 3.0, 0.05
    m = np.round(np.diff(quantised(rng, rng.gamma(a, s, 400_000), f)) / f).astype(int)
    emp = np.bincount(m, minlength=6)[:6] / m.size
    want = frame_probabilities(np.arange(6), a, s, f)
    assert np.allclose(emp, want, atol=4e-3)  # 400,000 draws: binomial sd below 1e-3
    assert frame_probabilities(np.arange(200), a, s, f).sum() == pytest.approx(1.0, abs=1e-9)


def test_exponential_frame_fit_is_the_geometric_one():
    # exponential waits seen in whole frames: P(m) for m >= 1 falls geometrically by exp(-f / mean),
    # so the fit must recover the mean from heavily quantised, tied data (seeded simulation)
    rng = np.random.default_rng(1)
    t = quantised(rng, rng.exponential(0.25, 3000), 0.1)
    x = np.diff(t)
    assert np.sum(x == 0) > 100  # many ties
    _, scale, _ = fit(x, 0.1, shape=1.0)
    assert scale == pytest.approx(0.25, rel=0.05)


def test_ties_keep_the_gamma_fit():
    rng = np.random.default_rng(2)
    t = quantised(rng, rng.gamma(4.0, 0.025, 101), 0.05)  # frame = half the mean wait
    s = summarise(t, frame_s=0.05, n_boot=99, n_gof=199)
    assert np.sum(np.diff(t) == 0) > 0
    assert s["gamma_shape"] is None  # the continuous fit cannot take zero waits
    assert s["gamma_shape_frames"] is not None and 2.0 < s["gamma_shape_frames"] < 8.0
    assert s["gamma_vs_exponential_p_frames"] < 0.01
    assert "more regular" in s["reading"]


def test_frame_gof_keeps_its_level_where_plain_ks_does_not():
    # frame = 20 % of the mean wait: the plain KS test rejects Poisson times far too often
    rng = np.random.default_rng(3)
    tables, plain, aware = 60, 0, 0
    for i in range(tables):
        x = np.diff(quantised(rng, rng.exponential(0.5, 101), 0.1))
        plain += gof_exponential_p(x, seed=i, n_samples=199) < 0.05
        aware += gof_p(x, 0.1, seed=i, sims=199) < 0.05
    assert plain / tables > 0.3
    assert aware / tables <= 0.05 + 3 * np.sqrt(0.05 * 0.95 / tables)
