"""The one-line status bar: frame, time, current event, view, pending count, playback, scan."""

from __future__ import annotations

from rich.text import Text
from textual.widget import Widget

_STATUS_STYLE = {"accepted": "bold green", "rejected": "bold red", "candidate": "bold yellow"}


def _time(seconds: float | None) -> str:
    if seconds is None:
        return "time ?"
    if seconds < 60:
        return f"{seconds:.4f} s"
    m, s = divmod(seconds, 60)
    return f"{int(m)}:{s:07.4f}"


class StatusLine(Widget):
    """Redrawn in place (refresh only, no layout) on every key."""

    DEFAULT_CSS = "StatusLine { height: 1; }"

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self._text = Text("")

    def show(self, frame: int, n_frames: int, time_s: float | None, event, extras: dict) -> None:
        t = Text(no_wrap=True, overflow="ellipsis")
        t.append(f" frame {frame}/{n_frames - 1} ", "bold")
        t.append(f"{_time(time_s)} │ ")
        if event is None:
            t.append("no event", "dim")
        else:
            off = frame - event.frame
            where = "" if off == 0 else f" ({-off:+d} fr)"
            t.append(f"{event.event_id} {event.kind}{where} ")
            t.append(event.status, _STATUS_STYLE.get(event.status, ""))
            if event.label:
                t.append(f" '{event.label}'", "italic")
            if getattr(event, "source", None) == "orphaned":
                t.append(" orphaned (not in the new scan)", "bold magenta")
        t.append(f" │ {extras.get('pending', 0)} pending")
        for key in ("mode", "play", "scan"):
            if extras.get(key):
                t.append(f" │ {extras[key]}")
        self._text = t
        self.refresh()

    @property
    def plain(self) -> str:
        return self._text.plain

    def render(self) -> Text:
        return self._text
