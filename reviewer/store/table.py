"""The event table: one schema shared by `scan`, the review session, `export` and `kinetics`.

CSV follows RFC 4180 (comma separator, CRLF line ends, double quotes doubled, fields with a comma, quote
or line break quoted). A text cell that starts with = + - @ (or tab / carriage return) is prefixed with
an apostrophe so spreadsheet programs do not run it as a formula (OWASP "CSV injection" guidance).
"""

from __future__ import annotations

import csv
import io
import math
import os
from collections.abc import Iterable, Mapping
from pathlib import Path

# The columns an event holds (store/events.py Event); columns added later are appended at the end so
# readers of older tables keep working: cause (a global event's subtype), reviewer (who decided last).
EVENT_COLUMNS: tuple[str, ...] = (
    "event_id", "frame", "time_s", "frame_end", "kind", "score", "x", "y",
    "status", "label", "note", "source", "reviewed_at", "cause", "reviewer",
)
# Columns an export derives from an event: its place in nanometres when the pixel size is known.
DERIVED_COLUMNS: tuple[str, ...] = ("x_nm", "y_nm")
COLUMNS: tuple[str, ...] = EVENT_COLUMNS + DERIVED_COLUMNS
KINDS = ("step", "transient", "global", "manual")
STATUSES = ("candidate", "accepted", "rejected", "disputed")  # disputed: reviewers disagreed (merge)
SOURCES = ("detector", "manual")
# a global event's cause (detect/candidates.py CAUSES) in words for the list, status line and README
CAUSE_WORDS = {"blank": "blank", "beam": "beam step", "stage": "stage jump", "unknown": "unknown"}
_TEXT = {"kind", "status", "label", "note", "source", "reviewed_at", "cause", "reviewer"}
_DANGEROUS = ("=", "+", "-", "@", "\t", "\r")


def neutralise(text: str) -> str:
    """Make a text cell inert in spreadsheets (prefix an apostrophe to formula-like text)."""
    return "'" + text if text.startswith(_DANGEROUS) else text


def _cell(column: str, value: object) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if math.isnan(value):
            return ""
        if column in ("x", "y", "score"):
            return f"{value:.6g}" if column == "score" else f"{value:.2f}"
        if column in DERIVED_COLUMNS:
            return f"{value:.8g}"
        return repr(float(value))  # np.float64 is a float whose repr names numpy
    text = str(value)
    return neutralise(text) if column in _TEXT else text


def format_rows(rows: Iterable[Mapping[str, object]],
                columns: tuple[str, ...] = COLUMNS) -> Iterable[list[str]]:
    for row in rows:
        yield [_cell(c, row.get(c)) for c in columns]


def write_csv(rows: Iterable[Mapping[str, object]], path: str | os.PathLike | io.TextIOBase,
              columns: tuple[str, ...] = COLUMNS) -> None:
    """Write event rows (mappings keyed by column name) as RFC 4180 CSV, atomically for paths."""
    def _write(f) -> None:
        w = csv.writer(f, lineterminator="\r\n", quoting=csv.QUOTE_MINIMAL)
        w.writerow(columns)
        w.writerows(format_rows(rows, columns))

    if isinstance(path, io.TextIOBase):
        _write(path)
        return
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "w", newline="", encoding="utf-8") as f:
        _write(f)
        f.flush()
        os.fsync(f.fileno())
    os.replace(tmp, path)
