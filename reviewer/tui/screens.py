"""Dialogs over the review screen: help (from the key map data), go to, confirm, terminal too small.

They are modal, so the review keys do nothing while one is open; escape closes each of them.
"""

from __future__ import annotations

import re

import numpy as np
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical, VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Input, Static

_TIME = re.compile(r"^(?:(\d+):)?(\d+(?:\.\d*)?|\.\d+)\s*s?$")


def parse_goto(text: str, n_frames: int, times_s: np.ndarray | None, fps: float | None) -> int:
    """A frame from "1234" (frame number), "3.5s" (seconds) or "1:02.5" (minutes:seconds)."""
    t = text.strip().lower()
    if not t:
        raise ValueError("type a frame number (1234) or a time (3.5s)")
    if t.isdigit():
        frame = int(t)
    else:
        m = _TIME.match(t)
        if not m or (":" not in t and not t.endswith("s")):
            raise ValueError(f"not a frame or a time: {text.strip()!r} (try 1234 or 3.5s)")
        seconds = float(m.group(2)) + 60 * int(m.group(1) or 0)
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
        last = self.time_of(self.n_frames - 1)
        span = f" or a time up to {last:.3f}s" if last is not None else ""
        with Vertical(classes="dialog"):
            yield Static(f"Go to a frame (0..{self.n_frames - 1}){span}:", classes="title")
            yield Input(placeholder="1234 or 3.5s", id="goto-input")
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


def help_text(keymap, labels: list[str]) -> Text:
    """Every binding of the key map, by group, with its keys; generated from the key map data."""
    out = Text()
    for group, specs in keymap.groups():
        out.append(f"{group.capitalize()}\n", "bold underline")
        for s in specs:
            desc = s.description
            if "{label}" in desc:
                k = int(s.id.rsplit("_", 1)[1])
                name = labels[k - 1] if k <= len(labels) else None
                if name is None:
                    desc = desc.replace("{label}", f"{k} (not in the label set)")
                else:
                    desc = desc.replace("{label}", repr(name))
            out.append(f"  {s.display:<18}", "bold")
            out.append(f"{desc}\n")
        out.append("\n")
    if keymap.sources:
        out.append("Key maps applied over the default: " + ", ".join(keymap.sources) + "\n", "dim")
    out.append("escape closes a dialog", "dim")
    return out


class HelpScreen(ModalScreen[None]):
    BINDINGS = [Binding("escape,q,question_mark", "close", "close")]

    def __init__(self, keymap, labels: list[str]) -> None:
        super().__init__()
        self.text = help_text(keymap, labels)

    def compose(self) -> ComposeResult:
        with VerticalScroll(classes="dialog help", id="help"):
            yield Static("Keys", classes="title")
            yield Static(self.text, id="help-text")

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
