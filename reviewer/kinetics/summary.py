"""summarise(times) -> one dict with every figure of a group of events (the --json keys)."""

from __future__ import annotations

import math

import numpy as np

from reviewer.kinetics import censored, frames, renewal, stats, trend, verdict

BOOT_RESAMPLES = 9_999  # bootstrap resamples for the CV interval
GOF_SAMPLES = 9_999     # parametric-bootstrap samples for the exponential goodness of fit
BOOT_BUDGET = 50_000_000  # resamples x intervals per CV interval (bounds the time on long tables)
GOF_BUDGET = 4_000_000  # samples x intervals held in memory by scipy's goodness_of_fit at once
GOF_BIG_SAMPLES = 999  # null samples of the asymptotic KS test on long tables
MIN_CV = 1e-3           # below this the waits are taken as all equal: no gamma fit, no GOF


def _num(v: float | None) -> float | None:
    return None if v is None or not math.isfinite(v) else float(v)


def _pair(lo: float, hi: float, factor: float = 1.0) -> list[float] | None:
    lo, hi = _num(lo * factor), _num(hi * factor)
    return None if lo is None or hi is None else [lo, hi]


def _fit_gamma(out: dict, x: np.ndarray) -> None:
    try:
        with np.errstate(all="ignore"):
            shape, scale = stats.fit_gamma(x)
            out["gamma_vs_exponential_p"] = _num(stats.gamma_vs_exponential_p(x, shape, scale))
    except (ArithmeticError, ValueError, RuntimeError):
        return
    out["gamma_shape"], out["gamma_scale_s"] = _num(shape), _num(scale)
    try:
        with np.errstate(all="ignore"):
            out["gamma_shape_ci95"] = _pair(*stats.gamma_shape_ci95(x, shape))
    except (ArithmeticError, ValueError, RuntimeError):
        out["gamma_shape_ci95"] = None


def _beyond_renewal(out: dict, t: np.ndarray, x: np.ndarray, seed: int,
                    frame_s: float | None) -> None:
    """Trend, change of rate, gaps at either end, serial correlation, shortest wait (new keys)."""
    k, span = x.size, out["span_s"]
    out["alpha"] = verdict.ALPHA
    out["interval_min_s"] = float(np.min(x))
    out["interval_min_frames"] = _num(float(np.min(x)) / frame_s) if frame_s else None
    out["frame_s"] = _num(frame_s) if frame_s else None
    out["rate_unbiased_per_s"] = (k - 1) / span if k >= 2 else None
    out["velocity_rate"] = "rate_per_s (k/span)"
    tt = trend.trend_tests(t, seed)
    out["trend_laplace_u"] = _num(tt["laplace_u"]) if tt else None
    out["trend_laplace_p"] = _num(tt["laplace_p"]) if tt else None
    out["trend_method"] = (f"Laplace statistic on the {t.size - 2} events between the first and "
                           f"the last, {tt['method']} (seed {seed})"
                           if tt else None)
    out["change_point"] = tt["change_point"] if tt else None
    rate = out["rate_per_s"]
    out["incubation_s"] = float(t[0]) if t[0] >= 0 else None
    out["incubation_p"] = trend.gap_p(float(t[0]), rate) if t[0] >= 0 else None
    out["onset_ci95_s"] = trend.onset_ci95(float(t[0]), 0.0, rate) if t[0] >= 0 else None
    T = out["duration_s"]
    out["tail_gap_s"] = max(0.0, T - float(t[-1])) if T else None
    out["tail_gap_p"] = trend.gap_p(out["tail_gap_s"], rate) if T else None
    lag = trend.lag1(x, seed)
    out["lag1_r"], out["lag1_p"], out["lag1_method"] = lag if lag else (None, None, None)


def summarise(times_s, duration_s: float | None = None, layer_nm: float | None = None, *,
              frame_s: float | None = None, seed: int = 0, n_boot: int = BOOT_RESAMPLES,
              n_gof: int = GOF_SAMPLES, multi_frame_events: int = 0, budget: float = 1.0) -> dict:
    """Waiting-time statistics of sorted event times (seconds).

    duration_s: the recording's length T (count rate n/T with its Garwood interval; None -> null).
    layer_nm: layer height (velocity = rate x height). frame_s: one frame (for the pitfall note).
    budget: share of the resampling budgets for this call (many groups share one run's budget).
    Raises ValueError for fewer than two events, non-finite, decreasing or all-equal times.
    """
    t = np.asarray(times_s, dtype=float).ravel()
    if t.size < 2:
        raise ValueError(f"{t.size} event(s): two events are the minimum for an interval")
    if not np.isfinite(t).all():
        raise ValueError("event times must be finite numbers")
    x = np.diff(t)
    if (x < 0).any():
        raise ValueError("event times must be in increasing order")
    n, k = int(t.size), int(x.size)
    n_big = int(min(n_gof, GOF_BIG_SAMPLES))
    n_gof = int(min(n_gof, max(199, GOF_BUDGET * budget // k)))  # long tables: fewer samples
    n_boot = int(min(n_boot, max(1999, BOOT_BUDGET * budget // k)))  # (the methods state them)
    span = float(t[-1] - t[0])
    if span <= 0:
        raise ValueError(f"all {n} events at the same time: the span is zero")
    mean = float(np.mean(x))
    sd = float(np.std(x, ddof=1)) if k >= 2 else None
    cv = sd / mean if sd is not None else None
    out: dict = {
        "events": n, "intervals": k, "first_time_s": float(t[0]), "last_time_s": float(t[-1]),
        "span_s": span, "interval_mean_s": mean, "interval_median_s": float(np.median(x)),
        "interval_sd_s": sd, "interval_cv": cv, "interval_cv_ci95": None,
        "interval_cv_ci_method": None,
        "rate_per_s": k / span, "rate_ci95_per_s": _pair(*stats.rate_ci95(k, span)),
        "rate_method": "k/span over the complete intervals; exact chi-square interval (2k d.f.)",
        "duration_s": _num(duration_s) if duration_s else None,
        "count_rate_per_s": None, "count_rate_ci95_per_s": None,
        "count_rate_method": "n/T over the whole recording; Garwood exact Poisson interval",
        "exponential_scale_s": _num(stats.fit_exponential(x)), "exponential_rate_per_s": None,
        "gamma_shape": None, "gamma_scale_s": None, "gamma_shape_ci95": None,
        "gamma_shape_ci_method": "profile likelihood (chi-square 1 d.f.)",
        "gamma_vs_exponential_p": None, "gof_p_exponential": None,
        "gof_method": (f"KS against an exponential with fitted scale, parametric bootstrap "
                       f"({n_gof} samples, seed {seed})"),
        "poisson_cv_range95": None, "interval_cv_p_poisson": None, "layer_nm": _num(layer_nm) if layer_nm else None,
        "velocity_nm_per_s": None, "velocity_ci95_nm_per_s": None, "seed": seed,
    }
    if out["exponential_scale_s"]:
        out["exponential_rate_per_s"] = 1.0 / out["exponential_scale_s"]
    T = out["duration_s"]
    if T is not None:
        out["count_rate_per_s"] = n / T
        out["count_rate_ci95_per_s"] = _pair(*stats.garwood_ci95(n), 1.0 / T)
    if k > stats.BIG_N and sd is not None:
        out["interval_cv_ci95"] = _pair(*stats.cv_delta_ci95(x))
        out["interval_cv_ci_method"] = f"normal approximation from sample moments (k > {stats.BIG_N})"
    elif k >= 2 and sd is not None:
        lo, hi, method = stats.cv_bootstrap_ci95(x, seed, n_boot)
        out["interval_cv_ci95"] = _pair(lo, hi)
        out["interval_cv_ci_method"] = f"bootstrap {method}, {n_boot} resamples, seed {seed}"
    if k >= 2 and sd is not None:
        band = verdict.poisson_cv_range(k)
        out["poisson_cv_range95"] = list(band) if band else None
        out["interval_cv_p_poisson"] = verdict.poisson_cv_p(k, cv)
    zeros = int(np.sum(x == 0))
    spread = cv is not None and cv > MIN_CV  # waits that all agree leave nothing to fit
    if k >= 2 and zeros == 0 and spread:
        _fit_gamma(out, x)
    if k > stats.BIG_N and spread:
        out["gof_p_exponential"] = _num(stats.gof_exponential_p_asymptotic(x, seed, n_big))
        out["gof_method"] = (f"KS against an exponential with fitted scale; sqrt(n) D against its "
                             f"null simulated at {stats.GOF_REF_N} waits ({n_big} samples, seed "
                             f"{seed}; k > {stats.BIG_N})")
    elif k >= 3 and spread:
        out["gof_p_exponential"] = _num(stats.gof_exponential_p(x, seed, n_gof))
    if out["layer_nm"] is not None:
        out["velocity_nm_per_s"] = _num(out["rate_per_s"] * out["layer_nm"])
        if out["rate_ci95_per_s"]:
            out["velocity_ci95_nm_per_s"] = _pair(*out["rate_ci95_per_s"], out["layer_nm"])
    renewal.add_renewal(out, x, seed, budget)
    censored.add_censored(out, x)
    frames.add_frames(out, x, frame_s, seed, n_gof, budget)
    _beyond_renewal(out, t, x, seed, frame_s)
    out["reading"] = verdict.sentence(out)
    out["pitfalls"] = verdict.pitfalls(out, frame_s=frame_s, zero_intervals=zeros,
                                       multi_frame_events=multi_frame_events)
    return out
