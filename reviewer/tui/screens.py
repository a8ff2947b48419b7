"""Dialogs over the review screen: help (from the key map data), go to, confirm, terminal too small.

They are modal, so the review keys do nothing while one is open; escape closes each of them.
"""

from __future__ import annotations

import re

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Input, Static

_TIME = re.compile(r"^(?:(?:(\d+):)?(\d+):)?(\d+(?:\.\d*)?|\.\d+)\s*s?$")


def parse_seconds(text: str) -> float | None:
    """Seconds from "3.5s", "1:02.5" (m:ss) or "1:02:03.5" (h:mm:ss); None when it is not a time
    (a bare number is a frame, not a time). Minutes and seconds after a colon stay below 60."""
    t = text.strip().lower()
    m = _TIME.match(t)
    if not m or (":" not in t and not t.endswith("s")):
        return None
    hours, minutes, secs = m.group(1), m.group(2), float(m.group(3))
    if minutes is not None and (secs >= 60 or (hours is not None and int(minutes) >= 60)):
        return None
    return secs + 60 * int(minutes or 0) + 3600 * int(hours or 0)


def parse_goto(text: str, n_frames: int, times_s: np.ndarray | None, fps: float | None) -> int:
    """A frame from "1234" (frame number), "3.5s" (seconds), "1:02.5" (minutes:seconds) or
    "1:02:03.5" (hours:minutes:seconds)."""
    t = text.strip().lower()
    if not t:
        raise ValueError("type a frame number (1234) or a time (3.5s, 1:02:03.5)")
    if t.isdigit():
        frame = int(t)
    else:
        seconds = parse_seconds(t)
        if seconds is None:
            raise ValueError(f"not a frame or a time: {text.strip()!r} "
                             "(try 1234, 3.5s or 0:01:02.5)")
        if times_s is not None and len(times_s):
            period = float(np.median(np.diff(times_s))) if len(times_s) > 1 else 0.0
            if seconds > times_s[-1] + period:
                raise ValueError(f"{seconds:g} s is after the last frame ({times_s[-1]:g} s)")
            i = int(np.searchsorted(times_s, seconds))
            options = [j for j in (i - 1, i) if 0 <= j < len(times_s)]
            frame = min(options, key=lambda j: abs(times_s[j] - seconds))
        elif fps:
            frame = int(round(seconds * fps))
        else:
            raise ValueError("this movie has no timing (use --fps); give a frame number")
    if not 0 <= frame < n_frames:
        raise ValueError(f"frame {frame} is outside 0..{n_frames - 1}")
    return frame


class GoToScreen(ModalScreen[int | None]):
    """Ask for a frame or a time; dismisses with the frame, or None on escape."""

    BINDINGS = [Binding("escape", "cancel", "close", show=False)]
    AUTO_FOCUS = "Input"

    def __init__(self, n_frames: int, time_of, times_s: np.ndarray | None,
                 fps: float | None) -> None:
        super().__init__()
        self.n_frames, self.times_s, self.fps = n_frames, times_s, fps
        self.time_of = time_of

    def compose(self) -> ComposeResult:
        from reviewer.tui.status import LONG_MOVIE_S, format_time

        last = self.time_of(self.n_frames - 1)
        period = 1.0 / self.fps if self.fps else None
        span = ""
        if last is not None:
            span = f" or a time up to {format_time(last, period, last >= LONG_MOVIE_S)}"
        with Vertical(classes="dialog"):
            yield Static(f"Go to a frame (0..{self.n_frames - 1}){span}:", classes="title")
            yield Input(placeholder="1234, 3.5s or 0:01:02.5", id="goto-input")
            yield Static("", id="goto-error", classes="error")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        try:
            frame = parse_goto(event.value, self.n_frames, self.times_s, self.fps)
        except ValueError as exc:
            self.query_one("#goto-error", Static).update(str(exc))
            return
        self.dismiss(frame)

    def action_cancel(self) -> None:
        self.dismiss(None)


class ConfirmScreen(ModalScreen[bool]):
    """A yes/no question: y confirms; n or escape cancels."""

    BINDINGS = [Binding("y", "answer(True)", "yes"), Binding("n", "answer(False)", "no"),
                Binding("escape", "answer(False)", "cancel", show=False)]

    def __init__(self, question: str) -> None:
        super().__init__()
        self.question = question

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(self.question, classes="title")
            yield Static("y: yes    n or escape: no", classes="hint")

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)


HELP_COLUMNS_FROM = 110  # terminal columns from which the help is laid out in two columns


def _label_line(specs, labels: list[str]) -> tuple[str, str]:
    """One line for the nine label keys: their keys, and which label each gives."""
    keys = " ".join(s.display for s in specs)
    if keys == "1 2 3 4 5 6 7 8 9":
        keys = "1…9"
    names = []
    for s in specs:
        k = int(s.id.rsplit("_", 1)[1])
        if k <= len(labels):
            names.append(f"{s.display} {labels[k - 1]}")
    desc = ("label and accept: " + ", ".join(names)) if names else "label and accept (no labels)"
    return keys, desc


def screen_notes(keymap) -> list[tuple[str, str]]:
    """What the help says about the screen itself (focus, timeline glyphs, the viewed event)."""
    from reviewer.tui.app import VIEW_TOLERANCE
    from reviewer.tui.timeline import MARKS

    glyphs = " ".join(f"{g} {name if name != 'candidate' else 'pending'}"
                      for name, (g, _) in MARKS.items())
    tab = next((s.display for s in keymap.specs if s.id == "focus_list"), "tab")
    return [
        ("decisions", f"only on the event in view (its span, ±{VIEW_TOLERANCE} frames)"),
        ("timeline", f"bars: most change per column; {glyphs} \u25b2 this frame"),
        ("focus", f"{tab}: the event list takes ↑ ↓ PgUp PgDn Home End enter; {tab}: back"),
        ("kind", "a global's cause: blank, beam step, stage jump, unknown"),
        ("play", "x1 is real time; faster skips frames"),
    ]


# bindings the help shows on one row, as the README's key table does: first id -> (second id, what
# the pair does); the keys shown are whatever the key map in use binds
PAIRS = {
    "next_event": ("prev_event", "next / previous event (any status)"),
    "next_pending": ("prev_pending", "next / previous pending candidate"),
    "frame_forward": ("frame_back", "one frame later / earlier"),
    "forward_10": ("back_10", "10 frames later / earlier"),
    "page_forward": ("page_back", "1 % of the movie later / earlier"),
    "first_frame": ("last_frame", "first / last frame"),
    "accept": ("reject", "accept / reject the event at this frame"),
    "nudge_earlier": ("nudge_later", "move the event one frame earlier / later"),
    "undo": ("redo", "undo (many levels) / redo"),
    "slower": ("faster", "play slower / faster"),
    "contrast_stronger": ("contrast_flatter", "contrast stronger / flatter (grey window)"),
    "zoom_in": ("zoom_out", "zoom in / out"),
    "pan_left": ("pan_right", "pan left / right"),
    "pan_up": ("pan_down", "pan up / down"),
    "timeline_in": ("timeline_out", "timeline: zoom in around this frame / out"),
    "loupe_blink_fewer": ("loupe_blink_more", "blink over fewer / more frames (N)"),
}


ARROWS = {"right": "→", "left": "←", "up": "↑", "down": "↓"}


def pair_keys(a: str, b: str) -> str:
    """Two bindings' keys on one help row, short: 'n / p', 'shift+→ / ←' (arrows as glyphs, a shared
    modifier written once)."""
    def short(k: str) -> str:
        return " ".join("+".join(ARROWS.get(p, p) for p in key.split("+")) for key in k.split())

    a, b = short(a), short(b)
    head_a, _, tail_a = a.rpartition("+")
    head_b, _, tail_b = b.rpartition("+")
    if head_a and head_a == head_b and " " not in a + b:
        return f"{a} / {tail_b}"
    return f"{a} / {b}"


def help_entries(keymap, labels: list[str]) -> list[tuple[str, list[tuple[str, str]]]]:
    """(title, [(keys, what they do)]) per group of the key map, then the notes on the screen."""
    groups = []
    for group, specs in keymap.groups():
        rows = []
        label_specs = [s for s in specs if "{label}" in s.description]
        by_id = {s.id: s for s in specs}
        paired = {PAIRS[i][0] for i in by_id if i in PAIRS and PAIRS[i][0] in by_id}
        for s in specs:
            if s in label_specs:
                if s is label_specs[0]:
                    rows.append(_label_line(label_specs, labels))
            elif s.id in paired:
                continue
            elif s.id in PAIRS and PAIRS[s.id][0] in by_id:
                other, desc = PAIRS[s.id]
                rows.append((pair_keys(s.display, by_id[other].display), desc))
            else:
                rows.append((s.display, s.description))
        groups.append((group.capitalize(), rows))
    groups.append(("The screen", screen_notes(keymap)))
    return groups


def _block(title: str, rows: list[tuple[str, str]], last: bool = False):
    from rich.console import Group
    from rich.table import Table

    grid = Table.grid(padding=(0, 1))
    grid.add_column(no_wrap=True, style="bold", min_width=12)
    grid.add_column(ratio=1)
    for keys, desc in rows:
        grid.add_row(keys, desc)
    return Group(Text(title, "bold underline"), grid, *([] if last else [Text("")]))


def help_text(keymap, labels: list[str]) -> Text:
    """Every binding of the key map, by group, with its keys; generated from the key map data."""
    out = Text()
    for title, rows in help_entries(keymap, labels):
        out.append(f"{title}\n", "bold underline")
        for keys, desc in rows:
            out.append(f"  {keys:<14}", "bold")
            out.append(f"{desc}\n")
        out.append("\n")
    if keymap.sources:
        out.append("Key maps applied over the default: " + ", ".join(keymap.sources) + "\n", "dim")
    return out


WRAP_AT = 40  # description characters per help row in a two-column layout (a safe guess)


def split_columns(groups: list, n: int) -> list[list]:
    """Groups in order into n columns of about equal height (a row's height: 1 plus the lines its
    description wraps onto; a group's title and the gap after it: 2). A group that does not end in
    its column goes on at the top of the next under its title with ' (cont.)'."""
    if n <= 1 or not groups:
        return [groups]
    total = sum(2 + sum(1 + len(d) // WRAP_AT for _, d in rows) for _, rows in groups)
    target = -(-total // n)
    columns: list[list] = [[]]
    used = 0
    for title, rows in groups:
        part: list = []
        name = title
        if used + 3 > target and columns[-1] and len(columns) < n:  # title + a row would not fit
            columns.append([])
            used = 0
        used += 2
        for row in rows:
            h = 1 + len(row[1]) // WRAP_AT
            if used + h > target and part and len(columns) < n:
                columns[-1].append((name, part))
                columns.append([])
                part, name, used = [], f"{title} (cont.)", 2
            part.append(row)
            used += h
        columns[-1].append((name, part))
    return columns


class HelpScreen(ModalScreen[None]):
    """The key map, in two columns when the terminal is wide; focused at once, so the arrow keys
    scroll it."""

    BINDINGS = [Binding("escape,q,question_mark", "close", "close")]
    AUTO_FOCUS = "#help"

    def __init__(self, keymap, labels: list[str]) -> None:
        super().__init__()
        self.groups = help_entries(keymap, labels)
        self.text = help_text(keymap, labels)
        self.sources = keymap.sources

    def compose(self) -> ComposeResult:
        from rich.console import Group

        wide = self.app.size.width >= HELP_COLUMNS_FROM
        scroll = VerticalScroll(classes="dialog help" + (" wide" if wide else ""), id="help")
        scroll.border_title = "Keys"
        scroll.border_subtitle = "↑ ↓ PgUp PgDn Home End scroll · escape closes"
        with scroll:
            with Horizontal(id="help-columns"):
                for column in split_columns(self.groups, 2 if wide else 1):
                    yield Static(Group(*(_block(t, rows, i == len(column) - 1)
                                         for i, (t, rows) in enumerate(column))),
                                 classes="help-column")
            if self.sources:
                yield Static(Text("Key maps applied over the default: " + ", ".join(self.sources),
                                  "dim"))

    def action_close(self) -> None:
        self.dismiss(None)


class TooSmallScreen(ModalScreen[None]):
    """Shown while the terminal is smaller than the layout needs; closes itself on resize."""

    BINDINGS = [Binding("q", "app.quit", "quit")]

    def __init__(self, minimum: tuple[int, int]) -> None:
        super().__init__()
        self.minimum = minimum

    def compose(self) -> ComposeResult:
        yield Static(self._message(), id="too-small")

    def _message(self, size=None) -> str:
        w, h = size or self.app.size
        mw, mh = self.minimum
        return (f"The terminal is {w}×{h}; the review needs at least {mw}×{mh}.\n"
                "Enlarge the window or the tmux pane to continue (q saves and quits).")

    def on_resize(self, event) -> None:
        w, h = event.size
        if w >= self.minimum[0] and h >= self.minimum[1]:
            if self.is_current:
                self.dismiss(None)
        else:
            self.query_one("#too-small", Static).update(self._message(event.size))
