"""Terminal text for kinetics summaries: an aligned table, then the reading and pitfalls per group."""

from __future__ import annotations

import math

import numpy as np

DASH = "—"


def finite(obj):
    """A copy of a result fit for strict JSON: non-finite numbers become None, numpy scalars plain."""
    if isinstance(obj, dict):
        return {str(k): finite(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [finite(v) for v in obj]
    if isinstance(obj, bool | str) or obj is None:
        return obj
    if isinstance(obj, int | np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        return float(obj) if math.isfinite(obj) else None
    return str(obj)


def _g(v: float | None, unit: str = "", digits: int = 4) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return DASH
    return f"{v:.{digits}g}{unit}"


def digits_for(values, lo: float, hi: float) -> int:
    """Significant digits that show `values` to two digits of the interval's half-width."""
    half = abs(hi - lo) / 2
    top = max(abs(v) for v in values)
    if not (half > 0 and top > 0 and math.isfinite(half) and math.isfinite(top)):
        return 4
    return int(min(8, max(1, math.floor(math.log10(top)) - math.floor(math.log10(half)) + 2)))


def _ci(s: dict, key: str, ci_key: str, unit: str = "") -> str:
    """Estimate and interval, with digits that match the interval's width."""
    v, ci = s.get(key), s.get(ci_key)
    if v is None:
        return DASH
    if not ci:
        return _g(v, unit)
    half = abs(ci[1] - ci[0]) / 2
    if not all(x is not None and math.isfinite(x) for x in (v, *ci)):
        return _g(v, unit)
    places = 1 - math.floor(math.log10(half)) if half > 0 else None
    if places is not None and 0 <= places <= 6 and max(abs(v), *map(abs, ci)) < 1e7:
        return f"{v:.{places}f}{unit}  [{ci[0]:.{places}f}, {ci[1]:.{places}f}]"
    d = digits_for((v, *ci), *ci)
    return f"{_g(v, unit, d)}  [{_g(ci[0], '', d)}, {_g(ci[1], '', d)}]"


def _pv(v: float | None) -> str:
    return DASH if v is None else (f"p = {v:.2g}" if v >= 1e-3 else "p < 0.001")


def _p(v: float | None) -> str:
    if v is None:
        return DASH
    return f"{v:.2g}" if v >= 1e-3 else "< 0.001"


def _gap(s: dict, key: str, p_key: str, ci_key: str | None = None) -> str:
    if s.get(key) is None:
        return DASH
    ci = s.get(ci_key) if ci_key else None
    return (_g(s[key], " s") + (f"  [{_g(ci[0])}, {_g(ci[1])}]" if ci else "")
            + (f", {_p(s[p_key])}" if s.get(p_key) is not None else ""))


def _wait(s: dict, key: str) -> str:
    """A wait in seconds and, when the frame time is known, in frames (so quantisation shows)."""
    v, frame = s.get(key), s.get("frame_s")
    if v is None or not frame:
        return _g(v, " s")
    return f"{_g(v, ' s')} = {_g(v / frame, ' frames', 3)}"


def _frame_time(s: dict) -> str:
    frame = s.get("frame_s")
    return (f"{_g(frame * 1e3, ' ms')} (waits are whole frames of this)" if frame
            else "unknown (no frame rate in the sidecar)")


ROWS = (
    ("events n", lambda s: str(s["events"])),
    ("complete intervals k = n - 1", lambda s: str(s.get("intervals", DASH))),
    ("span t_last - t_first", lambda s: _g(s.get("span_s"), " s")),
    ("frame time", _frame_time),
    ("interval mean", lambda s: _wait(s, "interval_mean_s")),
    ("interval median", lambda s: _wait(s, "interval_median_s")),
    ("interval SD (ddof 1)", lambda s: _wait(s, "interval_sd_s")),
    ("interval CV  [95 %, bootstrap]", lambda s: _ci(s, "interval_cv", "interval_cv_ci95")
     + (f"  covers ~{s['interval_cv_ci_coverage']:.2f}" if s.get("interval_cv_ci_coverage")
        else "" if s.get("interval_cv_ci95") else "  [not meaningful]"
        if s.get("intervals", 0) < 10 else "")),
    ("CV range of random waits (95 %)",
     lambda s: "{:.2f}–{:.2f}".format(*s["poisson_cv_range95"]) if s.get("poisson_cv_range95")
     else DASH),
    ("rate k/span  [95 %, chi-square exact]",
     lambda s: _ci(s, "rate_per_s", "rate_ci95_per_s", " /s")),
    ("rate k/span  [95 %, gamma renewal]",
     lambda s: _ci(s, "rate_per_s", "rate_renewal_ci95_per_s", " /s")
     + (f"  covers ~{s['rate_renewal_ci_coverage']:.2f}" if s.get("rate_renewal_ci_coverage")
        else "") if s.get("rate_renewal_ci95_per_s") else DASH),
    ("count rate n/T  [95 %, Garwood exact]",
     lambda s: _ci(s, "count_rate_per_s", "count_rate_ci95_per_s", " /s")
     if s.get("count_rate_per_s") is not None else "unknown (no movie duration)"),
    ("rate (k - 1)/span (unbiased, Poisson)", lambda s: _g(s.get("rate_unbiased_per_s"), " /s")),
    ("shortest interval", lambda s: _wait(s, "interval_min_s")),
    ("start -> first event  [onset 95 %], p", lambda s: _gap(s, "incubation_s", "incubation_p",
                                                            "onset_ci95_s")),
    ("last event -> end, p", lambda s: _gap(s, "tail_gap_s", "tail_gap_p")),
    ("Laplace trend U, p", lambda s: f"{s['trend_laplace_u']:.2f}, {_p(s['trend_laplace_p'])}"
     if s.get("trend_laplace_p") is not None else DASH),
    ("most likely change of rate, p", lambda s: f"t = {_g(s['change_point']['time_s'], ' s')}, "
     f"{_p(s['change_point']['p'])}" if s.get("change_point") else DASH),
    ("lag-1 correlation of waits, p", lambda s: f"{s['lag1_r']:.2f}, {_p(s['lag1_p'])}"
     if s.get("lag1_p") is not None else DASH),
    ("exponential fit: mean wait", lambda s: _wait(s, "exponential_scale_s")),
    ("gamma fit: shape  [95 %, profile lik.]",
     lambda s: _ci(s, "gamma_shape", "gamma_shape_ci95")),
    ("gamma shape  [95 %, calibrated n]",
     lambda s: _ci(s, "gamma_shape", "gamma_shape_ci95_calibrated")
     + (f"  (chi-sq. covers {s['gamma_shape_ci_coverage']:.2f})"
        if s.get("gamma_shape_ci_coverage") is not None else "")),
    ("exponential, last wait censored: mean", lambda s: _g(s.get("exponential_scale_censored_s"),
                                                           " s")),
    ("gamma, last wait censored: shape", lambda s: _g(s.get("gamma_shape_censored"))),
    ("rate k/(T - t_first)  [95 %, exposure]",
     lambda s: _ci(s, "rate_censored_per_s", "rate_censored_ci95_per_s", " /s")),
    ("gamma fit: scale", lambda s: _g(s.get("gamma_scale_s"), " s")),
    ("gamma vs exponential: LR p", lambda s: _p(s.get("gamma_vs_exponential_p"))),
    ("exponential GOF p (KS, bootstrap)", lambda s: _p(s.get("gof_p_exponential"))),
    ("in whole frames: gamma shape", lambda s: _g(s.get("gamma_shape_frames"))),
    ("in whole frames: gamma vs exp. LR p", lambda s: _p(s.get("gamma_vs_exponential_p_frames"))),
    ("in whole frames: exponential GOF p", lambda s: _p(s.get("gof_p_exponential_frames"))),
    ("velocity = k/span x layer height  [95 %]",
     lambda s: _ci(s, "velocity_nm_per_s", "velocity_ci95_nm_per_s", " nm/s")
     if s.get("velocity_nm_per_s") is not None else "no layer height given"),
    ("velocity  [95 %, gamma renewal]",
     lambda s: _ci(s, "velocity_nm_per_s", "velocity_renewal_ci95_nm_per_s", " nm/s")
     if s.get("velocity_renewal_ci95_nm_per_s") else DASH),
)


def _cell(fn, s: dict) -> str:
    if s.get("error"):
        return str(s["events"]) if fn is ROWS[0][1] else DASH
    try:
        return fn(s)
    except (KeyError, TypeError):
        return DASH


def table(groups: list[dict]) -> str:
    """Figures as rows, one column per group (each dict a summarise() result plus 'group')."""
    head = ["", *[g.get("group", "events") for g in groups]]
    body = [[label, *[_cell(fn, g) for g in groups]] for label, fn in ROWS]
    widths = [max(len(r[i]) for r in [head, *body]) for i in range(len(head))]
    lines = ["  ".join(c.ljust(w) for c, w in zip(head, widths, strict=True)).rstrip(),
             "  ".join("-" * w for w in widths)]
    lines += ["  ".join(c.ljust(w) for c, w in zip(r, widths, strict=True)).rstrip() for r in body]
    return "\n".join(lines)


def render(result: dict) -> str:
    """Full text output: source line, table, methods, then reading and pitfalls per group."""
    groups = result.get("groups") or [result]
    out = [result.get("title", "")] if result.get("title") else []
    out += [table(groups), ""]
    first = next((g for g in groups if not g.get("error")), None)
    if first:
        out.append(f"CV interval: {first['interval_cv_ci_method'] or DASH}. "
                   f"Rate: {first['rate_method']}. Count rate: {first['count_rate_method']}"
                   + (f" (T = {_g(first['duration_s'])} s)." if first.get("duration_s") else "."))
        out.append(f"Gamma shape interval: {first['gamma_shape_ci_method']}; calibrated: "
                   f"{first.get('gamma_shape_calibration') or DASH}. GOF: {first['gof_method']}.")
        out.append(f"Rate intervals: chi-square assumes {first.get('rate_ci95_assumes', DASH)}; "
                   f"{first.get('rate_renewal_method') or 'no renewal interval'}. Velocity uses "
                   "k/span; (k - 1)/span is the unbiased rate for Poisson arrivals. Coverage of the CV and "
                   "renewal-rate intervals: lowest over exponential, gamma(4) and gamma(0.3) "
                   "waits in our simulation (the chi-square one covers 0.70 for gamma(0.3)).")
        if first.get("frames_method"):
            out.append(f"Frames: {first['frames_method']}.")
        cp = first.get("change_point")
        shuffles = (f"p from the same {cp['simulations']} shuffles" if cp and cp["simulations"]
                    else "no p value")
        out.append(f"Trend: {first.get('trend_method') or DASH}. Change of rate: Poisson "
                   f"likelihood of one change after an event, {shuffles}. Lag-1: "
                   f"{first.get('lag1_method') or DASH}. Onset: the time events began if they "
                   "came at rate k/span from then on. Reading: alpha 0.05 for the whole reading "
                   "(Bonferroni over the tests it uses).")
    if result.get("layer_source"):
        out.append(f"Layer height: {result['layer_source']}.")
    for g in groups:
        out.append("")
        name = g.get("group")
        if name:
            out.append(f"[{name}]")
        if g.get("error"):
            out.append(g["error"])
            continue
        out.append(g["reading"])
        out += [f"  ! {p}" for p in g["pitfalls"]]
    c = result.get("comparison")
    if c:
        ratio = (f"rate ratio {_ci(c, 'rate_ratio', 'rate_ratio_ci95')}" if c.get("rate_ratio")
                 else "rate ratio —")
        out += ["", f"{c['groups'][0]} against {c['groups'][1]}: {ratio} ({c['per']}), equal-rate "
                    f"{_pv(c.get('equal_rate_p'))}; CVs "
                    + (f"{c['cv'][0]:.2f} and {c['cv'][1]:.2f}, equal-CV {_pv(c['equal_cv_p'])}"
                       if c.get("cv") else "—")
                    + f". {c['rate_method']}; {c.get('cv_method') or 'no CV test'}."]
    if result.get("groups") and result.get("pooled_note"):
        out += ["", result["pooled_note"]]
    return "\n".join(out).rstrip() + "\n"
