"""The one-line status bar and the key bar under it, both fitted to the width by priority.

The status line keeps the frame number and the viewed event, and drops the other fields (time,
playback, pending count, scan, view) from the least needed when the terminal is narrow. The key bar
always ends with the help and quit keys and shows as many of the other footer keys as fit.
"""

from __future__ import annotations

import math

from rich.text import Text
from textual.keys import format_key
from textual.widget import Widget

from reviewer.tui.eventlist import cause_text

_STATUS_STYLE = {"accepted": "bold green", "rejected": "bold red", "candidate": "bold yellow",
                 "disputed": "bold magenta"}
# field -> priority (lower is kept longer); shown in the order of FIELD_ORDER
PRIORITY = {"frame": 0, "event": 1, "time": 2, "play": 3, "pending": 4, "scan": 5, "mode": 6}
FIELD_ORDER = ("frame", "time", "event", "pending", "mode", "play", "scan")
LONG_MOVIE_S = 60.0  # from this duration on, times are also shown as h:mm:ss.ss
SEP = " │ "


def decimals_for(period_s: float | None) -> int:
    """Digits after the point that tell one frame from the next (1 at 10 fps, 3 at 400 fps)."""
    if not period_s or period_s <= 0 or not math.isfinite(period_s):
        return 3
    return min(6, max(0, math.ceil(-math.log10(period_s))))


def clock(seconds: float) -> str:
    """h:mm:ss.ss (hundredths, rounded)."""
    cs = round(seconds * 100)
    h, rest = divmod(cs, 360_000)
    m, rest = divmod(rest, 6000)
    return f"{h}:{m:02d}:{rest // 100:02d}.{rest % 100:02d}"


def format_time(seconds: float | None, period_s: float | None = None,
                long_movie: bool = False) -> str:
    if seconds is None:
        return "time ?"
    text = f"{seconds:.{decimals_for(period_s)}f} s"
    return f"{text} ({clock(seconds)})" if long_movie else text


def fit_fields(fields: dict[str, Text], width: int) -> Text:
    """Join the fields in FIELD_ORDER with separators, dropping the least needed until it fits."""
    keep = [k for k in FIELD_ORDER if k in fields]

    def joined(names) -> Text:
        out = Text(" ", no_wrap=True, overflow="ellipsis")
        for i, name in enumerate(names):
            if i:
                out.append(SEP)
            out.append_text(fields[name])
        return out

    text = joined(keep)
    while text.cell_len > width and len(keep) > 1:
        keep.remove(max(keep, key=PRIORITY.__getitem__))
        text = joined(keep)
    text.truncate(max(width, 1), overflow="ellipsis")
    return text


class StatusLine(Widget):
    """Redrawn in place (refresh only, no layout) when a key changed what it says."""

    DEFAULT_CSS = "StatusLine { height: 1; }"

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self._fields: dict[str, Text] = {}
        self.period_s: float | None = None
        self.long_movie = False

    def show(self, frame: int, n_frames: int, time_s: float | None, event, extras: dict) -> None:
        f: dict[str, Text] = {"frame": Text(f"frame {frame}/{n_frames - 1}", "bold"),
                              "time": Text(format_time(time_s, self.period_s, self.long_movie))}
        ev = Text()
        if event is None:
            ev.append(f"no event at frame {frame}", "dim")
        else:
            ev.append(f"{event.event_id} {event.kind} ")
            cause = extras.get("cause") or cause_text(event)
            if cause:
                ev.append(f"({cause}) ")
            ev.append(event.status, _STATUS_STYLE.get(event.status, ""))
            if event.label:
                ev.append(f" '{event.label}'", "italic")
            if getattr(event, "note", None):
                ev.append(" ✎", "bold")
            if getattr(event, "source", None) == "orphaned":
                ev.append(" orphaned (not in the new scan)", "bold magenta")
        f["event"] = ev
        f["pending"] = Text(f"{extras.get('pending', 0)} pending")
        for key in ("mode", "play", "scan"):
            if extras.get(key):
                f[key] = Text(str(extras[key]))
        if f != self._fields:  # the same line is not sent to the terminal again
            self._fields = f
            self.refresh()

    @property
    def plain(self) -> str:
        """Every field (as on a wide terminal)."""
        return fit_fields(self._fields, 10_000).plain

    @property
    def shown(self) -> str:
        return self.render().plain

    def render(self) -> Text:
        return fit_fields(self._fields, self.size.width or 80)


class KeyBar(Widget):
    """The footer: the key map's footer keys; help and quit are always shown, at the right."""

    DEFAULT_CSS = "KeyBar { height: 1; }"
    ALWAYS = ("help", "quit")

    def __init__(self, keymap, **kwargs) -> None:
        super().__init__(**kwargs)
        self.items = [(format_key(s.keys[0]), s.footer, s.id) for s in keymap.specs if s.footer]

    def render(self) -> Text:
        width = self.size.width or 80

        def item(key: str, name: str) -> Text:
            t = Text(no_wrap=True)
            t.append(f" {key} ", "bold reverse")
            t.append(f" {name} ")
            return t

        tail = Text(no_wrap=True)
        for key, name, bid in self.items:
            if bid in self.ALWAYS:
                tail.append_text(item(key, name))
        out = Text(no_wrap=True, overflow="crop")
        for key, name, bid in self.items:
            if bid in self.ALWAYS:
                continue
            piece = item(key, name)
            if out.cell_len + piece.cell_len + tail.cell_len > width:
                break
            out.append_text(piece)
        out.append(" " * max(0, width - out.cell_len - tail.cell_len))
        out.append_text(tail)
        out.truncate(width)
        return out
