"""Loupe: the region around the viewed event at one movie pixel per half-cell (or 2x, 4x), with its
own contrast, a scale bar, the event's mark, the kymograph line and, while a line is placed, a
crosshair. ScaleRow: a scale bar for the fitted frame view, on one row under it.

`loupe_view` is the pure part (region, contrast, palette indices); the widget caches its strips and
redraws only when something shown changes, like the frame view.
"""

from __future__ import annotations

from collections.abc import Sequence
from functools import lru_cache

import numpy as np
from rich.color import Color
from rich.segment import Segment
from rich.style import Style
from rich.text import Text
from textual.binding import Binding
from textual.filter import ANSIToTruecolor, LineFilter
from textual.strip import Strip
from textual.widget import Widget

from reviewer.movie.regions import Box, box_around, contrast_limits, magnify, scale_bar_cells
from reviewer.tui import render

MAGNIFICATIONS = (1, 2, 4)
MARK_RGB = (255, 64, 200)  # the event's place: the frame view's pink
LINE_RGB = (255, 200, 0)  # the kymograph line: amber, as the event marks of the kymograph image
CROSS_RGB = (80, 255, 120)  # the crosshair while a line is placed


def loupe_box(height: int, width: int, x: float, y: float, rows: int, cols: int, mag: int) -> Box:
    """Movie pixels that fill an image area of rows x cols cells (2 pixels per cell, upright) at
    magnification `mag`, centred on (x, y) and kept inside the frame."""
    return box_around(height, width, x, y, max(1, 2 * rows // mag), max(1, cols // mag))


def loupe_view(image: np.ndarray, x: float, y: float, rows: int, cols: int, mag: int, clip: float,
               contrast_with: Sequence[np.ndarray] = ()) -> tuple[np.ndarray, Box, tuple, tuple]:
    """The loupe's picture: palette indices (2*rows, cols) uint8, the box of movie pixels shown,
    the contrast limits and the picture's (top, left) in the canvas. Limits are the `clip`
    percentiles of the region in `image` and in every image of `contrast_with` (same box), so
    pictures drawn with them compare directly."""
    h, w = image.shape
    box = loupe_box(h, w, x, y, rows, cols, mag)
    y0, y1, x0, x1 = box
    region = image[y0:y1, x0:x1]
    lo, hi = contrast_limits([region, *(a[y0:y1, x0:x1] for a in contrast_with)], clip)
    idx = render.to_indices(magnify(region, mag), lo, hi)[:2 * rows, :cols]
    canvas = np.zeros((2 * rows, cols), dtype=np.uint8)
    top, left = (2 * rows - idx.shape[0]) // 2, (cols - idx.shape[1]) // 2
    canvas[top:top + idx.shape[0], left:left + idx.shape[1]] = idx
    return canvas, box, (lo, hi), (top, left)


def cell_of(x: float, y: float, box: Box, mag: int, place: tuple[int, int]) -> tuple[int, int]:
    """(row, col) of the cell showing movie pixel (x, y)."""
    y0, _, x0, _ = box
    top, left = place
    return (top + int((round(y) - y0) * mag + mag // 2)) // 2, left + int((round(x) - x0) * mag
                                                                          + mag // 2)


@lru_cache(maxsize=16)
def _glyph(text: str, rgb: tuple[int, int, int], system: str) -> Segment:
    if system == "mono":
        return Segment(text, Style(bold=True))
    if system == "truecolor":
        return Segment(text, Style.from_color(Color.from_rgb(*rgb), Color.from_rgb(0, 0, 0)))
    return Segment(text, Style.from_color(Color.from_ansi(render.nearest_xterm_number(rgb)),
                                          Color.from_ansi(16)))


def _no_truecolor_filter(widget: Widget, filters: Sequence[LineFilter]) -> list[LineFilter]:
    """Our grey cells carry xterm 16-255 or 24-bit colours only: converting them through RGB (as
    Textual's ANSI-to-truecolor filter does) would shift the 256-colour ramp. Others are kept."""
    base, background = widget.background_colors
    if base.ansi is not None or background.ansi is not None:
        return list(filters)
    return [f for f in filters if not isinstance(f, ANSIToTruecolor)]


class StripPane(Widget):
    """A pane drawn as cached strips: `_build(rows, cols)` runs once per change (`redraw()`) or
    size; `render_line` only hands the strips out."""

    def __init__(self, *, system: str | None = None, **kwargs) -> None:
        super().__init__(**kwargs)
        self._system_override = system
        self._strips: list[Strip] | None = None
        self._built: tuple[int, int] | None = None

    @property
    def system(self) -> str:
        """Colour system in use: "truecolor", "256" or "mono"."""
        if self._system_override is not None:
            return self._system_override
        return render.system_for_console(self.app.console.color_system, self.app.no_color)

    def _build(self, rows: int, cols: int) -> list[Strip]:
        raise NotImplementedError

    def redraw(self) -> None:
        self._strips = None
        self.refresh()

    def render_line(self, y: int) -> Strip:
        rows, cols = self.size.height, self.size.width
        if self._strips is None or self._built != (rows, cols):
            self._strips = self._build(rows, cols)
            self._built = (rows, cols)
        return self._strips[y] if 0 <= y < len(self._strips) else Strip.blank(cols)

    def on_resize(self) -> None:
        self.redraw()

    def get_line_filters(self) -> Sequence[LineFilter]:
        return _no_truecolor_filter(self, super().get_line_filters())


class Loupe(StripPane, can_focus=True):
    """Shows `show()`'s image around a centre. While focused (placing a line) the arrow keys move
    the crosshair and Enter sets a point."""

    DEFAULT_CSS = "Loupe { width: 1fr; height: 1fr; background: #000000; }"
    BINDINGS = [  # noqa: RUF012 - Textual's own convention
        Binding("left", "cross(-1,0)", "crosshair left", show=False),
        Binding("right", "cross(1,0)", "crosshair right", show=False),
        Binding("up", "cross(0,-1)", "crosshair up", show=False),
        Binding("down", "cross(0,1)", "crosshair down", show=False),
        Binding("shift+left", "cross(-10,0)", "crosshair 10 left", show=False),
        Binding("shift+right", "cross(10,0)", "crosshair 10 right", show=False),
        Binding("shift+up", "cross(0,-10)", "crosshair 10 up", show=False),
        Binding("shift+down", "cross(0,10)", "crosshair 10 down", show=False),
        Binding("enter", "cross_point", "set a point of the line", show=False),
    ]

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.image: np.ndarray | None = None
        self.contrast_with: tuple[np.ndarray, ...] = ()
        self.centre = (0.0, 0.0)
        self.mag = 1
        self.clip = 0.5
        self.label = ""
        self.mark: tuple[float, float] | None = None
        self.cross: tuple[float, float] | None = None
        self.line_points: list[tuple[float, float]] = []
        self.pixel_m: float | None = None
        # filled by each build, for the status text and the tests
        self.canvas: np.ndarray | None = None
        self.box: Box | None = None
        self.limits: tuple[float, float] | None = None
        self.bar: tuple[int, float, str] | None = None

    def show(self, image: np.ndarray, centre: tuple[float, float], *, mag: int = 1,
             clip: float = 0.5, contrast_with: Sequence[np.ndarray] = (), label: str = "",
             mark=None, cross=None, line_points=(), pixel_m: float | None = None) -> None:
        """Draw `image` (2-D, whole frame) around `centre` (x, y) at `mag`; contrast from this
        region together with the same region of `contrast_with`."""
        self.image, self.contrast_with = np.asarray(image), tuple(contrast_with)
        self.centre, self.mag, self.clip, self.label = centre, int(mag), float(clip), label
        self.mark, self.cross, self.line_points = mark, cross, list(line_points)
        self.pixel_m = pixel_m
        self.redraw()

    def image_rows(self, rows: int) -> int:
        """Rows of the picture: the widget's rows less the header and the scale bar's row."""
        return max(rows - 1 - (1 if self.pixel_m else 0), 1)

    def _build(self, rows: int, cols: int) -> list[Strip]:
        header = Text(no_wrap=True, overflow="ellipsis", style="bold")
        if self.image is None or rows < 3 or cols < 4:
            header.append(" loupe: no frame")
            return [Strip(header.render(self.app.console)).adjust_cell_length(cols)] + [
                Strip.blank(cols)] * max(rows - 1, 0)
        n_img = self.image_rows(rows)
        canvas, box, limits, place = loupe_view(self.image, *self.centre, n_img, cols, self.mag,
                                                self.clip, self.contrast_with)
        self.canvas, self.box, self.limits = canvas, box, limits
        y0, y1, x0, x1 = box
        system = self.system
        table = render.segment_table("grey", system)
        strips = render.image_to_strips(canvas, table, render.segment_ids("grey", system))
        overlays = self._overlays(box, place, n_img, cols)
        if overlays:  # only rows with a mark, the line or the crosshair are rebuilt cell by cell
            rows_of = sorted({r for r, _, _, _ in overlays})
            lines = dict(zip(rows_of, render.image_to_rows(
                np.concatenate([canvas[2 * r:2 * r + 2] for r in rows_of]), table), strict=True))
            for r, c, glyph, rgb in overlays:
                lines[r][c] = _glyph(glyph, rgb, system)
            for r, line in lines.items():
                strips[r] = Strip(line, cols)
        header.append(f" loupe {self.mag}× · {x1 - x0}×{y1 - y0} px at x {x0}–{x1 - 1}, "
                      f"y {y0}–{y1 - 1}")
        if self.label:
            header.append(f" · {self.label}", "not bold")
        out = [Strip(header.render(self.app.console)).adjust_cell_length(cols)]
        out += strips
        if self.pixel_m:
            self.bar = scale_bar_cells(self.pixel_m, x1 - x0, (x1 - x0) * self.mag)
            out.append(self._bar_strip(cols))
        return out[:rows] + [Strip.blank(cols)] * max(rows - len(out), 0)

    def _bar_strip(self, cols: int) -> Strip:
        text = Text(no_wrap=True, overflow="crop")
        if self.bar is None:
            text.append(" (no round scale bar fits)", "dim")
        else:
            n, _, label = self.bar
            text.append(" " + "\u2501" * n, "bold white")
            text.append(f" {label}", "bold")
        return Strip(text.render(self.app.console)).adjust_cell_length(cols)

    def _overlays(self, box: Box, place, rows: int, cols: int) -> list:
        """(row, col, glyph, colour) of every overlaid cell: the line, its ends, the event's
        corners, the crosshair (later ones drawn over earlier ones)."""
        y0, y1, x0, x1 = box
        out = []

        def put(x: float, y: float, glyph: str, rgb, dr: int = 0, dc: int = 0) -> None:
            if x0 <= round(x) < x1 and y0 <= round(y) < y1:
                r, c = cell_of(x, y, box, self.mag, place)
                if 0 <= r + dr < rows and 0 <= c + dc < cols:
                    out.append((r + dr, c + dc, glyph, rgb))

        pts = self.line_points
        if len(pts) == 2:
            (ax, ay), (bx, by) = pts
            n = max(int(max(abs(bx - ax), abs(by - ay))) // 3, 1)
            for t in np.linspace(0, 1, n + 1):
                put(ax + t * (bx - ax), ay + t * (by - ay), "·", LINE_RGB)
        for px, py in pts:
            put(px, py, "●", LINE_RGB)
        if self.mark is not None:
            for (dr, dc), g in zip(((-1, -1), (-1, 1), (1, -1), (1, 1)), "┌┐└┘", strict=True):
                put(*self.mark, g, MARK_RGB, dr, dc)
        if self.cross is not None:
            put(*self.cross, "┼", CROSS_RGB)
        return out

    def action_cross(self, dx: int, dy: int) -> None:
        self.app.cross_move(dx, dy)

    def action_cross_point(self) -> None:
        self.app.cross_point()


class ScaleRow(Widget):
    """One row under the body: a round-length bar at the fitted frame view's scale."""

    DEFAULT_CSS = "ScaleRow { height: 1; background: $panel-darken-1; }"

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.bar: tuple[int, float, str] | None = None
        self.note = ""

    def set_scale(self, pixel_m: float | None, region_px: int, cells: int) -> None:
        """`region_px` movie pixels across `cells` columns of the frame view."""
        self.bar = scale_bar_cells(pixel_m, region_px, cells)
        self.refresh()

    def render(self) -> Text:
        t = Text(no_wrap=True, overflow="crop")
        if self.bar is None:
            t.append(" frame view: no scale bar fits", "dim")
            return t
        n, _, label = self.bar
        t.append(" " + "\u2501" * n, "bold")
        t.append(f" {label} (frame view)")
        return t
