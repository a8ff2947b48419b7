"""Timeline: the whole movie's per-frame score as bars (max per column), marks for events by
status, and the current position; zooms around the position."""

from __future__ import annotations

import numpy as np
from rich.segment import Segment
from rich.style import Style
from textual import events
from textual.message import Message
from textual.strip import Strip
from textual.widget import Widget

BARS = " \u2581\u2582\u2583\u2584\u2585\u2586\u2587\u2588"  # eighths, lower one eighth .. full block
# status -> (glyph, colour); earlier entries win when several events share a column
MARKS = {
    "disputed": ("\u25c8", "#d77bd7"),  # diamond with a dot, magenta: reviewers disagreed (merge)
    "candidate": ("\u25c7", "#f0b43c"),  # white diamond, amber: still to decide
    "accepted": ("\u25c6", "#52c987"),  # black diamond, green
    "rejected": ("\u00d7", "#b05a5a"),  # multiplication sign, muted red
}
BAR_STYLE = Style.parse("#7fa7c9 on #0e1216")
CURSOR_STYLE = Style.parse("#ffffff on #3d6690")
ROW_STYLE = Style.parse("on #0e1216")
MAX_ZOOM = 1024


def column_starts(n: int, cols: int) -> np.ndarray:
    """First frame of each of ``cols`` columns covering ``n`` frames (n >= cols)."""
    return (np.arange(cols) * n) // cols


def column_max(score: np.ndarray, cols: int) -> np.ndarray:
    """Per-column maximum of ``score`` over ``cols`` columns (NaN ignored; each frame repeated
    when there are fewer frames than columns)."""
    s = np.asarray(score, dtype=np.float64)
    n = len(s)
    if n == 0 or cols < 1:
        return np.zeros(max(cols, 0))
    if n < cols:
        return np.nan_to_num(s[(np.arange(cols) * n) // cols], nan=0.0)
    with np.errstate(invalid="ignore"):
        out = np.fmax.reduceat(s, column_starts(n, cols))
    return np.nan_to_num(out, nan=0.0)


def bar_levels(values: np.ndarray, scale: float, levels: int) -> np.ndarray:
    """Bar height 0..levels for each value, values >= scale giving full bars."""
    if scale <= 0:
        return np.zeros(len(values), dtype=int)
    frac = np.clip(np.asarray(values, dtype=np.float64) / scale, 0.0, 1.0)
    return np.ceil(frac * levels - 1e-9).astype(int)


class Timeline(Widget):
    """Score bars over the movie (rows above) and event marks plus the position (last row)."""

    DEFAULT_CSS = """
    Timeline { height: 3; width: 1fr; background: #0e1216; }
    """

    class Seek(Message):
        """The user clicked the timeline at ``frame``."""

        def __init__(self, frame: int) -> None:
            super().__init__()
            self.frame = frame

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._score = np.zeros(0, dtype=np.float32)
        self._scale = 0.0
        self._n = 0
        self._mark_frames = np.zeros(0, dtype=np.int64)
        self._mark_status: list[str] = []
        self._position = 0
        self._zoom = 1
        self._lines: list[Strip] | None = None

    # ----- data --------------------------------------------------------------------------------
    def set_scores(self, score: np.ndarray, *, n_frames: int | None = None,
                   scale: float | None = None) -> None:
        """Per-frame scores; ``scale`` is the score drawn as a full bar (default: the maximum)."""
        self._score = np.asarray(score, dtype=np.float32)
        self._n = max(len(self._score), n_frames or 0)
        finite = self._score[np.isfinite(self._score)]
        self._scale = float(scale) if scale is not None else float(finite.max(initial=0.0))
        self._invalidate()

    def set_marks(self, frames: np.ndarray, statuses: list[str]) -> None:
        if len(frames) != len(statuses):
            raise ValueError("frames and statuses differ in length")
        frames = np.asarray(frames, dtype=np.int64)
        if list(statuses) == self._mark_status and np.array_equal(frames, self._mark_frames):
            return  # nothing to draw again
        self._mark_frames = frames
        self._mark_status = list(statuses)
        self._invalidate()

    def set_position(self, frame: int) -> None:
        if int(frame) != self._position:
            self._position = int(frame)
            self._invalidate()

    @property
    def position(self) -> int:
        return self._position

    def zoom_in(self) -> None:
        self._zoom = min(self._zoom * 2, MAX_ZOOM)
        self._invalidate()

    def zoom_out(self) -> None:
        self._zoom = max(self._zoom // 2, 1)
        self._invalidate()

    def view_range(self) -> tuple[int, int]:
        """(start, stop) frames shown, centred on the position when zoomed in."""
        n = self._n
        span = max(1, -(-n // self._zoom))
        start = min(max(self._position - span // 2, 0), max(n - span, 0))
        return start, start + span

    def frame_at(self, col: int) -> int:
        start, stop = self.view_range()
        cols = max(self.size.width, 1)
        return start + (min(max(col, 0), cols - 1) * (stop - start)) // cols

    def _column_of(self, frames: np.ndarray, start: int, stop: int, cols: int) -> np.ndarray:
        return ((frames - start) * cols) // max(stop - start, 1)

    # ----- drawing -----------------------------------------------------------------------------
    def _invalidate(self) -> None:
        self._lines = None
        self.refresh()

    def _build(self, rows: int, cols: int) -> list[Strip]:
        start, stop = self.view_range()
        bar_rows = max(rows - 1, 1)
        cursor = -1
        if start <= self._position < stop:
            cursor = int(self._column_of(np.array([self._position]), start, stop, cols)[0])
        levels = bar_levels(column_max(self._score[start:stop], cols), self._scale, 8 * bar_rows)
        lines = []
        for r in range(bar_rows):
            base = 8 * (bar_rows - 1 - r)  # eighths below this row
            cells = np.clip(levels - base, 0, 8)
            text = "".join(BARS[c] for c in cells.tolist())
            lines.append(self._with_cursor(text, BAR_STYLE, cursor))
        if rows > 1:
            lines.append(self._marks_line(start, stop, cols, cursor))
        return lines[:rows]

    def _with_cursor(self, text: str, style: Style, cursor: int) -> Strip:
        if not 0 <= cursor < len(text):
            return Strip([Segment(text, style)], len(text))
        segs = [Segment(text[:cursor], style), Segment(text[cursor], CURSOR_STYLE),
                Segment(text[cursor + 1:], style)]
        return Strip([s for s in segs if s.text], len(text))

    def _marks_line(self, start: int, stop: int, cols: int, cursor: int) -> Strip:
        cells: list[Segment] = [Segment(" ", ROW_STYLE)] * cols
        inside = (self._mark_frames >= start) & (self._mark_frames < stop)
        where = self._column_of(self._mark_frames[inside], start, stop, cols).tolist()
        statuses = [s for s, keep in zip(self._mark_status, inside.tolist(), strict=True) if keep]
        rank = {name: i for i, name in enumerate(MARKS)}
        best: dict[int, str] = {}
        for col, status in zip(where, statuses, strict=True):
            if status in MARKS and rank[status] < rank.get(best.get(col, ""), len(rank)):
                best[col] = status
        for col, status in best.items():
            glyph, colour = MARKS[status]
            cells[col] = Segment(glyph, Style.parse(f"{colour} on #0e1216"))
        if 0 <= cursor < cols:
            glyph = cells[cursor].text if cursor in best else "\u25b2"  # black up-pointing triangle
            fg = MARKS[best[cursor]][1] if cursor in best else "#ffffff"
            cells[cursor] = Segment(glyph, Style.parse(f"bold {fg} on #3d6690"))
        return Strip(cells, cols).simplify()  # runs of blank cells: one escape sequence each

    def render_line(self, y: int) -> Strip:
        rows, cols = self.size.height, self.size.width
        if self._lines is None or len(self._lines) != rows or (
                self._lines and self._lines[0].cell_length != cols):
            self._lines = self._build(rows, cols)
        return self._lines[y] if 0 <= y < len(self._lines) else Strip.blank(cols, ROW_STYLE)

    def on_resize(self) -> None:
        self._invalidate()

    def on_click(self, event: events.Click) -> None:
        if self._n:
            self.post_message(self.Seek(self.frame_at(event.x)))
