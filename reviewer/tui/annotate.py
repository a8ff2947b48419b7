"""Notes, the event-list filter and the jump to disputed events (a ReviewApp mixin), and the
one-line note editor."""

from __future__ import annotations

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Input, Static

from reviewer.store.table import STATUSES

NOTE_MAX = 500  # characters in one note


def one_line_note(text: str) -> str:
    """The note as it is kept: one line, runs of white space as one space."""
    return " ".join(str(text).split())[:NOTE_MAX]


class NoteScreen(ModalScreen[str | None]):
    """One line for the viewed event's note: enter keeps it (empty clears it), escape changes
    nothing. Dismisses with the text, or None on escape."""

    BINDINGS = [Binding("escape", "cancel", "close", show=False)]
    AUTO_FOCUS = "Input"

    def __init__(self, event_id: str, frame: int, note: str | None) -> None:
        super().__init__()
        self.event_id, self.frame, self.note = event_id, frame, note or ""

    def compose(self) -> ComposeResult:
        with Vertical(classes="dialog"):
            yield Static(f"Note on {self.event_id} (frame {self.frame}):", classes="title")
            yield Input(value=self.note, placeholder="one line; empty clears the note",
                        id="note-input", max_length=NOTE_MAX)
            yield Static("enter keeps it · escape leaves the note as it was", classes="hint")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.dismiss(one_line_note(event.value))

    def action_cancel(self) -> None:
        self.dismiss(None)


def filter_cycle(events, labels: list[str]) -> list[tuple[str, str]]:
    """The filters the filter key steps through, after 'every event': each status, then each label,
    that at least one event has (statuses in the table's order, labels in the label set's order,
    other labels after them alphabetically)."""
    statuses = {e.status for e in events}
    used = {e.label for e in events if e.label}
    out = [("status", s) for s in STATUSES if s in statuses]
    out += [("label", name) for name in labels if name in used]
    out += [("label", name) for name in sorted(used - set(labels))]
    return out


def next_filter(current: tuple[str, str] | None, events,
                labels: list[str]) -> tuple[str, str] | None:
    """The filter after `current` (None: every event) in filter_cycle; after the last, None."""
    cycle = filter_cycle(events, labels)
    if current is None:
        return cycle[0] if cycle else None
    if current in cycle:
        i = cycle.index(current) + 1
        return cycle[i] if i < len(cycle) else None
    return None


def filter_name(which: tuple[str, str]) -> str:
    field, value = which
    return f"only {value}" if field == "status" else f"only label '{value}'"


class AnnotateMixin:
    """Mixin for ReviewApp: the note, filter_list and next_disputed keys."""

    list_filter: tuple[str, str] | None = None

    def action_note(self) -> None:
        ev = self._target("note")
        if ev is None:
            return
        if self.session.readonly:
            self.write("note", self.session.set_note, ev.event_id, ev.note)  # says why not
            return
        eid, before = ev.event_id, ev.note or ""

        def done(text: str | None) -> None:
            if text is None or text == before:
                self.say(f"note on {eid} unchanged")
                return
            if not self.write("note", self.session.set_note, eid, text or None)[0]:
                return
            self.refresh_events()
            self.show_frame()
            undo = self.keymap_key("undo")
            tail = f" ({undo} undoes)" if undo else ""
            self.say((f"note on {eid}: {text}" if text else f"note on {eid} cleared") + tail)

        self.push_screen(NoteScreen(eid, ev.frame, ev.note), done)

    def action_filter_list(self) -> None:
        """Step the event list's filter: every event, each status, each label, every event."""
        events = self.session.events
        self.list_filter = which = next_filter(self.list_filter, events, self.labels)
        if which is None:
            self.eventlist.set_filter()
            self.say(f"list: every event ({len(events)})")
        else:
            field, value = which
            name = filter_name(which)
            self.eventlist.set_filter(name, lambda e, f=field, v=value: getattr(e, f) == v)
            key = self.keymap_key("filter_list")
            self.say(f"list: {name} ({self.eventlist.row_count} of {len(events)})"
                     + (f"; {key} for the next filter" if key else ""))
        if self.current_id is not None:
            self.eventlist.select_event(self.current_id)

    def action_next_disputed(self) -> None:
        """The next event marked disputed (by a merge of two reviews), from the start after the
        last one."""
        events = self.session.events
        if not any(e.status == "disputed" for e in events):
            self.say("no disputed events (a merge of two reviews marks them)")
            return
        if not self._jump(True, "disputed", quiet=True):
            first = next(e for e in events if e.status == "disputed")
            self.go(first.frame, jumped_to=first.event_id)
            self.say(f"no disputed event after this one: back to the first, at frame {first.frame}")
