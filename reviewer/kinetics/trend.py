"""Checks beyond one steady renewal process: a trend in rate (Laplace test), the most likely single
change of rate, the gaps before the first and after the last event, and serial correlation of
consecutive waits.

Laplace test (Cox & Lewis 1966, The Statistical Analysis of Series of Events, from memory): with m
events uniform on a window of length L under a constant rate, U = (mean(t) - L/2) / (L / sqrt(12 m))
is close to N(0, 1); U > 0 means events crowd towards the end (a rising rate). For renewal processes
other than Poisson (bursty or regular waits) that normal p is wrong, so trend_tests takes its p values
from the same statistics on the waits shuffled: any order of the waits is equally likely for a steady
renewal process.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

SHUFFLES = 999             # shuffles of the waits that calibrate the trend and change-point tests
LONG = 5_000               # more intervals: normal Laplace p scaled by the CV, no shuffles
SHUFFLE_BUDGET = 20_000_000  # shuffles x intervals (fewer shuffles on long tables; stated)
LAG_PERMUTATIONS = 999     # permutations for the lag-1 correlation test of short tables
LAG_NORMAL_K = 500         # from this many intervals on: sqrt(k) * r1 ~ N(0, 1)


def laplace(times: np.ndarray, start: float, end: float) -> tuple[float, float, int]:
    """(U, two-sided normal p, m) of the Laplace trend test for the events strictly inside
    (start, end); the normal p holds for Poisson events (trend_tests calibrates it for renewals)."""
    t = np.asarray(times, float)
    inner = t[(t > start) & (t < end)]
    m, length = inner.size, end - start
    if m < 2 or not length > 0:
        return math.nan, math.nan, m
    u = float(_laplace_u(inner[None, :], start, length)[0])
    return u, float(2 * stats.norm.sf(abs(u))), m


def _laplace_u(inner: np.ndarray, start: float, length: float) -> np.ndarray:
    m = inner.shape[1]
    return (inner.mean(axis=1) - start - length / 2) / (length / math.sqrt(12 * m))


def _gains(inner: np.ndarray, start: float, length: float) -> np.ndarray:
    """Log-likelihood gain of one rate change just after each inner event (rows: tables)."""
    n = inner.shape[1]
    i = np.arange(1, n + 1)          # events up to and including the change place
    tau = inner - start
    with np.errstate(divide="ignore", invalid="ignore"):
        g = (i * np.log(i / tau) + (n - i) * np.log((n - i) / (length - tau))
             - n * math.log(n / length))
    return np.where(np.isfinite(g), g, -np.inf)


def trend_tests(times: np.ndarray, seed: int) -> dict | None:
    """Laplace trend and the most likely single change of rate between the first and last event,
    both with p values from shuffling the waits (valid for any renewal process, not only Poisson).
    """
    t = np.asarray(times, float)
    x = np.diff(t)
    if t.size < 6 or not np.ptp(t) > 0:
        return None
    start, length = float(t[0]), float(t[-1] - t[0])
    inner = t[None, 1:-1]
    u = float(_laplace_u(inner, start, length)[0])
    gain = _gains(inner, start, length)[0]
    best = int(np.argmax(gain))
    stat = float(gain[best])
    tau = float(inner[0, best])
    before = best + 2  # the first event and the inner events up to the change
    n = t.size
    change = {"time_s": tau, "p": None, "events_before": before, "events_after": n - before,
              "rate_before_per_s": (before - 1) / (tau - start) if tau > start else None,
              "rate_after_per_s": (n - before) / (t[-1] - tau) if t[-1] > tau else None,
              "simulations": 0}
    if x.size > LONG:
        # a steady renewal process counts with variance ~ CV^2 x mean (renewal theory): scale U
        cv = float(np.std(x, ddof=1) / np.mean(x))
        return {"laplace_u": u, "laplace_p": float(2 * stats.norm.sf(abs(u) / cv)) if cv > 0
                else None, "change_point": change, "shuffles": 0,
                "method": f"normal approximation with U / CV (k > {LONG}); no change-point p"}
    sims = int(min(SHUFFLES, max(99, SHUFFLE_BUDGET // x.size)))
    rng = np.random.default_rng([seed, x.size, 2])
    null_u, null_g = [], []
    rows = max(1, 2_000_000 // x.size)
    for lo in range(0, sims, rows):
        perm = rng.permuted(np.tile(x, (min(rows, sims - lo), 1)), axis=1)
        inner_sim = start + np.cumsum(perm[:, :-1], axis=1)
        null_u.append(_laplace_u(inner_sim, start, length))
        null_g.append(_gains(inner_sim, start, length).max(axis=1))
    null_u, null_g = np.concatenate(null_u), np.concatenate(null_g)
    change["p"] = float((1 + np.sum(null_g >= stat - 1e-9)) / (sims + 1))
    change["simulations"] = sims
    return {"laplace_u": u, "laplace_p": float((1 + np.sum(np.abs(null_u) >= abs(u) - 1e-12))
                                               / (sims + 1)),
            "change_point": change, "shuffles": sims,
            "method": f"p from {sims} shuffles of the waits"}


def gap_p(gap_s: float, rate: float) -> float:
    """Chance of no event for gap_s at a constant rate (exponential survival exp(-rate * gap))."""
    return float(math.exp(-rate * gap_s)) if gap_s > 0 and rate > 0 else 1.0


def onset_ci95(first_s: float, start: float, rate: float) -> list[float]:
    """95 % interval of the time events began, if they then came at `rate` (first wait ~ Exp)."""
    late, early = -math.log(0.975) / rate, -math.log(0.025) / rate
    return [max(start, first_s - early), max(start, first_s - late)]


def lag1(x: np.ndarray, seed: int) -> tuple[float, float, str] | None:
    """Lag-1 correlation of consecutive waits, its two-sided p value and the method."""
    x = np.asarray(x, float)
    k = x.size
    if k < 4 or np.std(x) == 0:
        return None
    r = float(np.corrcoef(x[:-1], x[1:])[0, 1])
    if not math.isfinite(r):
        return None
    if k >= LAG_NORMAL_K:
        return r, float(2 * stats.norm.sf(abs(r) * math.sqrt(k))), "normal, sqrt(k) r ~ N(0, 1)"
    rng = np.random.default_rng([seed, k, 1])
    perms = rng.permuted(np.tile(x, (LAG_PERMUTATIONS, 1)), axis=1)
    a, b = perms[:, :-1], perms[:, 1:]
    a = a - a.mean(axis=1, keepdims=True)
    b = b - b.mean(axis=1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        null = np.sum(a * b, axis=1) / np.sqrt(np.sum(a * a, axis=1) * np.sum(b * b, axis=1))
    p = (1 + np.sum(np.abs(null) >= abs(r) - 1e-12)) / (LAG_PERMUTATIONS + 1)
    return r, float(p), f"permutation test ({LAG_PERMUTATIONS} shuffles)"
