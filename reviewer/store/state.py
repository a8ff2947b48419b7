"""The in-memory state of a review: events, position, undo/redo stacks, and how records change it.

`apply(record)` is the one place a journal record changes the state, used both live (after the record
is fsynced) and when replaying the journal on open.
"""

from __future__ import annotations

from operator import attrgetter
from pathlib import Path

from reviewer.store.events import FIELDS, Event, clean
from reviewer.store.table import STATUSES

UNDO_LIMIT = 10_000
_ROW = attrgetter(*FIELDS)
_VERBS = {"add": "mark", "reject_kind": "reject"}  # ops named as the user knows them


def describe(entry: dict) -> str:
    """What an undoable action did, in a few words: 'accept of d000004', 'reject of 12 events'."""
    verb = _VERBS.get(entry["op"], entry["op"])
    ids = [ch["id"] for ch in entry.get("changes", ())]
    if len(ids) == 1:
        after = entry["changes"][0].get("after") or {}
        if verb == "label" and after.get("label"):
            return f"label {after['label']!r} of {ids[0]}"
        return f"{verb} of {ids[0]}"
    return f"{verb} of {len(ids)} events"


class ReviewState:
    def __init__(self) -> None:
        self.seeded = False
        self._events: dict[str, Event] = {}
        self._sorted: list[Event] | None = None
        self._undo: list[dict] = []
        self._redo: list[dict] = []
        self._seq = 0
        self._position = 0
        self._next_manual = 1
        self.movie_changes: list[dict] = []  # movie changes not yet acknowledged by the user
        self._reviewers: list[str] = []  # everyone who journaled an action, in order of first action
        self._last_export: str | None = None  # the CSV of the last export from this session

    def _load_snapshot(self, snap: dict) -> None:
        self._put_rows(snap.get("columns", list(FIELDS)), snap.get("events", []))
        self._seq = int(snap.get("seq", 0))
        self._position = int(snap.get("position", 0))
        self._next_manual = max(self._next_manual, int(snap.get("next_manual", 1)))
        self.seeded = bool(snap.get("seeded", False))
        self._undo = list(snap.get("undo", []))
        self._redo = list(snap.get("redo", []))
        self.movie_changes = [dict(c) for c in snap.get("movie_changes", [])]
        self._reviewers = [str(r) for r in snap.get("reviewers", [])]
        self._last_export = snap.get("last_export")

    def _apply(self, rec: dict) -> None:
        op = rec["op"]
        who = rec.get("reviewer")
        if who and who not in self._reviewers:
            self._reviewers.append(str(who))
        if op == "exported":
            self._last_export = str(rec["csv"])
        elif op == "seed":
            self._put_rows(rec["columns"], rec["rows"])
            self.seeded = True
        elif op == "position":
            self._position = int(rec["frame"])
        elif op == "movie_changed":
            self.movie_changes.append({"from": rec["from"], "to": rec["to"], "t": rec.get("t"),
                                       "reseeded": False, "kept": 0, "orphaned": []})
        elif op == "acknowledge":
            self.movie_changes = []
        elif op == "undo":
            if not self._undo or self._undo[-1]["seq"] != rec["of"]:
                raise ValueError(f"nothing to undo matches action {rec['of']}")
            done = self._undo.pop()
            self._change(done["changes"], "before")
            self._redo.append(done)
        elif op == "redo":
            if not self._redo or self._redo[-1]["seq"] != rec["of"]:
                raise ValueError(f"nothing to redo matches action {rec['of']}")
            done = self._redo.pop()
            self._change(done["changes"], "after")
            self._undo.append(done)
        else:
            self._change(rec["changes"], "after")
            self._undo.append({"seq": rec["seq"], "op": op, "changes": rec["changes"]})
            del self._undo[:-UNDO_LIMIT]
            self._redo.clear()

    def _put_rows(self, columns: list[str], rows: list[list]) -> None:
        """Add events from rows we wrote ourselves (already typed); other column orders are cleaned."""
        if list(columns) == list(FIELDS):
            for row in rows:
                ev = Event(*row)
                self._events[ev.event_id] = ev
        else:
            for row in rows:
                ev = Event(**clean(dict(zip(columns, row, strict=True))))
                self._events[ev.event_id] = ev
        self._next_manual = max([self._next_manual] + [
            int(k[1:]) + 1 for k in self._events if k.startswith("m") and k[1:].isdigit()])
        self._sorted = None

    def _put(self, values: dict) -> None:
        ev = Event(**values)
        self._events[ev.event_id] = ev
        if ev.event_id.startswith("m") and ev.event_id[1:].isdigit():
            self._next_manual = max(self._next_manual, int(ev.event_id[1:]) + 1)
        self._sorted = None

    def _change(self, changes: list[dict], side: str) -> None:
        for ch in changes:
            values = ch[side]
            ev = self._events.get(ch["id"])
            if values is None:
                if self._events.pop(ch["id"], None) is not None:
                    self._sorted = None
            elif ev is None:
                self._put(clean(values))
            else:
                for k, v in clean(values).items():
                    setattr(ev, k, v)
                if "frame" in values:
                    self._sorted = None

    @property
    def events(self) -> list[Event]:
        if self._sorted is None:
            self._sorted = sorted(self._events.values(), key=lambda e: (e.frame, e.event_id))
        return self._sorted

    def get(self, event_id: str) -> Event:
        try:
            return self._events[event_id]
        except KeyError:
            raise KeyError(f"no event {event_id!r} in this session") from None

    @property
    def reviewers(self) -> list[str]:
        """Everyone who journaled an action on this session, in order of their first action."""
        return list(self._reviewers)

    @property
    def last_export(self) -> Path | None:
        """The CSV the last export from this session (while it was open for writing) wrote."""
        return None if self._last_export is None else Path(self._last_export)

    @property
    def position(self) -> int:
        return self._position

    def counts(self) -> dict[str, int]:
        out = dict.fromkeys(STATUSES, 0)
        for ev in self._events.values():
            out[ev.status] = out.get(ev.status, 0) + 1
        return out

    def snapshot_state(self) -> dict:
        return {"format": 1, "seq": self._seq, "position": self._position,
                "next_manual": self._next_manual, "seeded": self.seeded, "columns": list(FIELDS),
                "events": list(map(_ROW, self.events)),
                "undo": self._undo[-UNDO_LIMIT:], "redo": self._redo,
                "movie_changes": self.movie_changes, "reviewers": self._reviewers,
                "last_export": self._last_export}

