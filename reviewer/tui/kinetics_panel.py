"""The kinetics panel: waiting-time figures of the accepted events, live, with a terminal histogram."""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

LIVE_BOOT = 1999  # fewer resamples than `reviewer kinetics` (9999) so the panel answers quickly
LIVE_GOF = 999
BARS = " ▏▎▍▌▋▊▉█"


def histogram(values: np.ndarray, bins: int = 12, width: int = 40) -> list[str]:
    """Horizontal bars, one line per bin: 'lo–hi s │████▌ n'."""
    values = np.asarray(values, dtype=np.float64)
    lo, hi = float(values.min()), float(values.max())
    if hi - lo <= 1e-9 * max(abs(hi), 1e-12):  # all (nearly) equal: one bin around the value
        counts, edges = np.histogram(values, bins=1, range=(lo - 0.5 * abs(lo) - 1e-9, hi + 0.5 * abs(hi) + 1e-9))
    else:
        counts, edges = np.histogram(values, bins=min(bins, max(1, len(np.unique(values)))))
    top = max(int(counts.max()), 1)
    lines = []
    for c, lo, hi in zip(counts, edges[:-1], edges[1:], strict=True):
        eighths = int(round(8 * width * c / top))
        bar = "█" * (eighths // 8) + (BARS[eighths % 8] if eighths % 8 else "")
        lines.append(f"{lo:9.4g}–{hi:<9.4g}s │{bar:<{width}} {c}")
    return lines


def _ci(pair) -> str:
    return f"[{pair[0]:.4g}, {pair[1]:.4g}]" if pair else "[–]"


def _fmt(v, spec: str = ".4g") -> str:
    return "–" if v is None else format(v, spec)


def describe(summary: dict, times: np.ndarray) -> Text:
    s = summary
    out = Text()
    out.append(f"{s['events']} accepted events over {s['span_s']:.4g} s\n\n", "bold")
    rows = [
        ("rate (k/span)", f"{_fmt(s['rate_per_s'])} /s  95 % {_ci(s['rate_ci95_per_s'])}"),
        ("count rate (n/T)", f"{_fmt(s['count_rate_per_s'])} /s  95 % "
                             f"{_ci(s['count_rate_ci95_per_s'])}"),
        ("interval mean / median", f"{_fmt(s['interval_mean_s'])} / "
                                   f"{_fmt(s['interval_median_s'])} s"),
        ("interval CV", f"{_fmt(s['interval_cv'], '.3f')}  95 % {_ci(s['interval_cv_ci95'])}"),
        ("gamma shape", f"{_fmt(s['gamma_shape'], '.3g')}  95 % {_ci(s['gamma_shape_ci95'])}"),
        ("exponential fit p", _fmt(s["gof_p_exponential"], ".3g")),
    ]
    for name, value in rows:
        out.append(f"  {name:<24}", "bold")
        out.append(value + "\n")
    if s.get("reading"):
        out.append(f"\n{s['reading']}\n", "italic")
    for note in s.get("pitfalls") or []:
        out.append(f"  • {note}\n", "dim")
    out.append("\nIntervals between accepted events\n", "bold")
    out.append("\n".join(histogram(np.diff(times))) + "\n")
    out.append(f"\nLive figures use {LIVE_BOOT} bootstrap resamples; `reviewer kinetics` on the "
               "export gives the full report.", "dim")
    return out


class KineticsScreen(ModalScreen[None]):
    BINDINGS = [Binding("escape,q,k", "close", "close")]

    def __init__(self, session, movie) -> None:
        super().__init__()
        accepted = [e for e in session.events if e.status == "accepted" and e.time_s is not None]
        self.times = np.sort(np.array([e.time_s for e in accepted], dtype=np.float64))
        self.duration = movie.duration_s
        self.frame_s = 1.0 / movie.fps if movie.fps else None

    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="dialog help", id="kinetics"):
            yield Static("Kinetics of the accepted events", classes="title")
            yield Static("computing…", id="kinetics-text")

    def on_mount(self) -> None:
        if len(self.times) < 2:
            self.query_one("#kinetics-text", Static).update(
                f"{len(self.times)} accepted event(s) with a time: two events are the minimum for "
                "an interval (accept more, or give the movie a frame rate with --fps).")
            return
        self.compute()

    @work(thread=True, exclusive=True)
    def compute(self) -> None:
        from reviewer.kinetics import summarise

        try:
            s = summarise(self.times, duration_s=self.duration, frame_s=self.frame_s,
                          n_boot=LIVE_BOOT, n_gof=LIVE_GOF)
            text = describe(s, self.times)
        except ValueError as exc:
            text = Text(f"no figures: {exc}")
        self.app.call_from_thread(self._show, text)

    def _show(self, text: Text) -> None:
        if self.is_attached:
            self.query_one("#kinetics-text", Static).update(text)

    def action_close(self) -> None:
        self.dismiss(None)
