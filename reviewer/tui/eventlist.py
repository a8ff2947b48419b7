"""EventList: a virtualised list of events (Line API) that stays quick at 100,000 rows.

Only the visible rows are ever formatted. The first line holds the column titles (below the filter's
line when a filter is set); the lines under it show rows from ``scroll_y`` on. Rows are any objects
with the event-table attributes (event_id, frame, time_s, kind, score, status, label; x, y,
frame_end, note and cause when there).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from rich.segment import Segment
from rich.style import Style
from textual import events
from textual.binding import Binding
from textual.geometry import Region, Size
from textual.message import Message
from textual.scroll_view import ScrollView
from textual.strip import Strip

from reviewer.store.table import CAUSE_WORDS

# name -> (title, width, right-aligned, index in row_cells); width 0: takes the room left
COLUMNS = {
    "id": ("id", 8, False, 6), "frame": ("frame", 7, True, 0), "time": ("time s", 10, True, 1),
    "kind": ("kind", 11, False, 2), "score": ("score", 6, True, 3),
    "status": ("status", 10, False, 4), "label": ("label", 12, False, 5),
    "place": ("x, y", 11, True, 7), "dur": ("dur fr", 7, True, 8), "note": ("note", 0, False, 9),
}
SHOWN_ORDER = ("id", "frame", "time", "kind", "score", "status", "label", "place", "dur", "note")
ALWAYS = ("id", "frame", "status", "label")  # a narrow list shows these (the label shrinks to fit)
BY_NEED = ("kind", "note", "place", "dur", "time", "score")  # added while they fit
NOTE_MIN = 12
LABEL_MIN = 6


def cause_text(event: object) -> str:
    """What disturbed the whole field, for a `global` event: blank, beam step, stage jump or
    unknown; '' for other kinds or when the session does not know."""
    if str(getattr(event, "kind", "") or "") != "global":
        return ""
    cause = str(getattr(event, "cause", "") or "").strip().lower()
    return CAUSE_WORDS.get(cause, cause)  # store/table.py: one set of words for every screen


def column_widths(width: int) -> dict[str, int]:
    """{column: width} that fit `width`: the ALWAYS ones (the label shrunk, or left out, when even
    they do not fit), then BY_NEED while they fit; the note, when shown, takes the rest."""
    widths = {c: COLUMNS[c][1] for c in ALWAYS}
    over = sum(widths.values()) - width
    if over > 0:
        widths["label"] -= over
        if widths["label"] < LABEL_MIN:
            del widths["label"]
    used = sum(widths.values())
    for name in BY_NEED:
        need = COLUMNS[name][1] or NOTE_MIN
        if used + need <= width:
            widths[name] = COLUMNS[name][1]
            used += need
    if "note" in widths:
        widths["note"] = width - used + NOTE_MIN
    return widths


def choose_columns(width: int) -> list[str]:
    """The columns that fit `width`, in SHOWN_ORDER."""
    widths = column_widths(width)
    return [c for c in SHOWN_ORDER if c in widths]


HEADER_STYLE = Style.parse("bold #c8d3de on #1b2430")
FILTER_STYLE = Style.parse("bold #1b2430 on #f0b43c")
ROW_STYLE = Style.parse("#c8d3de")
CURSOR_STYLE = Style.parse("#ffffff on #2f5580")
STATUS_STYLES = {
    "candidate": Style.parse("#f0b43c"),
    "accepted": Style.parse("#52c987"),
    "rejected": Style.parse("#9a6a6a"),
    "disputed": Style.parse("#d77bd7"),
}


def _num(value: object, fmt: str) -> str:
    if value is None:
        return ""
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return str(value)
    return "" if math.isnan(v) else format(v, fmt)


def _place(event: object) -> str:
    x, y = getattr(event, "x", None), getattr(event, "y", None)
    return "" if x is None or y is None else f"{_num(x, '.0f')}, {_num(y, '.0f')}"


def _duration(event: object) -> str:
    frame, end = getattr(event, "frame", None), getattr(event, "frame_end", None)
    return "" if frame is None or end is None else str(int(end) - int(frame) + 1)


def row_cells(event: object, time_decimals: int = 4) -> list[str]:
    """The displayed text of one event: frame, time, kind, score, status, label, then id, place
    (x, y), duration in frames, note. A global event shows its cause as its kind (blank, beam step,
    stage jump, unknown). A decision whose event a new scan of a changed movie no longer finds
    shows "·orph" after its kind."""
    frame = getattr(event, "frame", None)
    return [
        "" if frame is None else str(int(frame)),
        _num(getattr(event, "time_s", None), f".{time_decimals}f"),
        (cause_text(event) or str(getattr(event, "kind", "") or ""))
        + ("·orph" if getattr(event, "source", None) == "orphaned" else ""),
        _num(getattr(event, "score", None), ".3g"),
        str(getattr(event, "status", "") or ""),
        str(getattr(event, "label", "") or ""),
        str(getattr(event, "event_id", "") or ""),
        _place(event),
        _duration(event),
        " ".join(str(getattr(event, "note", "") or "").split()),
    ]


class EventList(ScrollView, can_focus=True):
    """Events one per line with a cursor; Enter or a click posts ``EventList.Chosen``.

    A filter (``set_filter``) shows only the rows it passes; its name then heads the list on a line of
    its own above the column titles."""

    DEFAULT_CSS = """
    EventList { overflow-x: hidden; overflow-y: auto; height: 1fr; }
    """
    BINDINGS = [
        Binding("up", "cursor(-1)", "Up", show=False, id="eventlist.up"),
        Binding("down", "cursor(1)", "Down", show=False, id="eventlist.down"),
        Binding("pageup", "page(-1)", "Page up", show=False, id="eventlist.page_up"),
        Binding("pagedown", "page(1)", "Page down", show=False, id="eventlist.page_down"),
        Binding("home", "jump(0)", "First", show=False, id="eventlist.first"),
        Binding("end", "jump(-1)", "Last", show=False, id="eventlist.last"),
        Binding("enter", "choose", "Go to event", show=False, id="eventlist.choose"),
    ]

    class Chosen(Message):
        """The user chose the event ``event_id`` (Enter or click)."""

        def __init__(self, event_id: str) -> None:
            super().__init__()
            self.event_id = event_id

    def __init__(self, *, name: str | None = None, id: str | None = None,
                 classes: str | None = None) -> None:
        super().__init__(name=name, id=id, classes=classes)
        self._all: list[object] = []
        self._rows: list[object] = []  # the rows shown: all, or those the filter passes
        self._filter = None
        self.filter_name = ""
        self.time_decimals = 4
        self._index: dict[int, int] | None = None
        self._cursor = 0
        self._cache: dict[int, list[str]] = {}
        self._cols_for = -1
        self._cols_cache: list[tuple[int, int, bool, int]] = []
        self._titles: list[str] = []
        self._status_col: tuple[int, int, bool, int] | None = None

    # ----- data --------------------------------------------------------------------------------
    def set_rows(self, events: Sequence[object]) -> None:
        """Replace all rows (kept as given; formatted only when shown). The same events in the same
        order (a decision changes one in place) repaint only the shown rows whose text changed."""
        events = list(events)
        same = (self._filter is None and self.is_mounted and len(events) == len(self._all)
                and all(a is b for a, b in zip(events, self._all, strict=True)))
        self._all = events
        if not same:
            self._apply_filter()
            return
        self._rows = events
        old, self._cache = self._cache, {}
        top = round(self.scroll_y)
        for row in range(top, min(top + self.size.height - self._head, len(events))):
            cells = self._cache[row] = row_cells(events[row], self.time_decimals)
            if old.get(row) != cells:
                self._refresh_row(row)

    def set_filter(self, name: str = "", test=None) -> None:
        """Show only the rows for which test(row) is true, headed by `name`; no test: every row."""
        self._filter = test
        self.filter_name = name if test is not None else ""
        self._cursor = 0
        self._apply_filter()

    def _apply_filter(self) -> None:
        test = self._filter
        self._rows = self._all if test is None else [e for e in self._all if test(e)]
        self._index = None
        self._cache.clear()
        self._cursor = min(self._cursor, max(len(self._rows) - 1, 0))
        self.virtual_size = Size(self.size.width, len(self._rows) + self._head)
        self.refresh()

    @property
    def _head(self) -> int:
        """Lines above the first row: the column titles, and the filter's line when one is set."""
        return 2 if self._filter is not None else 1

    @property
    def total_count(self) -> int:
        return len(self._all)

    def update_event(self, event: object) -> bool:
        """Redraw one changed event in place (same id); False when its id is not listed."""
        row = self._id_index().get(str(event.event_id))  # type: ignore[attr-defined]
        if row is None:
            return False
        if self._rows is not self._all:
            self._all = [event if e is self._rows[row] else e for e in self._all]
        self._rows[row] = event
        self._cache.pop(row, None)
        self.refresh()
        return True

    @property
    def row_count(self) -> int:
        return len(self._rows)

    @property
    def cursor_row(self) -> int:
        return self._cursor

    @property
    def cursor_event_id(self) -> str | None:
        return str(self._rows[self._cursor].event_id) if self._rows else None  # type: ignore

    def select_event(self, event_id: str) -> bool:
        """Move the cursor to the event and scroll it into view; False when not listed."""
        row = self._id_index().get(str(event_id))
        if row is None:
            return False
        self._move_to(row)
        return True

    def _id_index(self) -> dict[str, int]:
        if self._index is None:
            self._index = {str(e.event_id): i for i, e in enumerate(self._rows)}  # type: ignore
        return self._index

    # ----- cursor ------------------------------------------------------------------------------
    def _page_rows(self) -> int:
        return max(self.size.height - self._head - 1, 1)

    def _move_to(self, row: int) -> None:
        if not self._rows:
            return
        before, self._cursor = self._cursor, min(max(row, 0), len(self._rows) - 1)
        top = round(self.scroll_y)
        visible = self._page_rows() + 1
        if self._cursor < top:
            self.scroll_to(y=self._cursor, animate=False, immediate=True)
        elif self._cursor >= top + visible:
            self.scroll_to(y=self._cursor - visible + 1, animate=False, immediate=True)
        else:  # no scroll: only the rows the cursor left and reached are drawn again
            if self._cursor != before:
                self._refresh_row(before)
                self._refresh_row(self._cursor)
            return
        self.refresh()

    def _refresh_row(self, row: int) -> None:
        """Repaint one row where it is shown (nothing when it is scrolled out of view)."""
        y = self._head + row - round(self.scroll_y)
        if self._head <= y < self.size.height:
            self.refresh(Region(0, y, self.size.width, 1))

    def action_cursor(self, delta: int) -> None:
        self._move_to(self._cursor + delta)

    def action_page(self, direction: int) -> None:
        self._move_to(self._cursor + direction * self._page_rows())

    def action_jump(self, row: int) -> None:
        self._move_to(row if row >= 0 else len(self._rows) - 1)

    def action_choose(self) -> None:
        if self._rows:
            self.post_message(self.Chosen(self.cursor_event_id))  # type: ignore[arg-type]

    def on_click(self, event: events.Click) -> None:
        if event.y >= self._head:
            row = round(self.scroll_y) + event.y - self._head
            if row < len(self._rows):
                self._move_to(row)
                self.action_choose()

    # ----- drawing -----------------------------------------------------------------------------
    def _columns_at(self, width: int) -> list[tuple[int, int, bool, int]]:
        """(start, width, right-aligned, cell index) of each shown column at this width."""
        if self._cols_for != width:
            out, x = [], 0
            widths = column_widths(width)
            names = [c for c in SHOWN_ORDER if c in widths]
            for name in names:
                _, _, right, idx = COLUMNS[name]
                w = widths[name]
                out.append((x, w, right, idx))
                x += w
            self._cols_cache = out
            self._cols_for = width
            self._titles = [COLUMNS[n][0] for n in names]
            self._status_col = next((c for c in out if c[3] == 4), None)
        return self._cols_cache

    def _fit(self, cells: list[str], width: int) -> str:
        parts = []
        for _, w, right, idx in self._columns_at(width):
            c = cells[idx]
            c = (c[:w - 2] + "…" if w > 2 else c[:w - 1]) if len(c) >= w else c
            parts.append(c.rjust(w - 1) + " " if right else c.ljust(w))
        return "".join(parts)[:width].ljust(width)

    def render_line(self, y: int) -> Strip:
        width = self.scrollable_content_region.width
        layout = self._columns_at(width)
        if y == 0 and self._filter is not None:
            text = f" {self.filter_name}: {len(self._rows)} of {len(self._all)}"
            return Strip([Segment(text[:width].ljust(width), FILTER_STYLE)], width)
        if y == self._head - 1:
            titles = [""] * 10
            for (_, _, _, idx), title in zip(layout, self._titles, strict=True):
                titles[idx] = title
            return Strip([Segment(self._fit(titles, width), HEADER_STYLE)], width)
        row = round(self.scroll_y) + y - self._head
        if row >= len(self._rows):
            return Strip.blank(width, ROW_STYLE)
        cells = self._cache.get(row)
        if cells is None:
            if len(self._cache) > 2000:
                self._cache.clear()
            cells = self._cache[row] = row_cells(self._rows[row], self.time_decimals)
        text = self._fit(cells, width)
        if row == self._cursor:
            return Strip([Segment(text, CURSOR_STYLE)], width)
        if self._status_col is None:
            return Strip([Segment(text, ROW_STYLE)], width)
        a, w = self._status_col[0], self._status_col[1]
        status = STATUS_STYLES.get(cells[4], ROW_STYLE)
        segs = [Segment(text[:a], ROW_STYLE), Segment(text[a:a + w], status),
                Segment(text[a + w:], ROW_STYLE)]
        return Strip([s for s in segs if s.text], width)

    def on_resize(self) -> None:
        self.virtual_size = Size(self.size.width, len(self._rows) + self._head)
