"""Fits that keep the cut-off last wait: after the last event the recording ran on for c seconds
without another event, so the next wait is longer than c (right-censored). Dropping it biases the
mean wait short when there are few events.

Exponential: the maximum-likelihood mean wait is (sum of waits + c) / k. Gamma: the likelihood
prod f(x_i) * S(c) maximised numerically over (shape, scale).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
from scipy import optimize, special, stats


def exponential_scale(x: np.ndarray, censored: float) -> float:
    """Mean wait of an exponential from k complete waits and one wait longer than `censored`."""
    return float((np.sum(x) + censored) / x.size)


def exposure_rate_ci95(k: int, exposure: float) -> tuple[float, float]:
    """Rate interval for k events over an exposure ending at a fixed time (not at an event):
    [chi2_0.025(2k), chi2_0.975(2k + 2)] / (2 exposure), the time-truncated Poisson interval."""
    return (float(stats.chi2.ppf(0.025, 2 * k)) / (2 * exposure),
            float(stats.chi2.ppf(0.975, 2 * k + 2)) / (2 * exposure))


def gamma_fit(x: np.ndarray, censored: float, start: tuple[float, float]) -> tuple[float, float]:
    """(shape, scale) of a gamma from complete waits and one right-censored wait, location 0."""

    k, sum_x, sum_log = x.size, float(np.sum(x)), float(np.sum(np.log(x)))

    def nll(p: np.ndarray) -> float:
        a, s = math.exp(p[0]), math.exp(p[1])
        # the complete waits through their sufficient statistics (sum and sum of logs)
        complete = (a - 1) * sum_log - sum_x / s - k * (special.gammaln(a) + a * math.log(s))
        v = -(complete + stats.gamma.logsf(censored, a, scale=s))
        return float(v) if math.isfinite(v) else 1e300

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = optimize.minimize(nll, np.log(start), method="Nelder-Mead",
                                options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 4000})
        res = optimize.minimize(nll, res.x, method="BFGS", options={"gtol": 1e-9})
    a, s = np.exp(res.x)
    return float(a), float(s)


def add_censored(out: dict, x: np.ndarray) -> None:
    """New keys: the censored wait and the fits and rate that keep it (None without a duration)."""
    keys = ("censored_wait_s", "exponential_scale_censored_s", "gamma_shape_censored",
            "gamma_scale_censored_s", "rate_censored_per_s", "rate_censored_ci95_per_s")
    out.update(dict.fromkeys(keys))
    out["censored_method"] = ("the wait after the last event, cut by the end of the recording, kept "
                              "as right-censored (longer than the time left)")
    T = out.get("duration_s")
    if not T or x.size < 1:
        return
    c = max(0.0, T - out["last_time_s"])
    out["censored_wait_s"] = c
    out["exponential_scale_censored_s"] = exponential_scale(x, c)
    exposure = out["span_s"] + c
    out["rate_censored_per_s"] = x.size / exposure
    out["rate_censored_ci95_per_s"] = list(exposure_rate_ci95(x.size, exposure))
    if out.get("gamma_shape") and c > 0:
        try:
            a, s = gamma_fit(x, c, (out["gamma_shape"], out["gamma_scale_s"]))
        except (ArithmeticError, ValueError, RuntimeError):
            return
        if math.isfinite(a) and math.isfinite(s):
            out["gamma_shape_censored"], out["gamma_scale_censored_s"] = a, s
    elif out.get("gamma_shape"):
        out["gamma_shape_censored"] = out["gamma_shape"]
        out["gamma_scale_censored_s"] = out["gamma_scale_s"]
