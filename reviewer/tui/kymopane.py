"""KymoPane: a kymograph in the terminal, time downwards (one frame per half-cell row), position along
the line across; a margin column marks the frames holding events (amber) and the cursor (pink)."""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from rich.color import Color
from rich.segment import Segment
from rich.style import Style
from rich.text import Text
from textual.strip import Strip

from reviewer.movie.regions import contrast_limits
from reviewer.tui import render
from reviewer.tui.loupe import StripPane

MARGIN = 2  # columns left of the image: the mark column and a gap
KINDS_RGB = {0: (0, 0, 0), 1: (255, 200, 0), 2: (255, 64, 200)}  # none, event, cursor
MONO_GLYPHS = {0: " ", 1: "*", 2: ">"}


def kymo_canvas(image: np.ndarray, rows: int, cols: int, clip: float) -> tuple[np.ndarray, int]:
    """Palette indices (2*rows, cols) of a (frames, points) kymograph: frame i on pixel row i,
    points stretched by a whole number (up to 4) or averaged down to fit. Returns the canvas and the
    number of columns used."""
    canvas = np.zeros((2 * rows, cols), dtype=np.uint8)
    n, points = image.shape
    if n == 0 or points == 0 or cols < 1:
        return canvas, 0
    k = max(1, min(4, cols // points))
    out_w = min(cols, points * k)
    small = render.resample(image[: 2 * rows], min(n, 2 * rows), out_w)
    lo, hi = contrast_limits([image], clip)
    canvas[: small.shape[0], :out_w] = render.to_indices(small, lo, hi)
    return canvas, out_w


def mark_kinds(start: int, n_rows: int, events: np.ndarray, cursor: int,
               bin_frames: int = 1) -> np.ndarray:
    """Per pixel row of the pane (frames start + i*bin_frames onwards): 0 nothing, 1 holds an
    event's frame, 2 holds the cursor."""
    kinds = np.zeros(n_rows, dtype=np.int8)
    ev = np.asarray(events, dtype=np.int64) - start
    ev = ev[ev >= 0] // bin_frames
    kinds[ev[ev < n_rows]] = 1
    if cursor >= start and (cursor - start) // bin_frames < n_rows:
        kinds[(cursor - start) // bin_frames] = 2
    return kinds


@lru_cache(maxsize=32)
def _mark_segment(top: int, bottom: int, system: str) -> Segment:
    if system == "mono":
        return Segment(MONO_GLYPHS[max(top, bottom)], Style(bold=True))
    if system == "truecolor":
        fg, bg = (Color.from_rgb(*KINDS_RGB[k]) for k in (top, bottom))
    else:
        fg, bg = (Color.from_ansi(render.nearest_xterm_number(KINDS_RGB[k])) for k in (top, bottom))
    return Segment(render.HALF_BLOCK, Style.from_color(fg, bg))


class KymoPane(StripPane):
    DEFAULT_CSS = "KymoPane { width: 1fr; height: 1fr; background: #000000; }"

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.image: np.ndarray | None = None
        self.start = 0
        self.cursor = 0
        self.events = np.empty(0, dtype=np.int64)
        self.clip = 0.5
        self.label = ""
        self.bin_frames = 1
        self.canvas: np.ndarray | None = None

    def frames_shown(self, rows: int | None = None) -> int:
        """Frames the pane shows at once: two per row below the header."""
        rows = self.size.height if rows is None else rows
        return max(2 * (rows - 1), 2)

    def show(self, image: np.ndarray, start: int, cursor: int, events: np.ndarray, *,
             clip: float = 0.5, label: str = "", bin_frames: int = 1) -> None:
        """Row i of `image` holds frames start + i*bin_frames ... (bin_frames of them)."""
        self.bin_frames = max(int(bin_frames), 1)
        self.image, self.start, self.cursor = image, int(start), int(cursor)
        self.events, self.clip, self.label = np.asarray(events), float(clip), label
        self.redraw()

    def _build(self, rows: int, cols: int) -> list[Strip]:
        header = Text(" kymograph ", style="bold", no_wrap=True, overflow="ellipsis")
        if self.image is None:
            header.append("(none)", "dim")
            return [Strip(header.render(self.app.console)).adjust_cell_length(cols)] + [
                Strip.blank(cols)] * max(rows - 1, 0)
        n = len(self.image)
        k = self.bin_frames
        span = (f"frames {self.start}–{self.start + n - 1} ↓" if k == 1 else
                f"{n} rows of {k} frames from {self.start} ↓")
        header.append(f"{span} · {self.label}", "not bold")
        body = max(rows - 1, 1)
        system = self.system
        canvas, used = kymo_canvas(self.image, body, max(cols - MARGIN, 1), self.clip)
        self.canvas = canvas
        lines = render.image_to_rows(canvas, render.segment_table("grey", system))
        kinds = mark_kinds(self.start, 2 * body, self.events, self.cursor, k)
        gap = Segment(" ")
        out = [Strip(header.render(self.app.console)).adjust_cell_length(cols)]
        for r, line in enumerate(lines):
            mark = _mark_segment(int(kinds[2 * r]), int(kinds[2 * r + 1]), system)
            out.append(Strip([mark, gap, *line[:used]]).adjust_cell_length(cols))
        return out[:rows]
