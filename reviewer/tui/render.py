"""Half-block rendering of images into Textual strips from prebuilt segment tables.

Each terminal cell shows two pixels: the upper half block U+2580 with the top pixel as foreground and
the bottom pixel as background. An image of shape (2*rows, cols) of palette indices 0-255 becomes rows
of table look-ups at ``top * 256 + bottom``; the 65,536-entry tables are built once per (palette,
colour system) and never shared between colour systems (Rich caches the escape codes on each Style).

Colour systems: "truecolor" (24-bit greys), "256" (the xterm grey ramp 232-255 plus 16 and 231 for
black and white, each level snapped to the nearest) and "mono" (no colour escapes at all: a ramp of
shade characters), used for NO_COLOR and terminals with fewer than 256 colours.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from functools import lru_cache
from operator import itemgetter

import numpy as np
from rich.color import Color
from rich.segment import Segment
from rich.style import Style
from textual.strip import Strip

HALF_BLOCK = "\u2580"  # UPPER HALF BLOCK
SHADES = " \u2591\u2592\u2593\u2588"  # space, light / medium / dark shade, full block
DARKER = " .-=#"  # mono glyphs for "got darker" in the change view
SYSTEMS = ("truecolor", "256", "mono")
PALETTES = ("grey", "change")
ZERO_INDEX = {"grey": 0, "change": 128}  # palette index used for the empty margin

# xterm 256-colour palette (from memory of xterm's 256colres.h): grey ramp 232-255 at 8 + 10*i,
# colour cube 16-231 with channel levels 0, 95, 135, 175, 215, 255.
CUBE_LEVELS = (0, 95, 135, 175, 215, 255)


def xterm_rgb(number: int) -> tuple[int, int, int]:
    """RGB of an xterm 256-colour index 16-255."""
    if number >= 232:
        v = 8 + 10 * (number - 232)
        return v, v, v
    n = number - 16
    return CUBE_LEVELS[n // 36], CUBE_LEVELS[(n // 6) % 6], CUBE_LEVELS[n % 6]


_GREY_NUMBERS = np.array([16, *range(232, 256), 231])
_GREY_VALUES = np.array([xterm_rgb(int(n))[0] for n in _GREY_NUMBERS])
_ALL_NUMBERS = np.arange(16, 256)
_ALL_RGB = np.array([xterm_rgb(int(n)) for n in _ALL_NUMBERS], dtype=float)


def nearest_grey_number(value: int) -> int:
    """The xterm index (16, 232-255 or 231) whose grey level is nearest to ``value`` (0-255)."""
    return int(_GREY_NUMBERS[np.argmin(np.abs(_GREY_VALUES - value))])


def nearest_xterm_number(rgb: tuple[int, int, int]) -> int:
    """The xterm index 16-255 nearest to ``rgb`` (Euclidean distance in RGB)."""
    d = ((_ALL_RGB - np.asarray(rgb, dtype=float)) ** 2).sum(axis=1)
    return int(_ALL_NUMBERS[np.argmin(d)])


def system_from_env(environ: Mapping[str, str] | None = None) -> str:
    """Colour system from the environment: NO_COLOR, then COLORTERM, else the 256-colour ramp."""
    env = os.environ if environ is None else environ
    if env.get("NO_COLOR"):
        return "mono"
    if env.get("COLORTERM", "").lower() in ("truecolor", "24bit"):
        return "truecolor"
    return "256"


def system_for_console(color_system: str | None, no_color: bool) -> str:
    """Our colour system for a Rich console's ``color_system`` name and the app's NO_COLOR flag."""
    if no_color:
        return "mono"
    if color_system == "truecolor":
        return "truecolor"
    return "256" if color_system == "256" else "mono"


def change_rgb(index: int) -> tuple[int, int, int]:
    """Diverging palette: 0 = much darker (steel blue), 128 = no change (near black), 255 = much
    brighter (amber). Our own choice of colours."""
    t = (index - 127.5) / 127.5
    m = min(1.0, abs(t)) ** 0.75
    end = (255, 178, 40) if t > 0 else (72, 150, 255)
    base = 14
    return tuple(int(round(base + (c - base) * m)) for c in end)  # type: ignore[return-value]


@lru_cache(maxsize=4)
def palette_rgb(palette: str) -> np.ndarray:
    """(256, 3) uint8 RGB of a palette's indices (for drawing true pixels)."""
    if palette == "grey":
        return np.repeat(np.arange(256, dtype=np.uint8)[:, None], 3, axis=1)
    if palette == "change":
        return np.array([change_rgb(i) for i in range(256)], dtype=np.uint8)
    raise ValueError(f"unknown palette {palette!r}")


def palette_colours(palette: str, system: str) -> list[Color]:
    """The 256 Rich colours of a palette in a colour system ("truecolor" or "256")."""
    if palette == "grey":
        rgbs = [(v, v, v) for v in range(256)]
    elif palette == "change":
        rgbs = [change_rgb(i) for i in range(256)]
    else:
        raise ValueError(f"unknown palette {palette!r}")
    if system == "truecolor":
        return [Color.from_rgb(*rgb) for rgb in rgbs]
    if palette == "grey":
        return [Color.from_ansi(nearest_grey_number(rgb[0])) for rgb in rgbs]
    return [Color.from_ansi(nearest_xterm_number(rgb)) for rgb in rgbs]


def mono_glyph(palette: str, top: int, bottom: int) -> str:
    """Shade character for a pixel pair when no colour may be used."""
    if palette == "grey":
        return SHADES[int(round((top + bottom) / 510 * 4))]
    t = (top + bottom) / 2 - 127.5
    level = int(round(abs(t) / 127.5 * 4))
    return (SHADES if t > 0 else DARKER)[level]


@lru_cache(maxsize=8)
def segment_table(palette: str, system: str) -> tuple[Segment, ...]:
    """65,536 segments, entry ``top * 256 + bottom`` drawing that pixel pair in one cell."""
    if system not in SYSTEMS:
        raise ValueError(f"unknown colour system {system!r}")
    if system == "mono":
        plain = Style()
        cache: dict[str, Segment] = {}
        out = []
        for top in range(256):
            for bottom in range(256):
                g = mono_glyph(palette, top, bottom)
                out.append(cache.setdefault(g, Segment(g, plain)))
        return tuple(out)
    colours = palette_colours(palette, system)
    from_color = Style.from_color
    if system == "truecolor":
        return tuple(Segment(HALF_BLOCK, from_color(fg, bg)) for fg in colours for bg in colours)
    seen: dict[tuple[str, str], Segment] = {}
    out = []
    for fg in colours:
        for bg in colours:
            key = (fg.name, bg.name)
            seg = seen.get(key)
            if seg is None:
                seg = seen[key] = Segment(HALF_BLOCK, from_color(fg, bg))
            out.append(seg)
    return tuple(out)


def placeholder_strips(text: str, rows: int, cols: int) -> list[Strip]:
    """A hatched pane with ``text`` on a red label in the middle (what could not be shown)."""
    hatch = Style(color="grey50", bgcolor="grey15")
    label = Style(color="white", bgcolor="dark_red", bold=True)
    text = text[: max(cols - 2, 0)]
    out = []
    for y in range(rows):
        line = "".join("\u2571" if (x + y) % 4 == 0 else " " for x in range(cols))
        if y == rows // 2 and text:
            left = max((cols - len(text)) // 2, 0)
            segs = [Segment(line[:left], hatch), Segment(text, label),
                    Segment(line[left + len(text):], hatch)]
        else:
            segs = [Segment(line, hatch)]
        out.append(Strip(segs, cols))
    return out


def pair_indices(image: np.ndarray) -> np.ndarray:
    """Table indices ``top * 256 + bottom`` for a uint8 image of shape (2*rows, cols)."""
    if image.dtype != np.uint8 or image.ndim != 2 or image.shape[0] % 2:
        raise ValueError(f"need a uint8 image with an even number of rows, got {image.shape} "
                         f"{image.dtype}")
    return (image[0::2].astype(np.int32) << 8) | image[1::2]


def image_to_rows(image: np.ndarray, table: tuple[Segment, ...]) -> list[list[Segment]]:
    """Rows of segments (one per cell) for a uint8 image of shape (2*rows, cols)."""
    idx = pair_indices(image)
    if idx.shape[1] == 1:
        return [[table[row[0]]] for row in idx.tolist()]
    return [list(itemgetter(*row)(table)) for row in idx.tolist()]


@lru_cache(maxsize=8)
def segment_ids(palette: str, system: str) -> np.ndarray:
    """For each table entry the number of its distinct segment (entries drawing the same cell
    share a number), so runs of equal cells can be merged."""
    table = segment_table(palette, system)
    if system == "truecolor":
        return np.arange(len(table), dtype=np.int32)
    numbers: dict[int, int] = {}
    return np.array([numbers.setdefault(id(s), len(numbers)) for s in table], dtype=np.int32)


def image_to_strips(image: np.ndarray, table: tuple[Segment, ...],
                    ids: np.ndarray | None = None) -> list[Strip]:
    """Strips (one per terminal row) for a uint8 image of shape (2*rows, cols). With ``ids``
    (from :func:`segment_ids`) runs of equal cells become one segment when that saves enough:
    fewer segments make Textual's compositing and escape-code output cheaper."""
    width = image.shape[1]
    idx = pair_indices(image)
    if width == 1:
        return [Strip([table[row[0]]], 1) for row in idx.tolist()]
    if ids is not None:
        key = ids[idx]
        starts = np.ones(idx.shape, dtype=bool)
        starts[:, 1:] = key[:, 1:] != key[:, :-1]
        if starts.sum() < 0.85 * idx.size:
            return _merged_strips(idx, starts, table)
    return [Strip(itemgetter(*row)(table), width) for row in idx.tolist()]


def _merged_strips(idx: np.ndarray, starts: np.ndarray, table: tuple[Segment, ...]) -> list[Strip]:
    rows, width = idx.shape
    pos = np.flatnonzero(starts)  # every row starts a run, so runs never cross rows
    lengths = np.diff(np.append(pos, idx.size)).tolist()
    segs = [table[i] if k == 1 else Segment(table[i].text * k, table[i].style)
            for i, k in zip(idx.ravel()[pos].tolist(), lengths, strict=True)]
    ends = np.cumsum(starts.sum(axis=1)).tolist()
    return [Strip(segs[i:j], width) for i, j in zip([0, *ends[:-1]], ends, strict=True)]


def contrast_limits(image: np.ndarray, clip: float, max_samples: int = 1 << 14) -> tuple[float,
                                                                                         float]:
    """(low, high) display limits: the ``clip`` and ``100 - clip`` percentiles of the finite pixels.
    Large images are sampled on a regular grid of at most ``max_samples`` pixels."""
    a = np.asarray(image)
    if a.size > max_samples:
        step = int(np.ceil(np.sqrt(a.size / max_samples)))
        a = a[::step, ::step]
    a = a[np.isfinite(a)] if a.dtype.kind == "f" else a.ravel()
    if a.size == 0:
        return 0.0, 1.0
    lo, hi = np.percentile(a, [clip, 100.0 - clip])
    return float(lo), float(hi)


def to_indices(image: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Map ``lo``..``hi`` linearly to 0..255 (clipped, rounded, NaN -> 0) as uint8."""
    a = np.asarray(image, dtype=np.float32)
    scale = 255.0 / (hi - lo) if hi > lo else 0.0
    out = np.clip((a - np.float32(lo)) * np.float32(scale), 0, 255)
    return np.rint(np.nan_to_num(out, nan=0.0)).astype(np.uint8)


def signed_to_indices(diff: np.ndarray, scale: float) -> np.ndarray:
    """Map signed values -scale..+scale to 0..255 with 0 at index 128 (clipped) as uint8."""
    a = np.asarray(diff, dtype=np.float32)
    s = np.float32(127.5 / scale) if scale > 0 else np.float32(0.0)
    out = np.clip(np.float32(127.5) + a * s, 0, 255)
    return np.rint(np.nan_to_num(out, nan=127.5)).astype(np.uint8)


def _resample_axis(a: np.ndarray, n_out: int, axis: int) -> np.ndarray:
    n = a.shape[axis]
    if n_out == n:
        return a
    if n_out < n:  # area: mean over the source pixels whose index falls in each output bin
        starts = (np.arange(n_out) * n) // n_out
        sums = np.add.reduceat(a, starts, axis=axis)
        counts = np.diff(np.append(starts, n)).astype(np.float32)
        shape = [1, 1]
        shape[axis] = n_out
        return sums / counts.reshape(shape)
    idx = ((np.arange(n_out) + 0.5) * n / n_out).astype(np.intp)  # nearest neighbour
    return np.take(a, np.minimum(idx, n - 1), axis=axis)


def resample(image: np.ndarray, out_h: int, out_w: int) -> np.ndarray:
    """Resize a 2-D image: area averaging along an axis that shrinks, nearest neighbour along an
    axis that grows. Returns float32."""
    a = np.asarray(image, dtype=np.float32)
    return _resample_axis(_resample_axis(a, out_h, 0), out_w, 1)


def fit(region_h: int, region_w: int, rows: int, cols: int) -> tuple[int, int, int, int]:
    """Fit a region of pixels into ``rows`` x ``cols`` cells (2 square pixels per cell), keeping
    the aspect ratio. Returns (out_h, out_w, top, left) in pixels of the (2*rows, cols) canvas."""
    ph = 2 * rows
    scale = min(ph / region_h, cols / region_w)
    out_h = max(1, min(ph, int(round(region_h * scale))))
    out_w = max(1, min(cols, int(round(region_w * scale))))
    return out_h, out_w, (ph - out_h) // 2, (cols - out_w) // 2
