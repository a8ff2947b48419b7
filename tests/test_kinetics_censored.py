"""The cut-off last wait kept as right-censored: fits against lifelines and scipy's censored fit."""

from __future__ import annotations

import numpy as np
import pytest
from lifelines import ExponentialFitter
from scipy import stats

from reviewer.kinetics import summarise
from reviewer.kinetics.censored import gamma_fit


def _table(seed: int, n: int, shape: float = 1.0):
    rng = np.random.default_rng(seed)
    t = np.cumsum(rng.gamma(shape, 1.0 / shape, n))
    return t, float(t[-1] + rng.uniform(0.2, 2.0))


@pytest.mark.parametrize("seed, n", [(1, 4), (2, 12), (3, 60)])
def test_censored_exponential_equals_lifelines(seed, n):
    t, T = _table(seed, n)
    s = summarise(t, duration_s=T, n_boot=99, n_gof=99)
    x = np.diff(t)
    durations = np.append(x, T - t[-1])
    observed = np.append(np.ones(x.size, bool), False)
    ref = ExponentialFitter().fit(durations, event_observed=observed)  # lifelines reference
    assert s["exponential_scale_censored_s"] == pytest.approx(ref.lambda_, rel=1e-4)
    assert s["censored_wait_s"] == pytest.approx(T - t[-1])


@pytest.mark.parametrize("seed, n, shape", [(4, 8, 3.0), (5, 30, 0.7), (6, 50, 1.5)])
def test_censored_gamma_equals_scipy_censored_fit(seed, n, shape):
    t, T = _table(seed, n, shape)
    s = summarise(t, duration_s=T, n_boot=99, n_gof=99)
    x = np.diff(t)
    data = stats.CensoredData(uncensored=x, right=[T - t[-1]])
    a, _, scale = stats.gamma.fit(data, floc=0)  # scipy's censored maximum likelihood
    assert s["gamma_shape_censored"] == pytest.approx(a, rel=1e-4)
    assert s["gamma_scale_censored_s"] == pytest.approx(scale, rel=1e-4)


def test_keeping_the_censored_wait_removes_the_short_span_bias():
    # rate 1, recordings of 4 s, about 3 events: k/span runs far high (the span ends at an event),
    # k over the exposure up to the end of the recording does not (simulation, 4,000 seeded tables)
    rng = np.random.default_rng(9)
    plain, kept = [], []
    for _ in range(4000):
        t = np.cumsum(rng.exponential(1.0, 30))
        t = t[t < 4.0]
        if t.size < 2:
            continue
        s = summarise(t, duration_s=4.0, n_boot=9, n_gof=9) if len(kept) < 20 else None
        k = t.size - 1
        plain.append(k / (t[-1] - t[0]))
        kept.append(k / (4.0 - t[0]))
        if s is not None:
            assert s["rate_censored_per_s"] == pytest.approx(kept[-1])
    assert np.mean(plain) > 1.5 and abs(np.mean(kept) - 1.0) < 0.15


def test_gamma_fit_without_censoring_time_matches_uncensored_fit():
    x = np.random.default_rng(7).gamma(2.0, 1.0, 40)
    a, s = gamma_fit(x, 1e-12, (1.0, 1.0))
    ref_a, _, ref_s = stats.gamma.fit(x, floc=0)  # scipy reference
    assert a == pytest.approx(ref_a, rel=1e-4) and s == pytest.approx(ref_s, rel=1e-4)
