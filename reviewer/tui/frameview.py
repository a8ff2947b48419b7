"""FrameView: a movie frame drawn with half-block cells, fast enough for playback.

The whole pane is rendered to strips once per change of frame, mode, contrast, zoom, mark or size;
``render_line`` only returns cached strips. Modes: "frame" (the frame), "change" (mean of the frames
after minus the mean of the frames before, signed colours) and "average" (mean of the window).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from rich.color import Color
from rich.segment import Segment
from rich.style import Style
from scipy import ndimage
from textual.filter import ANSIToTruecolor, LineFilter
from textual.strip import Strip
from textual.widget import Widget

from reviewer.tui import render

MODES = ("frame", "change", "average")
CLIPS = (0.0, 0.05, 0.1, 0.25, 0.5, 1.0, 2.0, 5.0, 10.0, 20.0)  # % clipped at each end
DEFAULT_CLIP = CLIPS.index(0.5)
# The change view is scaled in units of its own noise: the contrast steps give the number of noise
# SDs (robust, 1.4826·MAD) at full colour, so unchanged pixels stay near grey and a real change shows.
CHANGE_SDS = (12.0, 10.0, 8.0, 7.0, 6.0, 5.0, 4.0, 3.0, 2.5, 2.0)
CHANGE_SMOOTH_PX = 1.0  # Gaussian sigma: shot noise is per pixel, a growth front spans several
MAX_ZOOM = 64.0
MARK_RGB = (255, 64, 200)  # pink: stands out on greys, blue and amber
MARK_GLYPHS = ("\u250c", "\u2510", "\u2514", "\u2518")  # corners around the marked spot


def _stack(a: np.ndarray | None) -> np.ndarray | None:
    if a is None:
        return None
    a = np.asarray(a)
    return a[None] if a.ndim == 2 else a


class FrameView(Widget):
    """Shows one frame (or a change / average of a few) fitted to the pane, aspect kept."""

    DEFAULT_CSS = """
    FrameView { width: 1fr; height: 1fr; background: #000000; }
    """

    def __init__(self, *, system: str | None = None, name: str | None = None,
                 id: str | None = None, classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._system_override = system
        self._mode = "frame"
        self._frame: np.ndarray | None = None
        self._before: np.ndarray | None = None
        self._after: np.ndarray | None = None
        self._view: np.ndarray | None = None
        self._limits: dict[int, tuple[float, float]] = {}
        self._clip = DEFAULT_CLIP
        self._zoom = 1.0
        self._centre: tuple[float, float] | None = None  # (x, y) in frame pixels
        self._mark: tuple[float, float] | None = None
        self._strips: list[Strip] | None = None
        self._built_size: tuple[int, int] | None = None
        self.unreadable: str | None = None  # why the frame could not be shown (placeholder drawn)

    # ----- state -------------------------------------------------------------------------------
    @property
    def system(self) -> str:
        """Colour system in use: "truecolor", "256" or "mono"."""
        if self._system_override is not None:
            return self._system_override
        app = self.app
        return render.system_for_console(app.console.color_system, app.no_color)

    @property
    def mode(self) -> str:
        return self._mode

    @mode.setter
    def mode(self, value: str) -> None:
        if value not in MODES:
            raise ValueError(f"mode must be one of {MODES}, got {value!r}")
        if value != self._mode:
            self._mode = value
            self._new_view()

    @property
    def clip(self) -> float:
        """Percent of pixels clipped at each end by the auto-contrast."""
        return CLIPS[self._clip]

    @property
    def zoom(self) -> float:
        return self._zoom

    @property
    def status_text(self) -> str:
        """One short line describing what is shown."""
        if self._mode == "change":
            return f"change · zoom {self._zoom:g}× · ±{CHANGE_SDS[self._clip]:g} noise SD"
        c = self.clip
        return f"{self._mode} · zoom {self._zoom:g}× · contrast {c:g}–{100 - c:g} %"

    def show(self, frame: np.ndarray, *, before: np.ndarray | None = None,
             after: np.ndarray | None = None) -> None:
        """Show a 2-D frame; ``before``/``after`` are small stacks (n, h, w) for the change and
        average views."""
        frame = np.asarray(frame)
        if frame.ndim != 2:
            raise ValueError(f"frame must be 2-D, got shape {frame.shape}")
        if self._frame is None or self._frame.shape != frame.shape:
            self._zoom, self._centre = 1.0, None
        self.unreadable = None
        self._frame, self._before, self._after = frame, _stack(before), _stack(after)
        self._new_view()

    def show_unreadable(self, why: str) -> None:
        """Draw a hatched placeholder saying why, instead of a frame that could not be read."""
        self.unreadable = " ".join(str(why).split())
        self._invalidate()

    def _placeholder(self, rows: int, cols: int) -> list[Strip]:
        hatch = Style(color="grey50", bgcolor="grey15")
        label = Style(color="white", bgcolor="dark_red", bold=True)
        text = f" UNREADABLE  {self.unreadable} "[: max(cols - 2, 0)]
        out = []
        for y in range(rows):
            line = "".join("╱" if (x + y) % 4 == 0 else " " for x in range(cols))
            if y == rows // 2 and text:
                left = max((cols - len(text)) // 2, 0)
                segs = [Segment(line[:left], hatch), Segment(text, label),
                        Segment(line[left + len(text):], hatch)]
            else:
                segs = [Segment(line, hatch)]
            out.append(Strip(segs, cols))
        return out

    def set_mark(self, x: float | None, y: float | None = None) -> None:
        """Mark a spot in frame pixels; ``set_mark(None)`` removes it."""
        self._mark = None if x is None or y is None else (float(x), float(y))
        self._invalidate()

    def contrast_wider(self) -> None:
        """Clip fewer pixels: a wider range of values, less contrast."""
        self._set_clip(self._clip - 1)

    def contrast_narrower(self) -> None:
        """Clip more pixels: more contrast."""
        self._set_clip(self._clip + 1)

    def zoom_in(self) -> None:
        self._set_zoom(self._zoom * 2)

    def zoom_out(self) -> None:
        self._set_zoom(self._zoom / 2)

    def zoom_to(self, x: float, y: float, zoom: float | None = None) -> None:
        """Centre on (x, y) in frame pixels, zooming to ``zoom`` (default: at least 4×)."""
        self._centre = (float(x), float(y))
        self._set_zoom(zoom if zoom is not None else max(self._zoom, 4.0))

    def pan(self, dx: float, dy: float) -> None:
        """Move the view by (dx, dy) steps, each a quarter of the visible region."""
        if self._frame is None:
            return
        h, w = self._frame.shape
        cx, cy = self._centre or (w / 2, h / 2)
        self._centre = (cx + dx * w / self._zoom / 4, cy + dy * h / self._zoom / 4)
        self._invalidate()

    def _set_clip(self, index: int) -> None:
        index = min(max(index, 0), len(CLIPS) - 1)
        if index != self._clip:
            self._clip = index
            self._invalidate()

    def _set_zoom(self, zoom: float) -> None:
        self._zoom = min(max(float(zoom), 1.0), MAX_ZOOM)
        if self._zoom == 1.0:
            self._centre = None
        self._invalidate()

    def _new_view(self) -> None:
        self._view = None
        self._limits = {}
        self._invalidate()

    def _invalidate(self) -> None:
        self._strips = None
        self.refresh()

    # ----- computing the image -----------------------------------------------------------------
    def view_image(self) -> np.ndarray | None:
        """The 2-D image of the current mode, before contrast (float32 for change / average)."""
        if self._view is None and self._frame is not None:
            f, before, after = self._frame, self._before, self._after
            if self._mode == "frame":
                self._view = f
            elif self._mode == "average":
                parts = [p for p in (before, f[None], after) if p is not None]
                self._view = np.concatenate(parts).mean(axis=0, dtype=np.float32)
            else:
                a = f if after is None else after.mean(axis=0, dtype=np.float32)
                b = f if before is None else before.mean(axis=0, dtype=np.float32)
                diff = np.asarray(a, dtype=np.float32) - np.asarray(b, dtype=np.float32)
                self._view = ndimage.gaussian_filter(np.nan_to_num(diff), CHANGE_SMOOTH_PX)
        return self._view

    def limits(self) -> tuple[float, float]:
        """Display limits of the current view: percentiles, or ±scale for the change view."""
        got = self._limits.get(self._clip)
        if got is None:
            view = self.view_image()
            if view is None:
                return 0.0, 1.0
            if self._mode == "change":
                sample = view[:: max(1, view.shape[0] // 128), :: max(1, view.shape[1] // 128)]
                sd = 1.4826 * float(np.median(np.abs(sample - np.median(sample))))
                scale = CHANGE_SDS[self._clip] * sd
                if not scale > 0:
                    scale = render.contrast_limits(np.abs(view), self.clip)[1]
                got = (-scale, scale)
            else:
                got = render.contrast_limits(view, self.clip)
            self._limits[self._clip] = got
        return got

    def view_region(self) -> tuple[int, int, int, int]:
        """Visible part of the frame as (y0, y1, x0, x1) in frame pixels."""
        assert self._frame is not None
        h, w = self._frame.shape
        rh = max(1, min(h, int(round(h / self._zoom))))
        rw = max(1, min(w, int(round(w / self._zoom))))
        cx, cy = self._centre or (w / 2, h / 2)
        y0 = min(max(int(round(cy - rh / 2)), 0), h - rh)
        x0 = min(max(int(round(cx - rw / 2)), 0), w - rw)
        return y0, y0 + rh, x0, x0 + rw

    def canvas(self, rows: int, cols: int) -> tuple[np.ndarray, tuple[int, int, int, int]]:
        """Palette indices of the pane, shape (2*rows, cols), and the image's placement
        (out_h, out_w, top, left) in it."""
        palette = "change" if self._mode == "change" else "grey"
        canvas = np.full((2 * rows, cols), render.ZERO_INDEX[palette], dtype=np.uint8)
        view = self.view_image()
        if view is None or rows < 1 or cols < 1:
            return canvas, (0, 0, 0, 0)
        y0, y1, x0, x1 = self.view_region()
        place = render.fit(y1 - y0, x1 - x0, rows, cols)
        out_h, out_w, top, left = place
        small = render.resample(view[y0:y1, x0:x1], out_h, out_w)
        lo, hi = self.limits()
        if self._mode == "change":
            idx = render.signed_to_indices(small, hi)
        else:
            idx = render.to_indices(small, lo, hi)
        canvas[top:top + out_h, left:left + out_w] = idx
        return canvas, place

    def mark_cell(self, place: tuple[int, int, int, int]) -> tuple[int, int] | None:
        """(row, col) of the cell holding the marked pixel, or None when not visible."""
        if self._mark is None or self._frame is None:
            return None
        y0, y1, x0, x1 = self.view_region()
        x, y = self._mark
        if not (x0 <= x < x1 and y0 <= y < y1):
            return None
        out_h, out_w, top, left = place
        px = left + (x + 0.5 - x0) * out_w / (x1 - x0)
        py = top + (y + 0.5 - y0) * out_h / (y1 - y0)
        return int(py) // 2, int(px)

    # ----- drawing -----------------------------------------------------------------------------
    def _mark_segments(self, system: str) -> list[Segment]:
        if system == "mono":
            style = Style(bold=True)
        elif system == "truecolor":
            style = Style.from_color(Color.from_rgb(*MARK_RGB), Color.from_rgb(0, 0, 0))
        else:
            style = Style.from_color(Color.from_ansi(render.nearest_xterm_number(MARK_RGB)),
                                     Color.from_ansi(16))
        return [Segment(g, style) for g in MARK_GLYPHS]

    def _build(self, rows: int, cols: int) -> list[Strip]:
        if self.unreadable is not None:
            return self._placeholder(rows, cols)
        system = self.system
        canvas, place = self.canvas(rows, cols)
        palette = "change" if self._mode == "change" else "grey"
        table = render.segment_table(palette, system)
        cell = self.mark_cell(place)
        if cell is None:
            return render.image_to_strips(canvas, table, render.segment_ids(palette, system))
        lines = render.image_to_rows(canvas, table)
        r, c = cell
        glyphs = self._mark_segments(system)
        for seg, (dr, dc) in zip(glyphs, ((-1, -1), (-1, 1), (1, -1), (1, 1)), strict=True):
            if 0 <= r + dr < rows and 0 <= c + dc < cols:
                lines[r + dr][c + dc] = seg
        return [Strip(line, cols) for line in lines]

    def render_line(self, y: int) -> Strip:
        rows, cols = self.size.height, self.size.width
        if self._strips is None or self._built_size != (rows, cols):
            self._strips = self._build(rows, cols)
            self._built_size = (rows, cols)
        return self._strips[y] if 0 <= y < len(self._strips) else Strip.blank(cols)

    def on_resize(self) -> None:
        self._invalidate()

    def get_line_filters(self) -> Sequence[LineFilter]:
        """Drop Textual's ANSI-to-truecolor filter: our segments only carry 24-bit colours or
        xterm indices 16-255 (whose RGB is fixed, not themed) and no dim, so for truecolor it is a
        no-op, and in 256 colours its round trip through RGB would shift our grey ramp. Other
        filters (NO_COLOR's monochrome, dim) are kept."""
        filters = super().get_line_filters()
        base, background = self.background_colors
        if base.ansi is not None or background.ansi is not None:
            return filters
        return [f for f in filters if not isinstance(f, ANSIToTruecolor)]
