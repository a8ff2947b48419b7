"""PNG figure with Pillow: per group, the interval histogram with the fitted exponential and gamma
densities, the cumulative count of events over the recording (start, end and the gap before the first
event marked, a 95 % band around the rate), and the log-survival plot of the waits."""

from __future__ import annotations

import math
import os

import numpy as np
from PIL import Image, ImageDraw, ImageFont
from scipy import stats

PANEL_W, PANEL_H = 520, 340
MARGIN = dict(left=64, right=16, top=34, bottom=46)
INK, GRID, BAR = (30, 30, 30), (225, 225, 225), (170, 190, 215)
EXPON, GAMMA, RATE = (200, 60, 40), (30, 120, 60), (120, 80, 170)
GAP, EDGE, BAND = (235, 228, 210), (150, 110, 40), (228, 222, 240)
MAX_BINS = 40      # histogram bars in one panel
MAX_STEPS = 2_000  # steps drawn of the cumulative count


def _font(size: int = 13):
    try:
        return ImageFont.load_default(size=size)
    except TypeError:  # Pillow without FreeType: fixed bitmap font
        return ImageFont.load_default()


def nice_ticks(lo: float, hi: float, count: int = 5) -> np.ndarray:
    """Round tick values (1, 2, 5 x 10^n steps) covering [lo, hi]."""
    if not hi > lo:
        hi = lo + 1.0
    raw = (hi - lo) / count
    mag = 10 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 5, 10) if m * mag >= raw)
    return np.arange(math.ceil(lo / step - 1e-9) * step, hi + step * 1e-9, step)


def _label(v: float) -> str:
    return f"{v:.4g}"


class Axes:
    """Map data to pixels inside one panel and draw its frame, ticks and labels."""

    def __init__(self, draw: ImageDraw.ImageDraw, x0: int, y0: int, xlim, ylim) -> None:
        self.d, self.font = draw, _font()
        self.l, self.t = x0 + MARGIN["left"], y0 + MARGIN["top"]
        self.r, self.b = x0 + PANEL_W - MARGIN["right"], y0 + PANEL_H - MARGIN["bottom"]
        self.xlim, self.ylim = xlim, ylim

    def px(self, x, y):
        (a, b), (c, e) = self.xlim, self.ylim
        return (self.l + (np.asarray(x) - a) / (b - a) * (self.r - self.l),
                self.b - (np.asarray(y) - c) / (e - c) * (self.b - self.t))

    def frame(self, title: str, xlabel: str, ylabel: str) -> None:
        d = self.d
        for v in nice_ticks(*self.xlim):
            x, _ = self.px(v, self.ylim[0])
            d.line([(x, self.t), (x, self.b)], fill=GRID)
            d.line([(x, self.b), (x, self.b + 4)], fill=INK)
            d.text((x, self.b + 6), _label(v), fill=INK, font=self.font, anchor="ma")
        for v in nice_ticks(*self.ylim):
            _, y = self.px(self.xlim[0], v)
            d.line([(self.l, y), (self.r, y)], fill=GRID)
            d.line([(self.l - 4, y), (self.l, y)], fill=INK)
            d.text((self.l - 6, y), _label(v), fill=INK, font=self.font, anchor="rm")
        d.rectangle([self.l, self.t, self.r, self.b], outline=INK)
        d.text(((self.l + self.r) / 2, self.t - 8), title, fill=INK, font=self.font, anchor="md")
        d.text(((self.l + self.r) / 2, self.b + 24), xlabel, fill=INK, font=self.font, anchor="ma")
        d.text((self.l - 60, self.t - 22), ylabel, fill=INK, font=self.font)

    def curve(self, x, y, colour) -> None:
        px, py = self.px(x, np.clip(y, *self.ylim))
        self.d.line(list(zip(px.tolist(), py.tolist(), strict=True)), fill=colour, width=2)

    def legend(self, entries: list[tuple[str, tuple]], left: bool = False) -> None:
        wide = max(self.d.textlength(text, font=self.font) for text, _ in entries)
        x0 = self.l + 1 if left else self.r - 44 - wide
        self.d.rectangle([x0, self.t + 1, x0 + 43 + wide, self.t + 2 + 18 * len(entries)],
                         fill="white", outline=GRID)
        y = self.t + 10
        for text, colour in entries:
            x = x0 + 10
            self.d.line([(x - 4, y), (x + 18, y)], fill=colour, width=3)
            self.d.text((x + 24, y), text, fill=INK, font=self.font, anchor="lm")
            y += 18


def bin_count(x: np.ndarray) -> int:
    """Histogram bins: the larger of the Freedman-Diaconis and Sturges counts over [0, 1.05 max]; always 1 to MAX_BINS (equal waits have no spread to size a bin by)."""
    n = x.size
    sturges = math.ceil(math.log2(max(n, 1))) + 1
    q75, q25 = np.percentile(x, [75, 25]) if n else (0.0, 0.0)
    width = 2 * (q75 - q25) / n ** (1 / 3) if n else 0.0
    top = float(np.max(x)) * 1.05 if n else 0.0
    fd = math.ceil(top / width) if width > 0 and top > 0 else sturges
    return int(min(MAX_BINS, max(1, fd, sturges)))


def _staircase(times: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cumulative count as a step line, thinned to at most MAX_STEPS steps (a panel is ~450 px)."""
    counts = np.arange(1, times.size + 1)
    if times.size > MAX_STEPS:
        keep = np.unique(np.linspace(0, times.size - 1, MAX_STEPS).astype(int))
        times, counts = times[keep], counts[keep]
    xs = np.repeat(times, 2)[1:]
    ys = np.repeat(counts, 2)[:-1]
    return xs, ys


def _histogram(draw, x0, y0, intervals: np.ndarray, s: dict, name: str) -> None:
    hi_x = float(np.max(intervals)) * 1.05 or 1.0
    dens, edges = np.histogram(intervals, bins=bin_count(intervals), range=(0.0, hi_x),
                               density=True)
    grid = np.linspace(hi_x / 400, hi_x, 400)
    curves = []
    if s.get("exponential_scale_s"):
        curves.append((stats.expon.pdf(grid, scale=s["exponential_scale_s"]), EXPON,
                       f"exponential, mean {s['exponential_scale_s']:.3g} s"))
    if s.get("gamma_shape"):
        curves.append((stats.gamma.pdf(grid, s["gamma_shape"], scale=s["gamma_scale_s"]), GAMMA,
                       f"gamma, shape {s['gamma_shape']:.3g}"))
    top = max([float(np.max(dens))] + [float(np.max(c[0])) for c in curves]) * 1.15 or 1.0
    ax = Axes(draw, x0, y0, (0.0, hi_x), (0.0, top))
    ax.frame(f"{name}: {intervals.size} intervals", "interval (s)", "density (1/s)")
    for h, a, b in zip(dens, edges[:-1], edges[1:], strict=True):
        (xa, xb), (yb, yt) = ax.px([a, b], [0.0, h])
        if h > 0:
            draw.rectangle([xa, yt, xb, yb], fill=BAR, outline=(120, 140, 170))
    for y, colour, _ in curves:
        ax.curve(grid, y, colour)
    ax.legend([("intervals", BAR)] + [(c[2], c[1]) for c in curves])


def _cumulative(draw, x0, y0, times: np.ndarray, s: dict, name: str) -> None:
    """Cumulative count from the recording's start to its end (when known), the gap before the
    first event shaded, the rate line with a 95 % Poisson band."""
    t0, t1 = float(times[0]), float(times[-1])
    T = s.get("duration_s")
    lo_x = min(0.0, t0) if T or t0 > 0 else t0
    hi_x = max(T, t1) if T else t1
    pad = (hi_x - lo_x) * 0.03 or 1.0
    ax = Axes(draw, x0, y0, (lo_x - pad, hi_x + pad), (0.0, times.size * 1.15))
    ax.frame(f"{name}: cumulative count", "time (s)", "events")
    if t0 > lo_x:  # the wait before the first event
        (xa, xb), (yb, yt) = ax.px([lo_x, t0], [0.0, times.size * 1.15])
        draw.rectangle([xa, yt, xb, yb], fill=GAP)
    for edge in (lo_x, T) if T else (lo_x,):
        (xe,), _ = ax.px([edge], [0.0])
        for y in range(int(ax.t), int(ax.b), 8):
            draw.line([(xe, y), (xe, min(y + 4, ax.b))], fill=EDGE, width=2)
    rate = s["rate_per_s"]
    grid = np.linspace(t0, t1, 200)
    mean = 1.0 + rate * (grid - t0)
    half = 1.96 * np.sqrt(np.maximum(rate * (grid - t0), 0.0))
    band = list(zip(*ax.px(grid, np.clip(mean + half, *ax.ylim)), strict=True))
    band += list(zip(*ax.px(grid[::-1], np.clip((mean - half)[::-1], *ax.ylim)), strict=True))
    draw.polygon([(float(a), float(b)) for a, b in band], fill=BAND)
    xs, ys = _staircase(times)
    ax.curve(xs, ys, INK)
    ax.curve(np.array([t0, t1]), np.array([1.0, 1.0 + rate * (t1 - t0)]), RATE)
    entries = [("events", INK), (f"rate k/span {rate:.3g} /s, 95 % band", RATE)]
    if t0 > lo_x:
        entries.append((f"no events for {t0 - lo_x:.3g} s", GAP))
    entries.append(("recording start / end" if T else "recording start", EDGE))
    ax.legend(entries, left=True)


def _survival(draw, x0, y0, intervals: np.ndarray, s: dict, name: str) -> None:
    """ln of the share of waits longer than w against w: a straight line for exponential waits."""
    x = np.sort(intervals)
    n = x.size
    surv = 1.0 - (np.arange(1, n + 1) - 0.5) / n  # plotting positions, never 0
    if n > MAX_STEPS:
        keep = np.unique(np.linspace(0, n - 1, MAX_STEPS).astype(int))
        x, surv = x[keep], surv[keep]
    ln_s = np.log(surv)
    hi_x = float(x[-1]) * 1.05 or 1.0
    bottom = float(min(ln_s.min(), -1.0)) * 1.1
    ax = Axes(draw, x0, y0, (0.0, hi_x), (bottom, 0.0))
    ax.frame(f"{name}: waits longer than w", "wait w (s)", "ln(share)")
    grid = np.linspace(0.0, hi_x, 200)
    entries = [("waits", INK)]
    if s.get("exponential_scale_s"):
        ax.curve(grid, -grid / s["exponential_scale_s"], EXPON)
        entries.append(("exponential (straight)", EXPON))
    if s.get("gamma_shape"):
        with np.errstate(divide="ignore"):
            ln_g = stats.gamma.logsf(grid, s["gamma_shape"], scale=s["gamma_scale_s"])
        ax.curve(grid, np.maximum(ln_g, bottom), GAMMA)
        entries.append((f"gamma, shape {s['gamma_shape']:.3g}", GAMMA))
    px, py = ax.px(x, ln_s)
    for a, b in zip(px.tolist(), py.tolist(), strict=True):
        draw.ellipse([a - 2, b - 2, a + 2, b + 2], fill=INK)
    ax.legend(entries)


def plot_groups(path: str | os.PathLike, groups: list[tuple[str, np.ndarray, dict]]) -> None:
    """Write a PNG with one row of three panels per (name, times_s, summary) group: interval
    histogram with the fits, cumulative count over the recording, log-survival of the waits."""
    rows = [g for g in groups if not g[2].get("error")]
    img = Image.new("RGB", (3 * PANEL_W, PANEL_H * max(1, len(rows))), "white")
    draw = ImageDraw.Draw(img)
    for i, (name, times, s) in enumerate(rows):
        times = np.asarray(times, float)
        _histogram(draw, 0, i * PANEL_H, np.diff(times), s, name)
        _cumulative(draw, PANEL_W, i * PANEL_H, times, s, name)
        _survival(draw, 2 * PANEL_W, i * PANEL_H, np.diff(times), s, name)
    img.save(path, format="PNG")
