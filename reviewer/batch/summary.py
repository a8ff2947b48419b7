"""The batch summary: one row per movie, written as CSV (and JSON) through a temporary file."""

from __future__ import annotations

from pathlib import Path

COLUMNS = ("movie", "frames", "duration_s", "fps", "step", "transient", "global", "candidates",
           "scan_s", "status", "error", "notices", "candidates_csv", "worker")


def write_summary(rows: list[dict], path: Path, as_json: bool = False) -> None:
    """Whole or not at all (reviewer.outputs.replacing)."""
    import csv

    from reviewer.outputs import json_text, opened, replacing

    with replacing(path) as (tmp,), opened(tmp, newline="", encoding="utf-8") as f:
        if as_json:
            f.write(json_text([{c: r.get(c) for c in COLUMNS} for r in rows], indent=1))
        else:
            w = csv.writer(f, lineterminator="\r\n")
            w.writerow(COLUMNS)
            for r in rows:
                w.writerow(["" if r.get(c) is None else r.get(c) for c in COLUMNS])


def counts(rows: list[dict]) -> dict:
    out = {"done": 0, "skipped": 0, "failed": 0, "cancelled": 0}
    for r in rows:
        out[r.get("status", "failed")] = out.get(r.get("status", "failed"), 0) + 1
    return out
