"""The plain-language reading of a summary, and the pitfalls that apply to it."""

from __future__ import annotations

from functools import lru_cache

import numpy as np

CV_SIMULATIONS = 40_000   # Poisson processes simulated per number of intervals (fewer for large k,
CV_SIM_BUDGET = 20_000_000  # ... keeping simulations x k within this budget, at least 10,000)
CV_SIM_SEED = 20_250_505  # fixed, so the reference range does not move with --seed
CV_SIM_MAX_K = 2_000      # above this, the normal approximation 1 +- 1.96/sqrt(k) is used
MIN_INTERVALS = 5         # fewer complete intervals: "too few intervals to tell"


@lru_cache(maxsize=256)
def poisson_cv_range(k: int) -> tuple[float, float] | None:
    """2.5 and 97.5 percentiles of the sample CV (ddof=1) of k exponential waits (seeded simulation,
    cached per k).

    Above CV_SIM_MAX_K intervals the delta-method normal approximation (variance 1/k) is used.
    """
    if k < 2:
        return None
    if k > CV_SIM_MAX_K:
        half = 1.96 / np.sqrt(k)
        return float(1 - half), float(1 + half)
    rng = np.random.default_rng([CV_SIM_SEED, k])
    sims = int(np.clip(CV_SIM_BUDGET // k, 10_000, CV_SIMULATIONS))
    chunk = max(1, 2_000_000 // k)
    cvs = []
    for start in range(0, sims, chunk):
        x = rng.exponential(1.0, size=(min(chunk, sims - start), k))
        cvs.append(x.std(axis=1, ddof=1) / x.mean(axis=1))
    lo, hi = np.percentile(np.concatenate(cvs), [2.5, 97.5])
    return float(lo), float(hi)


def _waits(k: int) -> str:
    return f"{k} random wait{'s' if k != 1 else ''}"


def sentence(s: dict) -> str:
    """One sentence reading CV (and gamma shape) against what k random waits would give."""
    k, cv, band = s["intervals"], s["interval_cv"], s.get("poisson_cv_range95")
    if cv is None or band is None or k < MIN_INTERVALS:
        return (f"Too few intervals to tell ({k} complete interval{'s' if k != 1 else ''}; "
                f"at least {MIN_INTERVALS} are needed before the waits can be called random or regular).")
    lo, hi = band
    shape = s.get("gamma_shape")
    shape_txt = f"; gamma shape {shape:.2g}" if shape is not None else ""
    where = f"the {lo:.2f}–{hi:.2f} expected for {_waits(k)}"
    if cv < lo:
        return (f"Waits more regular than random (CV {cv:.2f} below {where}{shape_txt}): "
                "nucleation antibunching.")
    if cv > hi:
        return (f"Waits more irregular than random (CV {cv:.2f} above {where}{shape_txt}): "
                "bursts, or a rate that changed during the recording.")
    return f"Consistent with random (Poisson) arrivals (CV {cv:.2f} within {where}{shape_txt})."


def pitfalls(s: dict, frame_s: float | None = None, zero_intervals: int = 0,
             multi_frame_events: int = 0) -> list[str]:
    """Warnings that apply to this summary."""
    out = []
    mean = s.get("interval_mean_s")
    if frame_s and mean:
        share = frame_s / mean
        level = "large" if share > 0.1 else "noticeable" if share > 0.02 else "small"
        out.append(f"Intervals are whole frames: 1 frame = {frame_s * 1e3:.4g} ms = {share:.1%} of "
                   f"the mean interval ({level}); the fits treat the waits as continuous.")
    elif mean:
        out.append("Intervals are whole frames (frame rate unknown here: check that one frame is "
                   "small against the mean interval).")
    out.append("The waits before the first event and after the last are cut by the recording: "
               f"the rate uses only the {s['intervals']} complete interval(s) between events.")
    if zero_intervals:
        out.append(f"{zero_intervals} pair(s) of events fall in one frame (zero interval): one event "
                   "counted twice, or two layers within one frame? The gamma fit needs positive waits.")
    if multi_frame_events:
        out.append(f"{multi_frame_events} event(s) last several frames; times are their first frame.")
    T = s.get("duration_s")
    if T and s["last_time_s"] - min(0.0, s["first_time_s"]) > T * (1 + 1e-9):
        out.append(f"Events reach past the recording's duration in the sidecar ({T:g} s): check "
                   "the sidecar; the count rate n/T is doubtful.")
    if s["intervals"] < 10:
        out.append(f"Only {s['intervals']} interval(s): every interval here is wide.")
    return out
