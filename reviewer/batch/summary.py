"""The batch summary: one row per movie, written as CSV (and JSON) through a temporary file."""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

COLUMNS = ("movie", "frames", "duration_s", "fps", "step", "transient", "global", "candidates",
           "scan_s", "status", "error", "notices", "candidates_csv", "worker")


def finite(v):
    return None if isinstance(v, float) and not math.isfinite(v) else v


def write_summary(rows: list[dict], path: Path, as_json: bool = False) -> None:
    import csv

    tmp = path.with_name(f".{path.name}.tmp")
    try:
        with open(tmp, "w", newline="", encoding="utf-8") as f:
            if as_json:
                json.dump([{c: finite(r.get(c)) for c in COLUMNS} for r in rows], f,
                          allow_nan=False, indent=1)
            else:
                w = csv.writer(f, lineterminator="\r\n")
                w.writerow(COLUMNS)
                for r in rows:
                    w.writerow(["" if r.get(c) is None else r.get(c) for c in COLUMNS])
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def counts(rows: list[dict]) -> dict:
    out = {"done": 0, "skipped": 0, "failed": 0, "cancelled": 0}
    for r in rows:
        out[r.get("status", "failed")] = out.get(r.get("status", "failed"), 0) + 1
    return out
