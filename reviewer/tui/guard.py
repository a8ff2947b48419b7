"""What the app shows when the session cannot take a change: a read-only banner, and one-line alerts
for refused or failed writes (the action is then not applied and the app goes on)."""

from __future__ import annotations

from rich.text import Text
from textual.widgets import Static

ALERT_S = 12.0  # an alert stays this long (or until the next one)
BACKGROUND = {"saving the position"}  # writes no key asked for (see write)


def one_line(text: str) -> str:
    return " ".join(str(text).split())


def _reason(exc: OSError) -> str:
    import errno
    import os

    if exc.errno in (errno.ENOSPC, errno.EFBIG, errno.EDQUOT):
        return "the disk is full"
    return os.strerror(exc.errno).lower() if exc.errno else "the session could not be written"


class Banner(Static):
    """Stays on top while the session is read-only (or another lasting fact needs the user)."""


class AlertLine(Static):
    """One line above the status bar for what a key did or what went wrong; always there (empty
    when there is nothing to say), so a message coming or going moves nothing on the screen (a
    change of layout would repaint the whole frame pane)."""


class GuardMixin:
    """Mixin for ReviewApp: run session changes through `write(...)`."""

    def init_guard(self) -> None:
        self._alert_timer = None
        self.alert_text = ""
        self.alert_kind = ""
        self.quit_note: str | None = None  # printed after the screen closes

    def banner_lines(self) -> list[str]:
        lines = []
        if self.session.read_only_why:
            lines.append("READ-ONLY  " + self.session.read_only_why)
        for change in self.session.movie_changes:
            key = self.keymap_key("acknowledge")
            lines.append("MOVIE CHANGED  " + self.session.movie_change_text(change).split(": ", 1)[1]
                         + (f". Press {key} to acknowledge." if key else "."))
        return lines

    def keymap_key(self, binding_id: str) -> str | None:
        for spec in self.keymap.specs:
            if spec.id == binding_id:
                return spec.display.split()[0] if spec.display else None
        return None

    def action_acknowledge(self) -> None:
        if not self.session.movie_changes:
            self.say("nothing to acknowledge")
            return
        if self.write("acknowledge", self.session.acknowledge_movie_change)[0]:
            self.update_banner()
            self.say("movie change acknowledged")

    def update_banner(self) -> None:
        banner = self.query_one("#banner", Banner)
        lines = self.banner_lines()
        banner.update("\n".join(lines))
        banner.display = bool(lines)

    def say(self, text: str, warn: bool = False) -> None:
        """One line of feedback above the status line (what a key did, or why it did nothing)."""
        self.alert(text, kind="warn" if warn else "info")

    def alert(self, text: str, kind: str = "error") -> None:
        self.alert_text = one_line(text)
        self.alert_kind = kind
        line = self.query_one("#alert", AlertLine)
        # one row always: no layout pass (it would cost more than the rest of a key together)
        line.update(Text(self.alert_text, no_wrap=True, overflow="ellipsis"), layout=False)
        line.set_classes(kind)
        if self._alert_timer is not None:
            self._alert_timer.stop()
        self._alert_timer = self.set_timer(ALERT_S, self.clear_alert)

    def clear_alert(self) -> None:
        self.alert_text = ""
        self.alert_kind = ""
        if self._alert_timer is not None:
            self._alert_timer.stop()
            self._alert_timer = None
        line = self.query_one("#alert", AlertLine)
        line.update("", layout=False)
        line.set_classes("idle")

    def clear_said(self) -> None:
        """The cursor moved on: what a key said about the last place goes (an error stays until
        its time is up or the next change is written)."""
        if self.alert_text and self.alert_kind != "error":
            self.clear_alert()

    def write(self, what: str, fn, *args, **kwargs):
        """Run one session change; (True, result), or (False, None) with an alert when the session
        is read-only or the disk refused (nothing applied: the session's rule)."""
        from reviewer.store.session import ReadOnlySession

        if self.session.readonly:
            self.alert(f"read-only: {what} not applied; {self.session.read_only_short}")
            return False, None
        try:
            result = fn(*args, **kwargs)
        except ReadOnlySession as exc:
            self.alert(str(exc))
            return False, None
        except OSError as exc:  # StoreWriteError, or a bare OSError from a lower layer
            self.alert(f"{what} NOT applied: {_reason(exc)}; free space or fix the folder, then "
                       f"repeat it ({self.session.folder})")
            return False, None
        if self.alert_text and (self.alert_kind == "error" or what not in BACKGROUND):
            self.clear_alert()  # a background write leaves what the last key said
        return True, result
