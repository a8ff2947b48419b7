"""Re-seeding a session's detector candidates after the movie changed, keeping the user's decisions.

Each detector event of the session is matched to a candidate of the new scan of the same kind whose
frame is within one frame of it (the nearest such candidate, each used once):

- a decided event (accepted, rejected, labelled or with a note) that matches keeps its id and its
  decision unchanged;
- a decided event with no match is kept too, with ``source`` set to ``orphaned`` (it stays in the
  event list and the export, and the session lists it until the change is acknowledged);
- an undecided candidate that matches keeps its id and takes the new candidate's values; one with no
  match is dropped;
- new candidates left over are added with ids after the highest detector id in the session;
- manual events are left as they are.
"""

from __future__ import annotations

from reviewer.store.events import FIELDS, Event, candidate_rows, detector_id
from reviewer.store.journal import ReadOnlySession

ORPHANED = "orphaned"
MATCH_FRAMES = 1  # same frame ±1
_NEW = ("frame", "time_s", "frame_end", "score", "x", "y", "cause")


def _decided(ev: Event) -> bool:
    return ev.status != "candidate" or ev.label is not None or ev.note is not None


def reseed_events(events: list[Event], rows: list[list]) -> tuple[list[Event], list[str], list[str]]:
    """(the new event list, ids of kept decisions, ids of orphaned decisions)."""
    new = [dict(zip(FIELDS, row, strict=True)) for row in rows]
    by_kind: dict[str, list[int]] = {}
    for i, cand in enumerate(new):
        by_kind.setdefault(cand["kind"], []).append(i)
    taken: set[int] = set()
    out: list[Event] = []
    kept: list[str] = []
    orphaned: list[str] = []
    top = -1
    for ev in sorted(events, key=lambda e: (e.frame, e.event_id)):
        if ev.event_id.startswith("d") and ev.event_id[1:].isdigit():
            top = max(top, int(ev.event_id[1:]))
        if ev.source not in ("detector", ORPHANED):
            out.append(ev)
            continue
        options = [i for i in by_kind.get(ev.kind, ())
                   if i not in taken and abs(new[i]["frame"] - ev.frame) <= MATCH_FRAMES]
        match = min(options, key=lambda i: (abs(new[i]["frame"] - ev.frame), i)) if options else None
        if match is not None:
            taken.add(match)
        if _decided(ev):
            if match is None:
                ev.source = ORPHANED
                orphaned.append(ev.event_id)
            else:
                ev.source = "detector"
                kept.append(ev.event_id)
            out.append(ev)
        elif match is not None:
            for name in _NEW:
                setattr(ev, name, new[match][name])
            out.append(ev)
    for i, cand in enumerate(new):
        if i not in taken:
            top += 1
            out.append(Event(**{**cand, "event_id": detector_id(top)}))
    return out, kept, orphaned


class MovieChangeMixin:
    """Session methods for a movie that changed since the session began (``movie_changes``)."""

    @property
    def needs_reseed(self) -> bool:
        """The movie changed and the detector candidates still come from the old one."""
        return any(not c["reseeded"] for c in self.movie_changes)

    def movie_change_text(self, change: dict) -> str:
        text = (f"{self.folder}: the movie changed since this session began (fingerprint "
                f"{change['from']} -> {change['to']})")
        if not change["reseeded"]:
            return text + "; the candidates are still those of the old movie until it is scanned"
        n = len(change["orphaned"])
        text += (f"; candidates re-seeded from the new scan, {change['kept']} decisions kept on "
                 f"matching events, {n} orphaned")
        if n:
            shown = ", ".join(change["orphaned"][:6]) + (", ..." if n > 6 else "")
            text += f" (source 'orphaned' in the event list and the export: {shown})"
        return text

    def reseed(self, candidates) -> tuple[int, int]:
        """Replace the detector candidates by a new scan's, keeping every decision (store/reseed.py).
        Made durable by writing the snapshot at once; on failure nothing changes. Not undoable (the
        undo history is cleared). Returns (decisions kept, decisions orphaned)."""
        if self.readonly:
            raise ReadOnlySession(f"{self.folder}: the session is open read-only; the candidates "
                                  "were not re-seeded")
        rows = candidate_rows(candidates, self.time_of_frames)
        saved = (dict(self._events), self._undo, self._redo, self.seeded,
                 [dict(c) for c in self.movie_changes], self._seq,
                 {e.event_id: e.as_row() for e in self._events.values()})
        events, kept, orphaned = reseed_events(list(self._events.values()), rows)
        self._busy += 1
        try:
            self._events = {e.event_id: e for e in events}
            self._sorted, self._undo, self._redo, self.seeded = None, [], [], True
            for change in self.movie_changes:
                if not change["reseeded"]:
                    change.update(reseeded=True, kept=len(kept), orphaned=orphaned)
            self._seq += 1
            try:
                self.compact()
            except OSError:
                (events_before, self._undo, self._redo, self.seeded, self.movie_changes,
                 self._seq, rows_before) = saved
                self._events = {k: Event(**rows_before[k]) for k in events_before}
                self._sorted = None
                raise
        finally:
            self._busy -= 1
        self._run_deferred()
        return len(kept), len(orphaned)

    def acknowledge_movie_change(self) -> bool:
        """The user has seen the movie-changed notice: stop showing it (journaled)."""
        if not self.movie_changes:
            return False
        self._commit("acknowledge")
        return True
