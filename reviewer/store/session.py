"""A review session: the events of one movie and every decision on them, kept safe on disk.

State = snapshot.json (or snapshot.json.prev) + the journal lines after it (see store/journal.py for the file formats and the
crash windows). Every mutating call builds its journal record first, appends it (written + fsynced),
and only then applies it in memory, through the same code that replays the journal on open; so what is
on disk and what is in memory cannot drift apart, and a failed write leaves the state as it was.

Undo and redo are journaled too ({"op": "undo", "of": seq}), so the undo history survives a crash and a
reopen. Seeding and the position are not undoable. Seeding (often 10^4-10^5 candidates) is made durable
by writing the snapshot at once instead of a huge journal line; a "seed" record is still understood on
replay.

One writer per session folder (store/lock.py): a second reviewer, a lock left by a dead one, or a
folder that cannot be written make the session read-only (`read_only_why`). Read-only sessions take no
lock and write nothing; they may be seeded in memory; they read the files consistently while a writer
runs (store/replay.py). A signal saver (store/signals.py) that fires during an action waits for it (`busy`, `defer`).
"""

from __future__ import annotations

import os
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
    PREV,
    SNAPSHOT,
    Journal,
    ReadOnlySession,
    StoreWriteError,
    copy_durably,
    replace_durably,
    write_json_temp,
)
from reviewer.store.lock import LockState, SessionLock
from reviewer.store.meta import load_meta, merge_meta
from reviewer.store.replay import load_state, move_aside
from reviewer.store.reseed import MovieChangeMixin
from reviewer.store.state import ReviewState, describe
from reviewer.store.who import login_name

COMPACT_BYTES = 4 << 20  # compact automatically once the journal grows by this much
RECLAIM_OPTION = "--reclaim-lock"  # the review option that takes over a lock left by a dead process


def read_only_text(folder: Path, lock: LockState) -> tuple[str, str]:
    """Why a session opened read-only and how to go on: (the UI's banner, a short form for one line)."""
    if lock.state == "unwritable":
        return (f"{folder}: this session folder cannot be written ({lock.why}). Opened read-only: "
                "browse and export, no decisions. To go on deciding, copy the folder elsewhere "
                "and open it with --session DIR.",
                "the session folder cannot be written (copy it and use --session DIR)")
    if lock.state == "stale":
        return (f"{folder}: left locked by a reviewer that is no longer running "
                f"({lock.holder()}). Opened read-only; nothing was lost. If no other reviewer "
                f"uses it, reopen with {RECLAIM_OPTION} to go on deciding.",
                f"locked by a reviewer no longer running (pid {lock.info.get('pid', '?')}); "
                f"reopen with {RECLAIM_OPTION}")
    return (f"{folder}: open for writing in another reviewer ({lock.holder()}). This one is "
            "read-only: browse and export, no decisions. To decide here, quit the other one "
            "and reopen.",
            f"the session is held by pid {lock.info.get('pid', '?')} on "
            f"{lock.info.get('host', '?')}")


__all__ = ["ReadOnlySession", "Session", "StoreWriteError"]


class Session(MovieChangeMixin, ReviewState):
    """Open with `Session.open(...)`; see the module docstring."""

    def __init__(self, folder: Path, readonly: bool) -> None:
        super().__init__()
        self.folder = folder
        self.readonly = readonly
        self.notices: list[str] = []
        self.read_only_why: str | None = None  # set when a writer had to open read-only
        self.read_only_short: str | None = None  # the same in a few words
        self.meta: dict = {}
        self.times_s: np.ndarray | None = None
        self._journal: Journal | None = None
        self._lock: SessionLock | None = None
        self._closed = False
        self._busy = 0
        self._deferred: Callable[[], None] | None = None
        self._snap_seq: int | None = None  # seq of snapshot.json as this session knows it
        self._journal_base = 0  # journal size after the last compaction
        self.close_error: OSError | None = None  # set by a signal saver whose close() failed
        self.reviewer: str | None = login_name()  # written with every journaled action

    @property
    def lock_warning(self) -> str | None:
        return self.read_only_why

    # ---- opening -------------------------------------------------------------------------
    @classmethod
    def open(cls, movie_path, fingerprint: str, *, override=None, meta: dict | None = None,
             readonly: bool = False, reclaim: bool = False,
             reviewer: str | None = None) -> Session:
        """Open (or start) the session of a movie.

        readonly: no lock, no writes, no folder made (for export). Otherwise the session takes the
        folder's lock; when another reviewer holds it, when it was left by one that died (unless
        reclaim, the user's explicit choice) or when the folder cannot be written, the session opens
        read-only with `read_only_why` saying why and how to go on.
        """
        try:
            folder = session_dir(movie_path, fingerprint, override, create=not readonly)
        except OSError as exc:
            raise BadInput(f"{override or movie_path}: cannot make the session folder ({exc})") from exc
        s = cls(folder, readonly)
        if reviewer is not None:
            s.reviewer = reviewer
        if not readonly:
            s._take_lock(reclaim)
        s.meta, s.times_s, notes = load_meta(folder)
        s.notices += notes
        old_fp = s.meta.get("fingerprint")
        try:
            s._load()
            if old_fp and fingerprint and old_fp != fingerprint and \
                    not any(c["to"] == fingerprint for c in s.movie_changes):
                change = {"from": old_fp, "to": fingerprint}
                if s.readonly:
                    s._apply({"op": "movie_changed", "t": utc_now(), **change})
                else:
                    s._commit("movie_changed", **change)
            s.notices += [s.movie_change_text(c) for c in s.movie_changes]
            s.meta, s.times_s = merge_meta(s.meta, s.times_s, meta or {}, movie_path, fingerprint,
                                           None if s.readonly else folder)
        except OSError as exc:
            if s.readonly:
                raise BadInput(f"{folder}: cannot read the session ({exc.strerror or exc})") from exc
            s._give_up_writing(LockState("unwritable", why=exc.strerror or str(exc)))
            s.meta, s.times_s = merge_meta(s.meta, s.times_s, meta or {}, movie_path, fingerprint,
                                           None)
        s._retime()
        return s

    def _take_lock(self, reclaim: bool) -> None:
        self._lock = SessionLock(self.folder)
        if not os.access(self.folder, os.W_OK | os.X_OK):
            state = LockState("unwritable", self._lock.read() or {}, "permission denied")
        else:
            try:
                state = self._lock.acquire(reclaim)
            except OSError as exc:
                raise BadInput(f"{self.folder}: cannot use the session folder "
                               f"({exc.strerror or exc}); choose another with --session") from exc
        if state.state != "owned":
            self._give_up_writing(state)

    def _give_up_writing(self, state: LockState) -> None:
        if self._journal is not None:
            self._journal.close()
            self._journal = None
        if self._lock is not None:
            self._lock.release()
        self.readonly = True
        self.read_only_why, self.read_only_short = read_only_text(self.folder, state)

    def _load(self) -> None:
        """Rebuild the state from the files (consistently while another process may write)."""
        got = load_state(self.folder, live_writer_possible=self.readonly)
        self.notices += got.notices
        for name in ("seeded", "_events", "_sorted", "_undo", "_redo", "_seq", "_position",
                     "_next_manual", "movie_changes", "_reviewers", "_last_export"):
            setattr(self, name, getattr(got.state, name))
        self._snap_seq = got.snapshot_seq
        floor = self._seq
        for rec in got.records:
            seq = rec.get("seq")
            if not isinstance(seq, int) or seq <= floor:
                continue
            try:
                self._apply(rec)
            except (KeyError, TypeError, ValueError, IndexError) as exc:
                self.notices.append(f"{self.folder / JOURNAL}: action {seq} ({rec.get('op')}) "
                                    f"could not be replayed and was skipped ({exc})")
            self._seq = max(self._seq, seq)
        if self.readonly:
            return
        for path in got.damaged:  # never overwritten: kept under another name, and the user told
            target = move_aside(path)
            self.notices.append(f"{path}: moved aside to {target.name} (kept for inspection)")
        self._journal = Journal(self.folder / JOURNAL, cut_to=got.cut)
        self._journal_base = self._journal.size
        if got.damaged:
            self.compact()  # a good snapshot again at once

    def update_meta(self, **values) -> None:
        """Record movie facts or detector settings (keys of store.meta.KEYS) in meta.json, written
        atomically; a read-only session only updates its memory."""
        self.meta, self.times_s = merge_meta(self.meta, self.times_s, values, self.meta.get("movie"),
                                             self.meta.get("fingerprint", ""),
                                             None if self.readonly else self.folder)

    def _commit(self, op: str, **fields) -> None:
        """Journal one action (fsynced), then apply it in memory."""
        if self._closed:
            raise RuntimeError(f"{self.folder}: the session is closed")
        if self.readonly and op != "seed":
            raise ReadOnlySession(f"{self.folder}: the session is open read-only; "
                                  f"{op} was not applied")
        rec = {"seq": self._seq + 1, "t": utc_now(), "op": op, **fields}
        if self.reviewer:
            rec["reviewer"] = self.reviewer
        self._busy += 1
        try:
            if self._journal is not None:
                self._journal.append(rec)
            self._seq += 1
            self._apply(rec)
            if self._journal is not None and \
                    self._journal.size - self._journal_base > COMPACT_BYTES:
                try:
                    self.compact()
                except StoreWriteError as exc:  # the action itself is safe in the journal
                    self.notices.append(f"{exc}; every action stays in the journal")
                    self._journal_base = self._journal.size
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
            if decision:  # reviewed_at and reviewer: when and by whom the last decision was made
                ch["before"].update(reviewed_at=ev.reviewed_at, reviewer=ev.reviewer)
                ch["after"].update(reviewed_at=utc_now(), reviewer=self.reviewer)
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
                                source="manual", reviewed_at=utc_now(), reviewer=self.reviewer)))
        self._commit("add", changes=[{"id": event_id, "before": None, "after": ev.as_row()}])
        return self._events[event_id]

    def reject_kind(self, kind: str) -> int:
        """Reject every still-undecided candidate of one kind (e.g. "global"); one undoable action."""
        now = utc_now()
        changes = []
        for ev in self.events:
            if ev.kind == kind and ev.status == "candidate":
                changes.append({"id": ev.event_id,
                                "before": {"status": ev.status, "reviewed_at": ev.reviewed_at,
                                           "reviewer": ev.reviewer},
                                "after": {"status": "rejected", "reviewed_at": now,
                                          "reviewer": self.reviewer}})
        if changes:
            self._commit("reject_kind", kind=kind, changes=changes)
        return len(changes)

    def undo(self) -> str | None:
        """Undo the last action; what was undone ('undid accept of d000004'), None if nothing."""
        if not self._undo:
            return None
        entry = self._undo[-1]
        self._commit("undo", of=entry["seq"])
        return f"undid {describe(entry)}"

    def redo(self) -> str | None:
        """Redo the last undone action; what was redone ('redid accept of d000004'), or None."""
        if not self._redo:
            return None
        entry = self._redo[-1]
        self._commit("redo", of=entry["seq"])
        return f"redid {describe(entry)}"

    def remember_export(self, csv_path) -> bool:
        """Journal where an export went (`last_export`); a read-only or closed session, or a journal
        that cannot be written, only keeps it in memory (the export itself is done). True if saved."""
        path = str(Path(csv_path).resolve())
        if self.readonly or self._closed:
            self._last_export = path
            return False
        try:
            self._commit("exported", csv=path)
        except OSError as exc:
            self._last_export = path
            self.notices.append(f"{exc}; the export is written, the session does not remember it")
            return False
        return True

    def set_position(self, frame: int) -> None:
        frame = int(frame)
        if frame != self._position:
            self._commit("position", frame=frame)

    # ---- saving --------------------------------------------------------------------------
    def compact(self) -> None:
        """Write the whole state to snapshot.json; the old one becomes snapshot.json.prev and the
        journal keeps only what came after it (see store/journal.py for the steps)."""
        if self.readonly or self._closed or self._journal is None:
            return
        if self._snap_seq == self._seq and (self.folder / SNAPSHOT).exists():
            return  # nothing new since the snapshot
        self._busy += 1
        try:
            snap, prev = self.folder / SNAPSHOT, self.folder / PREV
            state = self.snapshot_state()
            tmp = write_json_temp(snap, state)
            rotated = self._snap_seq is not None and snap.exists()
            try:
                if rotated:
                    os.replace(snap, prev)
            except OSError as exc:
                tmp.unlink(missing_ok=True)
                raise StoreWriteError(exc.errno, f"{snap}: cannot write ({exc.strerror})") from exc
            replace_durably(tmp, snap)
            old, self._snap_seq = self._snap_seq, self._seq
            if rotated:
                self._journal.keep_after(old)
            elif not prev.exists():  # the first snapshot: its copy is the previous one too
                copy_durably(snap, prev)
                self._journal.keep_after(self._seq)
            self._journal_base = self._journal.size
        finally:
            self._busy -= 1

    def close(self) -> None:
        """Compact, release the lock. Safe to call twice. If the snapshot cannot be written, every
        action is still in the journal (replayed on the next open); the error is raised after the
        lock is released."""
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

