"""One event of the review (a row of the event table) and the changes the journal records.

A change is ``{"id": event_id, "before": fields | None, "after": fields | None}``: ``before`` None means
the event did not exist (it was added), ``after`` None means it is removed. Applying ``after`` redoes a
change, applying ``before`` undoes it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from datetime import UTC, datetime

from reviewer.store.table import COLUMNS


def utc_now() -> str:
    """Now as ISO 8601 UTC with millisecond precision and a 'Z' suffix."""
    return datetime.now(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def detector_id(index: int) -> str:
    return f"d{index:06d}"


def manual_id(number: int) -> str:
    return f"m{number:04d}"


@dataclass(slots=True)
class Event:
    """One event; its attributes are the columns of the event table (store/table.py COLUMNS)."""

    event_id: str
    frame: int
    time_s: float | None = None
    frame_end: int | None = None
    kind: str = "step"
    score: float | None = None
    x: float | None = None
    y: float | None = None
    status: str = "candidate"
    label: str | None = None
    note: str | None = None
    source: str = "detector"
    reviewed_at: str | None = None

    def as_row(self) -> dict:
        return {c: getattr(self, c) for c in COLUMNS}

    def values(self, names) -> dict:
        return {n: getattr(self, n) for n in names}


FIELDS = tuple(f.name for f in fields(Event))
assert FIELDS == COLUMNS, "Event attributes must match the event table columns"


def _opt_float(value) -> float | None:
    if value is None:
        return None
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(out) else out


def _opt_int(value) -> int | None:
    out = _opt_float(value)
    return None if out is None else int(out)


def _opt_text(value) -> str | None:
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    text = str(value)
    return text or None


def clean(values: dict) -> dict:
    """Coerce stored or DataFrame values to the Event field types (NaN / NA / '' become None)."""
    out = {}
    for name, value in values.items():
        if name not in FIELDS:
            continue
        try:
            if value is not None and value != value:  # NaN, pandas NA raises TypeError below
                value = None
        except TypeError:
            value = None
        if name == "frame":
            out[name] = int(value)
        elif name == "frame_end":
            out[name] = _opt_int(value)
        elif name in ("time_s", "score", "x", "y"):
            out[name] = _opt_float(value)
        else:
            out[name] = _opt_text(value)
    return out


def changed(event: Event, **new) -> dict | None:
    """The change that sets `new` on `event`, or None when nothing would change."""
    diff = {k: v for k, v in new.items() if getattr(event, k) != v}
    if not diff:
        return None
    return {"id": event.event_id, "before": event.values(diff), "after": diff}
