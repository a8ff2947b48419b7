"""The plain reading follows from the tests printed beside it, at one family-wise alpha, and never
names a mechanism; the trend, change-of-rate, gap and serial-correlation checks it uses."""

from __future__ import annotations

import os
import re

import numpy as np
import pytest

from reviewer.kinetics import summarise
from reviewer.kinetics.trend import gap_p, lag1, laplace, onset_ci95, trend_tests
from reviewer.kinetics.verdict import ALPHA, poisson_cv_p, poisson_cv_range, weighed_tests

HEAVY = os.environ.get("REVIEWER_HEAVY") == "1"
# names of causes a spread of waits cannot identify (our list; common practice, no source)
MECHANISMS = re.compile(r"nucleat|antibunch|burst|ripening|diffusion|coalesc|step flow|mechanism",
                        re.I)
CLAIMS = ("Waits more", "Waits not exponential", "Rate ", "No event", "Consecutive waits",
          "The tests disagree")


def quick(t, **kw) -> dict:
    return summarise(t, n_boot=199, n_gof=199, **kw)


def poisson(n, seed, mean=1.0):
    return np.cumsum(np.random.default_rng(seed).exponential(mean, n))


@pytest.mark.parametrize("seed", range(12))
def test_gamma4_of_11_events_never_reads_random(seed):
    # gamma(4) waits: CV 1/sqrt(4) = 0.5 (textbook); 11 events = 10 intervals
    t = np.cumsum(np.random.default_rng(seed).gamma(4.0, 0.25, 11))
    s = quick(t)
    assert "random" not in s["reading"].lower()
    assert not MECHANISMS.search(s["reading"])
    if s["reading"].startswith("Waits more regular"):
        each = ALPHA / len(weighed_tests(s))  # the claim is backed by a test below its level
        assert min(s["interval_cv_p_poisson"], s["gamma_vs_exponential_p"] or 1) < each


def test_poisson_table_with_low_ks_p_is_not_read_as_random():
    hits = 0
    for seed in range(200):
        s = quick(poisson(40, seed))
        if s["gof_p_exponential"] is not None and s["gof_p_exponential"] < ALPHA:
            hits += 1
            assert "consistent with random" not in s["reading"].lower(), s["reading"]
        if hits >= 3:
            break
    assert hits >= 3  # KS falsely rejects ~5 % of Poisson tables, so 200 seeds hold a few


def _tables():
    rng = np.random.default_rng(21)
    yield "poisson", poisson(60, 1), None
    yield "gamma4", np.cumsum(rng.gamma(4, 0.25, 60)), None
    yield "bursty", np.cumsum(rng.gamma(0.3, 1.0, 60)), None
    late = 150 + poisson(60, 2)
    yield "incubated", late, float(late[-1] + 1)
    a = poisson(30, 3)
    yield "changed", np.concatenate([a, a[-1] + poisson(60, 4, mean=0.25)]), None
    yield "periodic", np.sort(np.arange(60) + rng.normal(0, 0.15, 60)) + 0.5, None


@pytest.mark.parametrize("name, t, duration", list(_tables()), ids=lambda v: v
                         if isinstance(v, str) else "")
def test_reading_follows_its_tests_and_names_no_mechanism(name, t, duration):
    s = quick(t, duration_s=duration)
    text = s["reading"]
    assert not MECHANISMS.search(text), text
    ps = weighed_tests(s)
    each = ALPHA / len(ps)
    assert f"over {len(ps)} tests" in text or text.startswith("Too few")
    if "Consistent with random" in text:
        assert min(ps.values()) >= ALPHA
    if any(c in text for c in CLAIMS):
        assert min(ps.values()) < each  # every claim rests on a test below its level
    expect = {"poisson": "Consistent with random", "gamma4": "Waits more regular",
              "bursty": "Waits more irregular", "incubated": "No event for the first",
              "changed": "Rate trending", "periodic": "Consecutive waits are correlated"}
    assert expect[name] in text, text


def test_incubated_table_reports_the_gap():
    # 150 s of nothing, then about 1 event a second
    t = 150 + poisson(100, 5)
    s = quick(t, duration_s=float(t[-1] + 0.5))
    assert s["incubation_s"] == pytest.approx(t[0])
    assert s["incubation_p"] < 1e-30
    lo, hi = s["onset_ci95_s"]
    assert lo < t[0] and hi <= t[0] and lo > 140
    assert s["count_rate_per_s"] < 0.5 * s["rate_per_s"]  # n/T counts the empty start too
    assert "No event for the first" in s["reading"]


def test_laplace_worked_example():
    # window [0, 10] with events inside at 2, 5, 9: U = (mean - L/2) / (L / sqrt(12 m))
    # = (16/3 - 5) / (10 / 6) = 0.2 (Cox & Lewis 1966 form, from memory; arithmetic by hand)
    u, p, m = laplace(np.array([0.0, 2.0, 5.0, 9.0, 10.0]), 0.0, 10.0)
    assert m == 3 and u == pytest.approx(0.2) and p == pytest.approx(0.8415, abs=1e-4)


def test_change_point_finds_a_fourfold_rise():
    a = poisson(40, 7)
    t = np.concatenate([a, a[-1] + poisson(80, 8, mean=0.25)])
    cp = trend_tests(t, seed=0)["change_point"]
    assert cp["p"] < 0.01 and abs(cp["time_s"] - a[-1]) < 5
    assert cp["rate_after_per_s"] > 2.5 * cp["rate_before_per_s"]


@pytest.mark.parametrize("shape", [1.0, 0.3, 4.0])
def test_trend_and_change_point_false_alarms_for_steady_renewals(shape):
    # Poisson, bursty and regular steady waits: shuffled-wait p values keep their level
    n_tables = 400 if HEAVY else 60
    lap = cpa = 0
    for seed in range(n_tables):
        t = np.cumsum(np.random.default_rng(1000 + seed).gamma(shape, 1.0, 31))
        tt = trend_tests(t, seed=seed)
        lap += tt["laplace_p"] < ALPHA
        cpa += tt["change_point"]["p"] < ALPHA
    # each test at 0.05: false alarms binomial(n, 0.05); allow 3 standard deviations
    bound = ALPHA + 3 * np.sqrt(ALPHA * (1 - ALPHA) / n_tables)
    assert lap / n_tables <= bound and cpa / n_tables <= bound


def test_reading_false_alarm_rate_under_poisson_is_at_most_alpha():
    # the whole reading errs (claims a departure) at most alpha for Poisson tables (Bonferroni)
    n_tables = 600 if HEAVY else 80
    claims = 0
    for seed in range(n_tables):
        t = poisson(40, 5000 + seed)
        s = quick(t, duration_s=float(t[-1] + 1.0))
        claims += any(s["reading"].startswith(c) or f". {c}" in s["reading"] for c in CLAIMS)
    bound = ALPHA + 2 * np.sqrt(ALPHA * (1 - ALPHA) / n_tables)
    assert claims / n_tables <= bound, claims


def test_lag1_flags_periodic_jitter_not_independent_waits():
    # periodic times with jitter: waits P + e_i - e_(i-1) have lag-1 correlation -1/2 (textbook)
    rng = np.random.default_rng(3)
    t = np.arange(80) + rng.normal(0, 0.2, 80)
    x = np.diff(t)
    r, p, _ = lag1(x, seed=0)
    assert r == pytest.approx(np.corrcoef(x[:-1], x[1:])[0, 1])  # numpy reference
    assert r < -0.3 and p < 0.01
    r, p, _ = lag1(np.random.default_rng(4).exponential(1, 80), seed=0)
    assert p > 0.01


def test_cv_p_matches_the_95_range():
    # the simulated 2.5 / 97.5 % CV limits sit at a two-sided p of about 0.05
    for k in (10, 40):
        lo, hi = poisson_cv_range(k)
        assert poisson_cv_p(k, lo) == pytest.approx(0.05, abs=0.005)
        assert poisson_cv_p(k, hi) == pytest.approx(0.05, abs=0.005)
        assert poisson_cv_p(k, 1.0) > 0.5


def test_gap_and_onset_arithmetic():
    # exponential survival: P(no event in g) = exp(-rate g); Exp(1) quantiles -ln 0.975, -ln 0.025
    assert gap_p(3.0, 0.5) == pytest.approx(np.exp(-1.5))
    lo, hi = onset_ci95(100.0, 0.0, 2.0)
    assert lo == pytest.approx(100 + np.log(0.025) / 2) and hi == pytest.approx(100 + np.log(0.975) / 2)
