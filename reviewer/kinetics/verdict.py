"""The plain-language reading of a summary, and the pitfalls that apply to it."""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from scipy import stats

CV_SIMULATIONS = 40_000   # Poisson processes simulated per number of intervals (fewer for large k,
CV_SIM_BUDGET = 20_000_000  # ... keeping simulations x k within this budget, at least 10,000)
CV_SIM_SEED = 20_250_505  # fixed, so the reference range does not move with --seed
CV_SIM_MAX_K = 2_000      # above this, the normal approximation 1 +- 1.96/sqrt(k) is used
MIN_INTERVALS = 5         # fewer complete intervals: "too few intervals to tell"


@lru_cache(maxsize=64)
def _poisson_cvs(k: int) -> np.ndarray:
    """Sorted sample CVs (ddof=1) of k exponential waits, seeded simulation, cached per k."""
    rng = np.random.default_rng([CV_SIM_SEED, k])
    sims = int(np.clip(CV_SIM_BUDGET // k, 10_000, CV_SIMULATIONS))
    chunk = max(1, 2_000_000 // k)
    cvs = []
    for start in range(0, sims, chunk):
        x = rng.exponential(1.0, size=(min(chunk, sims - start), k))
        cvs.append(x.std(axis=1, ddof=1) / x.mean(axis=1))
    return np.sort(np.concatenate(cvs))


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
    lo, hi = np.percentile(_poisson_cvs(k), [2.5, 97.5])
    return float(lo), float(hi)


def poisson_cv_p(k: int, cv: float) -> float | None:
    """Two-sided p value of a sample CV against k exponential waits (same simulation / limit)."""
    if k < 2 or cv is None or not np.isfinite(cv):
        return None
    if k > CV_SIM_MAX_K:
        return float(2 * stats.norm.sf(abs(cv - 1) * np.sqrt(k)))
    sims = _poisson_cvs(k)
    below = np.searchsorted(sims, cv, side="right")
    above = sims.size - np.searchsorted(sims, cv, side="left")
    return float(min(1.0, 2 * (min(below, above) + 1) / (sims.size + 1)))


ALPHA = 0.05       # one significance level for the whole reading (family-wise, Bonferroni)
ENOUGH = 30        # intervals from which "no test departs" is read as consistent with random
DEAD_FRAMES = 2    # a shortest wait of this many frames or fewer: merging may shape the waits
KS_FRAME_SHARE = 0.05  # a frame above this share of the mean wait makes the KS test too eager
TESTS = (("interval_cv_p_poisson", "CV"), ("gamma_vs_exponential_p", "gamma vs exponential"),
         ("gof_p_exponential", "KS"), ("trend_laplace_p", "Laplace trend"),
         ("change_point", "change point"), ("lag1_p", "lag-1 correlation"),
         ("incubation_p", "gap before the first event"), ("tail_gap_p", "gap after the last"))


def _p(v: float) -> str:
    return f"p = {v:.2g}" if v >= 1e-3 else "p < 0.001"


def _exp_waits(k: int) -> str:
    return f"{k} exponential wait{'s' if k != 1 else ''}"


def _frame_aware(s: dict, key: str) -> str:
    """The frame-aware figure's key when the summary has it (waits in whole frames), else key."""
    aware = {"gof_p_exponential": "gof_p_exponential_frames",
             "gamma_vs_exponential_p": "gamma_vs_exponential_p_frames",
             "gamma_shape": "gamma_shape_frames"}.get(key)
    return aware if aware and s.get(aware) is not None else key


def weighed_tests(s: dict) -> dict[str, float]:
    """The p values the reading weighs (name -> p), only those the summary has."""
    out = {}
    for key, name in TESTS:
        v = s.get(_frame_aware(s, key))
        if isinstance(v, dict):
            v = v.get("p")
        if v is not None:
            out[name] = float(v)
    return out


class _Level:
    """Each test is read at alpha / m (Bonferroni): the reading as a whole errs at most alpha."""

    def __init__(self, s: dict) -> None:
        self.m = max(1, len(weighed_tests(s)))
        self.each = ALPHA / self.m

    def low(self, v) -> bool:
        if isinstance(v, dict):
            v = v.get("p")
        return v is not None and v < self.each

    def text(self) -> str:
        return f"alpha = {ALPHA:g} over {self.m} tests, each at {self.each:.2g}"


def _gaps(s: dict, lv: _Level) -> list[str]:
    out = []
    if lv.low(s.get("incubation_p")) and s.get("incubation_s"):
        out.append(f"No event for the first {s['incubation_s']:.3g} s of the recording ("
                   f"{_p(s['incubation_p'])} for so long a gap at the later rate): the rate and "
                   "the waits describe the time from the first event on.")
    if lv.low(s.get("tail_gap_p")) and s.get("tail_gap_s"):
        out.append(f"No event for the last {s['tail_gap_s']:.3g} s ({_p(s['tail_gap_p'])} at the "
                   "rate before): the events stopped before the recording did.")
    return out


def _dead_time(s: dict) -> str | None:
    frames = s.get("interval_min_frames")
    if frames is not None and frames <= DEAD_FRAMES:
        return (f"The shortest wait is {frames:.3g} frame(s): events closer than the reviewer or "
                "the detector can separate end up merged, which alone makes waits look regular.")
    return None


def _changes(s: dict, lv: _Level) -> str | None:
    u, tp, cp = s.get("trend_laplace_u"), s.get("trend_laplace_p"), s.get("change_point")
    moved = lv.low(cp)
    where = ""
    if moved:
        rates = [cp.get("rate_before_per_s"), cp.get("rate_after_per_s")]
        where = (f"changed at t = {cp['time_s']:.4g} s (change-point {_p(cp['p'])}"
                 + (f"; {rates[0]:.3g} /s before, {rates[1]:.3g} /s after" if None not in rates
                    else "") + ")")
    if lv.low(tp):
        head = (f"Rate trending ({'rising' if u > 0 else 'falling'}; Laplace {_p(tp)})"
                + (f", most likely {where}" if moved else ""))
    elif moved:
        head = f"Rate {where}"
    else:
        return None
    return (f"{head}, at {lv.text()}: the spread of the waits is not read as regularity while the "
            "rate changes.")


def _regularity(s: dict, lv: _Level) -> str:
    k, cv, band = s["intervals"], s["interval_cv"], s["poisson_cv_range95"]
    lo, hi = band
    shape, lr, ks = (s.get(_frame_aware(s, key)) for key in
                     ("gamma_shape", "gamma_vs_exponential_p", "gof_p_exponential"))
    aware = " (frames)" if s.get("gof_p_exponential_frames") is not None else ""
    cv_off = lv.low(s.get("interval_cv_p_poisson"))
    regular = (cv_off and cv < 1) or (lv.low(lr) and shape is not None and shape > 1)
    irregular = (cv_off and cv > 1) or (lv.low(lr) and shape is not None and shape < 1)
    cv_txt = f"CV {cv:.2f}, {lo:.2f}–{hi:.2f} expected for {_exp_waits(k)} (95 %)"
    shape_txt = (f"; gamma shape{aware} {shape:.2g}, gamma vs exponential{aware} {_p(lr)}"
                 if shape is not None and lr is not None else "")
    ks_txt = f"; KS{aware} {_p(ks)}" if ks is not None else ""
    tests = f"({cv_txt}{shape_txt}{ks_txt}; {lv.text()})"
    if regular and irregular:
        return f"The tests disagree about the spread of the waits {tests}: no reading."
    if regular:
        return f"Waits more regular than Poisson arrivals {tests}."
    if irregular:
        return f"Waits more irregular than Poisson arrivals {tests}."
    share = (s.get("frame_s") or 0) / s["interval_mean_s"] if s.get("interval_mean_s") else 0
    if lv.low(ks) and share > KS_FRAME_SHARE and not aware:
        return (f"No clear departure from exponential waits: only the KS test rejects {tests}, "
                f"and waits in whole frames (1 frame = {share:.0%} of the mean wait) make it "
                "reject too often.")
    if lv.low(ks):
        return (f"Waits not exponential by the KS test, though neither clearly more regular nor "
                f"more irregular {tests}.")
    if k < ENOUGH:
        return (f"Too few intervals to tell: no test departs from exponential waits {tests}, but "
                f"with {k} intervals moderately regular or irregular waits pass these tests too.")
    alone = [name for name, v in weighed_tests(s).items() if lv.each <= v < ALPHA]
    if alone:
        return (f"No clear departure from exponential waits {tests}, but the {', '.join(alone)} "
                f"p value{'s are' if len(alone) > 1 else ' is'} below {ALPHA:g} taken alone: the "
                "reading stays open.")
    return f"Consistent with random (Poisson) arrivals: no test departs from exponential waits {tests}."


def sentence(s: dict) -> str:
    """The plain reading: follows from the tests in the summary, at one family-wise alpha;
    describes regularity only, never a mechanism."""
    k = s["intervals"]
    lv = _Level(s)
    parts = _gaps(s, lv)
    if s.get("interval_cv") is None or s.get("poisson_cv_range95") is None or k < MIN_INTERVALS:
        parts.append(f"Too few intervals to tell ({k} complete interval{'s' if k != 1 else ''}; "
                     f"at least {MIN_INTERVALS} are needed before the waits can be called regular "
                     "or irregular).")
        return " ".join(parts)
    change = _changes(s, lv)
    if change:
        return " ".join([*parts, change])
    if lv.low(s.get("lag1_p")):
        parts.append(f"Consecutive waits are correlated (lag-1 r = {s['lag1_r']:.2f}, "
                     f"{_p(s['lag1_p'])}): the CV interval, the gamma fit and the KS test assume "
                     "independent waits and are not meaningful here.")
    parts.append(_regularity(s, lv))
    dead = _dead_time(s)
    if dead:
        parts.append(dead)
    return " ".join(parts)


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
