"""One event of the review (a row of the event table) and the changes the journal records.

A change is ``{"id": event_id, "before": fields | None, "after": fields | None}``: ``before`` None means
the event did not exist (it was added), ``after`` None means it is removed. Applying ``after`` redoes a
change, applying ``before`` undoes it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields
from datetime import UTC, datetime

import numpy as np
import pandas as pd

from reviewer.store.table import CAUSE_WORDS, EVENT_COLUMNS


def utc_now() -> str:
    """Now as ISO 8601 UTC with millisecond precision and a 'Z' suffix."""
    return datetime.now(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def detector_id(index: int) -> str:
    return f"d{index:06d}"


def manual_id(number: int) -> str:
    """m000001, ...: six digits like detector ids (sessions and exports made before also hold m0001)."""
    return f"m{number:06d}"


@dataclass(slots=True)
class Event:
    """One event; its attributes are the columns of the event table (store/table.py EVENT_COLUMNS).

    cause: what a `global` candidate is, from the detector (detect/candidates.py CAUSES: stage,
    blank, beam, unknown); None for other kinds. reviewer: who made the latest decision (set with
    reviewed_at)."""

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
    cause: str | None = None
    reviewer: str | None = None

    def as_row(self) -> dict:
        return {c: getattr(self, c) for c in EVENT_COLUMNS}

    @property
    def cause_words(self) -> str | None:
        """The cause as the list and status line say it ('blank', 'beam step', ...); None without one."""
        return None if self.cause is None else CAUSE_WORDS.get(self.cause, self.cause)

    def values(self, names) -> dict:
        return {n: getattr(self, n) for n in names}


FIELDS = tuple(f.name for f in fields(Event))
assert FIELDS == EVENT_COLUMNS, "Event attributes must match the event table columns"


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


def _column(df, name: str, n: int, kind: str) -> list:
    if name not in df.columns:
        return [None] * n
    col = df[name]
    if kind == "text":
        return [None if (v is None or v == "" or pd.isna(v)) else str(v) for v in col.tolist()]
    values = np.array(pd.to_numeric(col, errors="coerce"), dtype=np.float64)
    bad = ~np.isfinite(values)
    values[bad] = 0.0
    out = (values.astype(np.int64) if kind == "int" else values).tolist()
    for i in np.flatnonzero(bad).tolist():
        out[i] = None
    return out


def candidate_rows(df, time_of_frames) -> list[list]:
    """Rows (FIELDS order) for the detector's candidates DataFrame, ids by candidate order."""
    n = len(df)
    if "frame" not in df.columns:
        raise ValueError("candidates need a 'frame' column")
    frames = np.asarray(df["frame"], dtype=np.int64)
    times = time_of_frames(frames) if n else None
    time_s = np.asarray(times, dtype=np.float64).tolist() if times is not None else \
        _column(df, "time_s", n, "float")
    kind = _column(df, "kind", n, "text")
    cols = {
        "event_id": [detector_id(i) for i in range(n)],
        "frame": frames.tolist(),
        "time_s": time_s,
        "frame_end": _column(df, "frame_end", n, "int"),
        "kind": [k or "step" for k in kind],
        "score": _column(df, "score", n, "float"),
        "x": _column(df, "x", n, "float"),
        "y": _column(df, "y", n, "float"),
        "status": ["candidate"] * n,
        "label": [None] * n,
        "note": [None] * n,
        "source": ["detector"] * n,
        "reviewed_at": [None] * n,
        "cause": _column(df, "cause", n, "text"),
        "reviewer": [None] * n,
    }
    return [list(r) for r in zip(*(cols[f] for f in FIELDS), strict=True)]
