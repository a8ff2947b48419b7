"""PNG figure with Pillow: per group, the interval histogram with the fitted exponential and gamma
densities, and the cumulative count of events against time."""

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
    t0, t1 = float(times[0]), float(times[-1])
    pad = (t1 - t0) * 0.03 or 1.0
    ax = Axes(draw, x0, y0, (t0 - pad, t1 + pad), (0.0, times.size * 1.08))
    ax.frame(f"{name}: cumulative count", "time (s)", "events")
    xs, ys = _staircase(times)
    ax.curve(xs, ys, INK)
    ax.curve(np.array([t0, t1]), np.array([1.0, 1.0 + s["rate_per_s"] * (t1 - t0)]), RATE)
    ax.legend([("events", INK), (f"rate k/span {s['rate_per_s']:.3g} /s", RATE)], left=True)


def plot_groups(path: str | os.PathLike, groups: list[tuple[str, np.ndarray, dict]]) -> None:
    """Write a PNG with one row of two panels per (name, times_s, summary) group."""
    rows = [g for g in groups if not g[2].get("error")]
    img = Image.new("RGB", (2 * PANEL_W, PANEL_H * max(1, len(rows))), "white")
    draw = ImageDraw.Draw(img)
    for i, (name, times, s) in enumerate(rows):
        times = np.asarray(times, float)
        _histogram(draw, 0, i * PANEL_H, np.diff(times), s, name)
        _cumulative(draw, PANEL_W, i * PANEL_H, times, s, name)
    img.save(path, format="PNG")
