"""FrameView: a movie frame drawn with half-block cells, fast enough for playback.

The whole pane is rendered to strips once per change of frame, mode, contrast, zoom, mark or size;
``render_line`` only returns cached strips. Modes: "frame" (the frame), "change" (mean of the frames
after minus the mean of the frames before, signed colours) and "average" (mean of the window).

Frames are reduced to the pane's resolution as they are read (block means, tui/frames_cache.py), kept
in an LRU with the window sums, so one step of the cursor reads one new frame per window; the
percentiles and the noise of the change view are taken on the reduced image, the one that is shown.
The neighbouring frames are reduced in a worker thread while the user looks.

Only the rows that differ from the last drawing are repainted (``_exchange_repaint_regions``): a
decision key leaves the frame as it was and sends nothing of it to the terminal, a step repaints the
rows of the image and not its margins. Every byte written is also a byte the terminal (tmux) has to
parse before the keypress shows.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from rich.color import Color
from rich.segment import Segment
from rich.style import Style
from scipy import ndimage
from textual.filter import ANSIToTruecolor, LineFilter
from textual.geometry import Region
from textual.strip import Strip
from textual.widget import Widget

from reviewer.tui import frame_pixels, render
from reviewer.tui.frames_cache import Grid, ReducedFrames, grid_for, neighbours

MODES = ("frame", "change", "average")
GRAPHICS = ("blocks", "kitty", "sixel")
CLIPS = (0.0, 0.05, 0.1, 0.25, 0.5, 1.0, 2.0, 5.0, 10.0, 20.0)  # % clipped at each end
DEFAULT_CLIP = CLIPS.index(0.5)
# The change view is scaled in units of its own noise: the contrast steps give the number of noise
# SDs (robust, 1.4826·MAD) at full colour, so unchanged pixels stay near grey and a real change shows.
CHANGE_SDS = (12.0, 10.0, 8.0, 7.0, 6.0, 5.0, 4.0, 3.0, 2.5, 2.0)
CHANGE_SMOOTH_PX = 1.0  # Gaussian sigma: shot noise is per pixel, a growth front spans several
MAX_ZOOM = 64.0
MARK_RGB = frame_pixels.MARK_RGB  # pink: stands out on greys, blue and amber
MARK_GLYPHS = ("\u250c", "\u2510", "\u2514", "\u2518")  # corners around the marked spot


def _stack(a: np.ndarray | None) -> list[np.ndarray]:
    if a is None:
        return []
    a = np.asarray(a)
    return list(a[None] if a.ndim == 2 else a)


class _Frames:
    """A few frames given as arrays, read like a movie (for ``FrameView.show``)."""

    def __init__(self, frames: list[np.ndarray]) -> None:
        self._frames = frames
        self.n_frames = len(frames)
        self.shape = frames[0].shape

    def frame(self, i: int) -> np.ndarray:
        return self._frames[i]


class FrameView(frame_pixels.TruePixels, Widget):
    """Shows one frame (or a change / average of a few) fitted to the pane, aspect kept."""

    DEFAULT_CSS = """
    FrameView { width: 1fr; height: 1fr; background: #000000; }
    """

    def __init__(self, *, system: str | None = None, prefetch: bool = True,
                 graphics: str = "blocks", cell_px: tuple[int, int] | None = None,
                 name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        if graphics not in GRAPHICS:
            raise ValueError(f"graphics must be one of {GRAPHICS}, got {graphics!r}")
        self.graphics = graphics  # "blocks" (half-block cells) or a true-pixel protocol
        self._cell_px = cell_px  # (width, height) of a cell in pixels; asked of the tty if None
        self._sequence = ""  # the true-pixel escape sequence of the last build
        self._system_override = system
        self._prefetch = prefetch  # reduce neighbouring frames in a worker thread
        self._mode = "frame"
        self._source = None  # a movie, or _Frames for show()
        self._frames: ReducedFrames | None = None
        self._index = 0
        self._window = 0
        self._direction = 1
        self._shape: tuple[int, int] | None = None  # (height, width) of a frame
        self._view: np.ndarray | None = None
        self._view_key: tuple | None = None
        self._limits: dict[int, tuple[float, float]] = {}
        self._pinned: dict[int, tuple[float, float]] | None = None  # pin_limits(): fixed contrast
        self._clip = DEFAULT_CLIP
        self._zoom = 1.0
        self._centre: tuple[float, float] | None = None  # (x, y) in frame pixels
        self._mark: tuple[float, float] | None = None
        self._strips: list[Strip] | None = None
        self._built_size: tuple[int, int] | None = None
        # what the last half-block build drew, for repainting only the rows that changed:
        # (palette, system, canvas of palette indices, marked cell); None when unknown
        self._drawn: tuple | None = None
        self._row_changed: np.ndarray | None = None  # rows of the last build that differ from the one before
        self.unreadable: str | None = None  # why the frame could not be shown (placeholder drawn)
        self._covered = False  # another screen is over ours (the Kitty picture was taken away)

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
    def change_sds(self) -> float:
        """Noise standard deviations at which the what-changed view reaches full colour."""
        return CHANGE_SDS[self._clip]

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
        b, a = _stack(before), _stack(after)
        source = _Frames([*b, frame, *a])
        self._use_source(source, ReducedFrames(source, prefetch=False))
        self._index, self._window, self._direction = len(b), max(len(b), len(a)), 1
        self._new_view()

    def show_at(self, movie, index: int, *, window: int = 0) -> None:
        """Show frame ``index`` of a movie (anything with ``frame(i)``, ``n_frames`` and
        ``shape``); the change and average views use ``window`` frames either side. Frames are
        read and reduced here (raising what the movie raises when the frame cannot be read) when
        the pane has a size, else when it is drawn."""
        index = int(index)
        if (movie is self._source and index == self._index and int(window) == self._window
                and self._view_key is not None and self.unreadable is None):
            return  # shown already (a decision key shows the frame again): nothing to draw
        if movie is not self._source:
            self._use_source(movie, ReducedFrames(movie, prefetch=self._prefetch))
        if index != self._index:
            self._direction = 1 if index > self._index else -1
        self._index, self._window = index, int(window)
        self._new_view()
        if self.size.width and self.size.height:
            self._ensure_view(self.size.height, self.size.width)

    def _use_source(self, source, frames: ReducedFrames) -> None:
        if self._frames is not None:
            self._frames.close()
        shape = tuple(int(v) for v in source.shape[:2])
        if self._shape != shape:
            self._zoom, self._centre = 1.0, None
        self._source, self._frames, self._shape = source, frames, shape
        self.unreadable = None

    def on_mount(self) -> None:
        if self.graphics == "kitty":  # a Kitty picture lies over the text: covered, it must go
            self.app.screen_change_signal.subscribe(self, self._screen_changed)

    def _screen_changed(self, screen) -> None:
        """Another screen (a dialog, the help) came over ours: take the picture away (the
        terminal would keep showing it over the dialog); ours is back: draw it again."""
        if screen is not self.screen:
            from reviewer.tui.graphics import kitty_delete

            self._sequence = kitty_delete()
            self._send_graphics()
            self._covered = True
        elif self._covered:
            self._covered = False
            self._invalidate()  # built again, and the picture sent after the repaint

    def on_unmount(self) -> None:
        if self._frames is not None:
            self._frames.close()
        if self.graphics == "kitty":
            from reviewer.tui.graphics import kitty_delete

            self._sequence = kitty_delete()
            self._send_graphics()

    def show_unreadable(self, why: str) -> None:
        """Draw a hatched placeholder saying why, instead of a frame that could not be read."""
        self.unreadable = " ".join(str(why).split())
        self._invalidate()

    def set_mark(self, x: float | None, y: float | None = None) -> None:
        """Mark a spot in frame pixels; ``set_mark(None)`` removes it."""
        mark = None if x is None or y is None else (float(x), float(y))
        if mark != self._mark:
            self._mark = mark
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
        if self._shape is None:
            return
        h, w = self._shape
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
        self._view_key = None
        self.unreadable = None
        self._invalidate()

    def _invalidate(self) -> None:
        self._strips = None
        self.refresh()

    # ----- computing the image -----------------------------------------------------------------
    @property
    def frame_shape(self) -> tuple[int, int] | None:
        """(height, width) of the frames shown, None before the first."""
        return self._shape

    @property
    def grid(self) -> Grid | None:
        """The region and block size the current view was reduced on."""
        return None if self._view_key is None else self._view_key[2]

    def _target(self, rows: int, cols: int) -> tuple[int, int, int, int]:
        y0, y1, x0, x1 = self.view_region()
        return render.fit(y1 - y0, x1 - x0, max(rows, 1), max(cols, 1))

    def _out_size(self, rows: int, cols: int) -> tuple[int, int]:
        """Pixels the view is drawn with: half-block pixels, or the pane's true pixels."""
        if self.graphics == "blocks":
            return self._target(rows, cols)[:2]
        return self._pixel_placement(rows, cols)[:2]

    def _ensure_view(self, rows: int, cols: int) -> np.ndarray | None:
        """The reduced image of the current mode for a pane of rows x cols cells."""
        if self._frames is None:
            return None
        out_h, out_w = self._out_size(rows, cols)
        grid = grid_for(self.view_region(), out_h, out_w)
        key = (self._mode, self._index, grid)
        if key == self._view_key:
            return self._view
        frames, i, n = self._frames, self._index, self._window
        small = frames.get(i, grid)
        if self._mode == "frame":
            view = small
        else:
            b_sum, nb = frames.window_sum("before", i - n, i, grid)
            a_sum, na = frames.window_sum("after", i + 1, i + 1 + n, grid)
            if self._mode == "average":
                total = small.astype(np.float64)
                for part in (b_sum, a_sum):
                    if part is not None:
                        total = total + part
                view = (total / (1 + nb + na)).astype(np.float32)
            else:
                a = small if a_sum is None else a_sum / na
                b = small if b_sum is None else b_sum / nb
                diff = np.nan_to_num(np.asarray(a - b, dtype=np.float32))
                sigma = CHANGE_SMOOTH_PX / grid.k  # one movie pixel, in reduced pixels
                view = ndimage.gaussian_filter(diff, sigma) if sigma >= 0.3 else diff
        self._view, self._view_key, self._limits = view, key, {}
        if not isinstance(self._source, _Frames):
            now, later = neighbours(i, self._direction, n, self._mode)
            # after the repaint: the worker must not take the CPU from drawing this frame
            self.call_after_refresh(frames.prefetch, now, grid, later)
        return view

    def view_image(self) -> np.ndarray | None:
        """The 2-D image of the current mode over the visible region, reduced to the pane's
        resolution (block means; float32), before contrast."""
        if self._frames is None:
            return None
        rows, cols = self.size.height, self.size.width
        if not (rows and cols):  # not laid out yet: full resolution
            assert self._shape is not None
            rows, cols = self._shape[0] // 2 + 1, self._shape[1]
        return self._ensure_view(rows, cols)

    def pin_limits(self, limits: dict[int, tuple[float, float]] | None) -> None:
        """Fixed display limits per contrast step (an index into CLIPS) for the frame and average
        views, kept over later frames until unpinned with None (the blink shows two images with one
        contrast)."""
        self._pinned = None if limits is None else dict(limits)
        self.refresh()

    def limits(self) -> tuple[float, float]:
        """Display limits of the current view: percentiles, or ±scale for the change view (both
        on the reduced image)."""
        view = self.view_image() if self._view_key is None else self._view
        if view is None:
            return 0.0, 1.0
        got = self._limits.get(self._clip)
        if self._pinned is not None and self._mode != "change":
            got = self._pinned.get(self._clip, got)
        if got is None:
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
        assert self._shape is not None
        h, w = self._shape
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
        if self._frames is None or rows < 1 or cols < 1:
            return canvas, (0, 0, 0, 0)
        place = self._target(rows, cols)
        out_h, out_w, top, left = place
        canvas[top:top + out_h, left:left + out_w] = self.indices(rows, cols, out_h, out_w)
        return canvas, place

    def indices(self, rows: int, cols: int, out_h: int, out_w: int) -> np.ndarray:
        """The view of a rows x cols pane resized to out_h x out_w pixels, as palette indices
        (grey, or the signed change palette) after the contrast."""
        small = render.resample(self._ensure_view(rows, cols), out_h, out_w)
        lo, hi = self.limits()
        if self._mode == "change":
            return render.signed_to_indices(small, hi)
        return render.to_indices(small, lo, hi)

    def mark_cell(self, place: tuple[int, int, int, int]) -> tuple[int, int] | None:
        """(row, col) of the cell holding the marked pixel, or None when not visible."""
        if self._mark is None or self._shape is None:
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
        previous, self._drawn, self._row_changed = self._drawn, None, None  # set by half-blocks
        if self.unreadable is None:
            try:
                canvas, place = self.canvas(rows, cols)
            except Exception as exc:  # noqa: BLE001 - any reader failure: say so in the pane
                self.unreadable = " ".join(f"frame {self._index}: {exc}".split())
        if self.unreadable is None and self.graphics != "blocks":
            try:
                region = self.content_region
                self._sequence = self.graphics_sequence(rows, cols, region.y, region.x)
            except Exception as exc:  # noqa: BLE001 - any reader failure: say so in the pane
                self.unreadable = " ".join(f"frame {self._index}: {exc}".split())
            else:
                if not self._covered:  # else sent when our screen is back (_screen_changed)
                    self.call_after_refresh(self._send_graphics)
                blank = Style.from_color(bgcolor=Color.from_rgb(0, 0, 0))
                return [Strip([Segment(" " * cols, blank)], cols) for _ in range(rows)]
        if self.unreadable is not None:
            if self.graphics == "kitty":  # the last picture would stay over the placeholder
                from reviewer.tui.graphics import kitty_delete

                self._sequence = kitty_delete()
                self.call_after_refresh(self._send_graphics)
            return render.placeholder_strips(f" UNREADABLE  {self.unreadable} ", rows, cols)
        system = self.system
        palette = "change" if self._mode == "change" else "grey"
        table = render.segment_table(palette, system)
        cell = self.mark_cell(place)
        self._note_drawn(previous, (palette, system, canvas, cell), rows)
        if cell is None:
            return render.image_to_strips(canvas, table, render.segment_ids(palette, system))
        lines = render.image_to_rows(canvas, table)
        r, c = cell
        glyphs = self._mark_segments(system)
        for seg, (dr, dc) in zip(glyphs, ((-1, -1), (-1, 1), (1, -1), (1, 1)), strict=True):
            if 0 <= r + dr < rows and 0 <= c + dc < cols:
                lines[r + dr][c + dc] = seg
        return [Strip(line, cols) for line in lines]

    def _note_drawn(self, last: tuple | None, drawn: tuple, rows: int) -> None:
        """Keep what this half-block build draws (palette, system, canvas, marked cell); mark the
        rows that differ from the build before it (``last``; None: every row)."""
        self._drawn = drawn
        palette, system, canvas, cell = drawn
        if last is None or last[:2] != (palette, system) or last[2].shape != canvas.shape:
            return
        changed = (last[2] != canvas).reshape(rows, 2, -1).any(axis=(1, 2))
        if last[3] != cell:  # the mark's corners sit on the rows above and below its cell
            for mark in (last[3], cell):
                if mark is not None:
                    for r in (mark[0] - 1, mark[0] + 1):
                        if 0 <= r < rows:
                            changed[r] = True
        self._row_changed = changed

    def _ensure_strips(self) -> list[Strip]:
        rows, cols = self.size.height, self.size.width
        if self._strips is None or self._built_size != (rows, cols):
            if self._built_size != (rows, cols):
                self._drawn = None
            self._strips = self._build(rows, cols)
            self._built_size = (rows, cols)
        return self._strips

    def _exchange_repaint_regions(self):
        """The regions Textual's compositor repaints for this widget (called just before it
        paints): a refresh of the whole pane becomes the runs of rows whose cells changed since
        the last build. Any other request, and a build with nothing to compare with, is kept."""
        regions = super()._exchange_repaint_regions()
        whole = self.outer_size.region
        if self._strips is not None or list(regions) != [whole] or self.graphics != "blocks":
            return regions
        self._ensure_strips()
        changed = self._row_changed
        self._row_changed = None
        if changed is None or len(changed) != whole.height:
            return regions
        runs = []
        ys = np.flatnonzero(changed)
        if len(ys):
            breaks = np.flatnonzero(np.diff(ys) > 1)
            for a, b in zip(np.r_[0, breaks + 1], np.r_[breaks, len(ys) - 1], strict=True):
                runs.append(Region(0, int(ys[a]), whole.width, int(ys[b] - ys[a] + 1)))
        return runs

    def render_line(self, y: int) -> Strip:
        strips = self._ensure_strips()
        return strips[y] if 0 <= y < len(strips) else Strip.blank(self.size.width)

    def on_resize(self) -> None:
        if self._built_size != (self.size.height, self.size.width):
            self._invalidate()  # else the layout's repaint already drew it at this size

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
