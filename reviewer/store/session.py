"""A review session: the events of one movie and every decision on them, kept safe on disk.

State = snapshot.json + the journal lines after it (see store/journal.py for the file formats and the
crash windows). Every mutating call builds its journal record first, appends it (written + fsynced),
and only then applies it in memory, through the same code that replays the journal on open; so what is
on disk and what is in memory cannot drift apart, and a failed write leaves the state as it was.

Undo and redo are journaled too ({"op": "undo", "of": seq}), so the undo history survives a crash and a
reopen. Seeding and the position are not undoable. Seeding (often 10^4-10^5 candidates) is made durable
by writing the snapshot at once instead of a huge journal line; a "seed" record is still understood on
replay.

Read-only sessions (`readonly=True`, for export) take no lock and write nothing; they may be seeded in
memory. A signal saver (store/signals.py) that fires during an action waits for it (`busy`, `defer`).
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.base import Timing
from reviewer.paths import session_dir
from reviewer.store.events import (
    FIELDS,
    Event,
    candidate_rows,
    changed,
    clean,
    manual_id,
    utc_now,
)
from reviewer.store.journal import (
    JOURNAL,
    SNAPSHOT,
    Journal,
    read_journal,
    read_snapshot,
    write_json_atomic,
)
from reviewer.store.lock import SessionLock
from reviewer.store.meta import load_meta, merge_meta
from reviewer.store.state import ReviewState

COMPACT_BYTES = 4 << 20  # compact automatically once the journal passes this size


class Session(ReviewState):
    """Open with `Session.open(...)`; see the module docstring."""

    def __init__(self, folder: Path, readonly: bool) -> None:
        super().__init__()
        self.folder = folder
        self.readonly = readonly
        self.notices: list[str] = []
        self.lock_warning: str | None = None
        self.meta: dict = {}
        self.times_s: np.ndarray | None = None
        self._journal: Journal | None = None
        self._lock: SessionLock | None = None
        self._closed = False
        self._busy = 0
        self._deferred: Callable[[], None] | None = None

    # ---- opening -------------------------------------------------------------------------
    @classmethod
    def open(cls, movie_path, fingerprint: str, *, override=None, meta: dict | None = None,
             readonly: bool = False) -> Session:
        """Open (or start) the session of a movie. readonly: no lock, no writes (for export)."""
        try:
            folder = session_dir(movie_path, fingerprint, override)
        except OSError as exc:
            raise BadInput(f"{override or movie_path}: cannot make the session folder ({exc})") from exc
        s = cls(folder, readonly)
        s.meta, s.times_s, notes = load_meta(folder)
        s.notices += notes
        old_fp = s.meta.get("fingerprint")
        if old_fp and fingerprint and old_fp != fingerprint:
            s.notices.append(f"{folder}: the movie changed since this session began "
                             f"(fingerprint {old_fp} -> {fingerprint})")
        try:
            s.meta, s.times_s = merge_meta(s.meta, s.times_s, meta or {}, movie_path, fingerprint,
                                           None if readonly else folder)
            cut = s._replay()
            if not readonly:
                s._lock = SessionLock(folder)
                s.lock_warning = s._lock.acquire()
                s._journal = Journal(folder / JOURNAL, cut_to=cut)
        except OSError as exc:
            if s._lock is not None:
                s._lock.release()
            raise BadInput(f"{folder}: cannot use the session folder "
                           f"({exc.strerror or exc}); choose another with --session") from exc
        s._retime()
        return s

    def update_meta(self, **values) -> None:
        """Record movie facts or detector settings (keys of store.meta.KEYS) in meta.json, written
        atomically; a read-only session only updates its memory."""
        self.meta, self.times_s = merge_meta(self.meta, self.times_s, values, self.meta.get("movie"),
                                             self.meta.get("fingerprint", ""),
                                             None if self.readonly else self.folder)

    def _replay(self) -> int | None:
        snap, notes = read_snapshot(self.folder)
        self.notices += notes
        if snap:
            self._load_snapshot(snap)
        records, notes, cut = read_journal(self.folder / JOURNAL)
        self.notices += notes
        floor = self._seq
        for rec in records:
            seq = rec.get("seq")
            if not isinstance(seq, int) or seq <= floor:
                continue
            try:
                self._apply(rec)
            except (KeyError, TypeError, ValueError, IndexError) as exc:
                self.notices.append(f"{self.folder / JOURNAL}: action {seq} ({rec.get('op')}) "
                                    f"could not be replayed and was skipped ({exc})")
            self._seq = max(self._seq, seq)
        return cut

    def _commit(self, op: str, **fields) -> None:
        """Journal one action (fsynced), then apply it in memory."""
        if self._closed:
            raise RuntimeError(f"{self.folder}: the session is closed")
        if self.readonly and op != "seed":
            raise RuntimeError(f"{self.folder}: the session was opened read-only")
        rec = {"seq": self._seq + 1, "t": utc_now(), "op": op, **fields}
        self._busy += 1
        try:
            if self._journal is not None:
                self._journal.append(rec)
            self._seq += 1
            self._apply(rec)
            if self._journal is not None and self._journal.size > COMPACT_BYTES:
                self.compact()
        finally:
            self._busy -= 1
        self._run_deferred()

    def _run_deferred(self) -> None:
        if self._busy == 0 and self._deferred is not None:
            fn, self._deferred = self._deferred, None
            fn()

    @property
    def busy(self) -> bool:
        return self._busy > 0

    def defer(self, fn: Callable[[], None]) -> None:
        """Run fn as soon as the current action has finished (used by the signal savers)."""
        self._deferred = fn

    # ---- timing --------------------------------------------------------------------------
    @property
    def timing(self) -> Timing:
        """The movie's frame times as recorded in meta (per-frame times first, else fps)."""
        times = self.times_s if self.times_s is not None and len(self.times_s) else None
        return Timing(fps=self.meta.get("fps"), times_s=times)

    def time_of(self, frame: int) -> float | None:
        return self.timing.time_of(int(frame))

    def _retime(self) -> None:
        if self.times_s is None and not self.meta.get("fps"):
            return
        for ev in self._events.values():
            ev.time_s = self.time_of(ev.frame)

    # ---- actions -------------------------------------------------------------------------
    def seed(self, candidates) -> int:
        """Add the detector's candidates once (a no-op when already seeded). Returns events added.

        Not undoable. Made durable by writing the snapshot directly (one atomic step), not by a
        journal line; if that write fails the candidates are taken out again and the error raised.
        """
        if self.seeded:
            return 0
        if self._closed:
            raise RuntimeError(f"{self.folder}: the session is closed")
        rows = candidate_rows(candidates, self.time_of_frames)
        self._busy += 1
        try:
            self._seq += 1
            self._apply({"seq": self._seq, "t": utc_now(), "op": "seed", "columns": list(FIELDS),
                         "rows": rows})
            try:
                self.compact()  # a no-op when read-only: then the candidates live in memory only
            except OSError:
                for row in rows:
                    self._events.pop(row[0], None)
                self._sorted, self.seeded = None, False
                self._seq -= 1
                raise
        finally:
            self._busy -= 1
        self._run_deferred()
        return len(rows)

    def time_of_frames(self, frames: np.ndarray) -> np.ndarray | None:
        return self.timing.time_of(np.asarray(frames))

    def _edit(self, op: str, event_id: str, decision: bool = True, **new) -> Event:
        ev = self.get(event_id)
        ch = changed(ev, **new)
        if ch is not None:
            if decision:  # reviewed_at records the time of the last decision on the event
                ch["before"]["reviewed_at"] = ev.reviewed_at
                ch["after"]["reviewed_at"] = utc_now()
            self._commit(op, changes=[ch])
        return ev

    def accept(self, event_id: str, label: str | None = None) -> Event:
        new = {"status": "accepted"} if label is None else {"status": "accepted", "label": label}
        return self._edit("accept", event_id, **new)

    def reject(self, event_id: str) -> Event:
        return self._edit("reject", event_id, status="rejected")

    def set_label(self, event_id: str, label: str | None) -> Event:
        return self._edit("label", event_id, status="accepted", label=label or None)

    def set_note(self, event_id: str, text: str | None) -> Event:
        return self._edit("note", event_id, decision=False, note=text or None)

    def nudge(self, event_id: str, delta_frames: int) -> Event:
        ev = self.get(event_id)
        last = int(self.meta["frames"]) - 1 if self.meta.get("frames") else None
        frame = max(0, ev.frame + int(delta_frames))
        if last is not None:
            frame = min(frame, last)
        shift = frame - ev.frame
        end = None if ev.frame_end is None else ev.frame_end + shift
        time_s = self.time_of(frame)
        return self._edit("nudge", event_id, decision=False, frame=frame, frame_end=end,
                          time_s=ev.time_s if time_s is None and not shift else time_s)

    def add(self, frame: int, x: float | None = None, y: float | None = None,
            label: str | None = None) -> Event:
        event_id = manual_id(self._next_manual)
        ev = Event(**clean(dict(event_id=event_id, frame=int(frame), time_s=self.time_of(int(frame)),
                                kind="manual", x=x, y=y, status="accepted", label=label,
                                source="manual", reviewed_at=utc_now())))
        self._commit("add", changes=[{"id": event_id, "before": None, "after": ev.as_row()}])
        return self._events[event_id]

    def reject_kind(self, kind: str) -> int:
        """Reject every still-undecided candidate of one kind (e.g. "global"); one undoable action."""
        now = utc_now()
        changes = []
        for ev in self.events:
            if ev.kind == kind and ev.status == "candidate":
                changes.append({"id": ev.event_id,
                                "before": {"status": ev.status, "reviewed_at": ev.reviewed_at},
                                "after": {"status": "rejected", "reviewed_at": now}})
        if changes:
            self._commit("reject_kind", kind=kind, changes=changes)
        return len(changes)

    def undo(self) -> bool:
        if not self._undo:
            return False
        self._commit("undo", of=self._undo[-1]["seq"])
        return True

    def redo(self) -> bool:
        if not self._redo:
            return False
        self._commit("redo", of=self._redo[-1]["seq"])
        return True

    def set_position(self, frame: int) -> None:
        frame = int(frame)
        if frame != self._position:
            self._commit("position", frame=frame)

    # ---- saving --------------------------------------------------------------------------
    def compact(self) -> None:
        """Write the whole state to snapshot.json (atomically), then empty the journal."""
        if self.readonly or self._closed or self._journal is None:
            return
        self._busy += 1
        try:
            write_json_atomic(self.folder / SNAPSHOT, self.snapshot_state())
            self._journal.truncate()
        finally:
            self._busy -= 1

    def close(self) -> None:
        """Compact, release the lock. Safe to call twice."""
        if self._closed:
            return
        try:
            self.compact()
        finally:
            self._closed = True
            if self._journal is not None:
                self._journal.close()
            if self._lock is not None:
                self._lock.release()

    def __enter__(self) -> Session:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

