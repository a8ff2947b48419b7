"""Rebuilding a session's state from its files: a snapshot (or the previous one) plus the journal.

Files: ``snapshot.json`` (state up to its ``seq``), ``snapshot.json.prev`` (the snapshot before it),
``journal.jsonl`` (every action after the previous snapshot's seq; see store/journal.py).

A reader of a live session (export, a read-only UI) reads the journal first, then a snapshot. Snapshots
only move forward and the journal always holds every action after ``snapshot.json.prev``, so the
snapshot read second is at least as new as the one the journal was cut against; the pair is one state
the session really had when the journal lines after the snapshot's seq run on from it without a gap.
When they do not (a compaction happened between the two reads), or the journal ends in a line still
being written, both are read again (a line torn by a crash is accepted, with a notice, after a while).

A snapshot that cannot be read is never used nor overwritten: the writer moves it aside
(``snapshot.json.damaged-<time>``) and rebuilds from the previous snapshot and the journal; a reader
only says so.
"""

from __future__ import annotations

import json
import os
import time
from dataclasses import dataclass, field
from pathlib import Path

from reviewer.store.journal import JOURNAL, PREV, SNAPSHOT, read_journal
from reviewer.store.state import ReviewState

READ_TRIES = 40


@dataclass
class Loaded:
    state: ReviewState
    snapshot_seq: int | None  # seq of snapshot.json as read (None: none, or it was unusable)
    records: list[dict] = field(default_factory=list)
    notices: list[str] = field(default_factory=list)
    cut: int | None = None  # length to cut the journal to (a torn last line)
    damaged: list[Path] = field(default_factory=list)  # snapshot files that could not be read


def _load(path: Path) -> tuple[ReviewState | None, str | None]:
    """(state, None) from a snapshot file; (None, None) if missing; (None, why) if unusable."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return None, None
    except OSError as exc:
        return None, exc.strerror or str(exc)
    try:
        snap = json.loads(data)
        if not isinstance(snap, dict) or not isinstance(snap.get("seq"), int):
            raise ValueError("not a session snapshot")
        state = ReviewState()
        state._load_snapshot(snap)
    except (ValueError, TypeError, KeyError, IndexError, AttributeError) as exc:
        return None, str(exc) or type(exc).__name__
    return state, None


def _base(folder: Path, notices: list[str], damaged: list[Path]) -> tuple[ReviewState, int | None]:
    """The newest usable snapshot: snapshot.json, else snapshot.json.prev, else an empty state."""
    state, why = _load(folder / SNAPSHOT)
    if state is not None:
        return state, state._seq
    if why is not None:
        damaged.append(folder / SNAPSHOT)
    prev, why_prev = _load(folder / PREV)
    if why is not None:
        where = "the previous snapshot and the journal" if prev is not None else "the journal alone"
        notices.append(f"{folder / SNAPSHOT}: cannot be read ({why}); rebuilt from {where}")
    if why_prev is not None:
        damaged.append(folder / PREV)
        notices.append(f"{folder / PREV}: cannot be read ({why_prev}); not used")
    return (prev if prev is not None else ReviewState()), None


def _runs_on(records: list[dict], floor: int) -> bool:
    seqs = [r.get("seq") for r in records if isinstance(r.get("seq"), int) and r["seq"] > floor]
    return seqs == list(range(floor + 1, floor + 1 + len(seqs)))


def load_state(folder: Path, live_writer_possible: bool) -> Loaded:
    """Read the session's files. live_writer_possible: another process may be writing (we hold no
    lock), so read journal then snapshot and retry until they fit together."""
    tries = READ_TRIES if live_writer_possible else 1
    for attempt in range(tries):
        records, notes, cut = read_journal(folder / JOURNAL)
        notices: list[str] = []
        damaged: list[Path] = []
        state, snap_seq = _base(folder, notices, damaged)
        torn = cut is not None  # a line being written right now, or left by a crash
        gap = not _runs_on(records, state._seq) and not notes
        if attempt < tries - 1 and (torn or gap):
            time.sleep(0.001 * (attempt + 1))
            continue
        return Loaded(state, snap_seq, records, notes + notices, cut, damaged)
    raise AssertionError("unreachable")


def move_aside(path: Path) -> Path:
    """Rename an unreadable snapshot out of the way (never deleted, never overwritten)."""
    stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
    target = path.with_name(f"{path.name}.damaged-{stamp}")
    n = 1
    while target.exists():
        n += 1
        target = path.with_name(f"{path.name}.damaged-{stamp}-{n}")
    os.rename(path, target)
    return target
