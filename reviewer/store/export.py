"""Export a session's events: the CSV event table (RFC 4180) and a JSON provenance sidecar."""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

import reviewer
from reviewer.errors import BadInput
from reviewer.movie.base import Timing
from reviewer.store.events import utc_now
from reviewer.store.journal import write_json_atomic
from reviewer.store.table import STATUSES, write_csv


def sidecar_path(csv_path: str | os.PathLike) -> Path:
    """`events.csv` -> `events.json`; any other name gets `.json` appended."""
    p = Path(csv_path)
    return p.with_suffix(".json") if p.suffix.lower() == ".csv" else p.with_name(p.name + ".json")


def parse_statuses(text: str | Iterable[str]) -> tuple[str, ...]:
    items = text.split(",") if isinstance(text, str) else list(text)
    out = tuple(dict.fromkeys(s.strip().lower() for s in items if s.strip()))
    bad = [s for s in out if s not in STATUSES]
    if bad or not out:
        raise BadInput(f"--status: unknown status {', '.join(bad) or '(none)'}; "
                       f"use a comma list of {', '.join(STATUSES)}")
    return out


def _movie_facts(session, movie) -> dict:
    meta = session.meta
    frames = movie.n_frames if movie is not None else meta.get("frames")
    fps = movie.fps if movie is not None else meta.get("fps")
    if movie is not None:
        duration = movie.duration_s
    else:
        duration = Timing(fps=fps, times_s=session.times_s).duration_s(frames or 0)
    return {
        "path": str(movie.path) if movie is not None else meta.get("movie"),
        "fingerprint": (movie.fingerprint if movie is not None else None) or meta.get("fingerprint"),
        "frames": frames,
        "fps": fps,
        "duration_s": duration,
        "height": movie.height if movie is not None else meta.get("height"),
        "width": movie.width if movie is not None else meta.get("width"),
    }


def export_events(session, csv_path: str | os.PathLike,
                  statuses: Iterable[str] = STATUSES, movie=None) -> tuple[Path, Path]:
    """Write the events with the given statuses to csv_path and the provenance beside it."""
    wanted = parse_statuses(statuses)
    csv_path = Path(csv_path)
    rows = [e.as_row() for e in session.events if e.status in wanted]
    write_csv(rows, csv_path)
    counts = session.counts()
    info = {
        "program": "reviewer",
        "version": reviewer.__version__,
        "exported_at": utc_now(),
        "movie": _movie_facts(session, movie),
        "detector": session.meta.get("detector"),
        "statuses": list(wanted),
        "counts": {**counts, "exported": len(rows)},
        "csv": csv_path.name,
        "session": str(session.folder),
    }
    json_path = sidecar_path(csv_path)
    write_json_atomic(json_path, info)
    return csv_path, json_path
