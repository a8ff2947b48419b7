"""Export a session's events: the CSV event table (RFC 4180) and a JSON provenance sidecar.

The export writes the event columns and, when the pixel size is known, each event's place in
nanometres (x_nm, y_nm = x, y times the pixel size). The pixel size comes, first found first, from
`--pixel-size` given to the export, the one given to the review (kept in the session's meta.json),
or the one stored with the movie; the sidecar says which (`pixel_size_nm`, `pixel_size_source`).
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

import reviewer
from reviewer.errors import BadInput
from reviewer.movie.base import Timing
from reviewer.movie.units import parse_length
from reviewer.outputs import guard, json_bytes, movie_files, opened, replacing
from reviewer.store.events import utc_now
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


GIVEN = "--pixel-size"


def parse_pixel_size(text: str) -> float:
    """'0.05nm', '0.5A', '50pm', '0.01um' -> nanometres per pixel (BadInput when not a length)."""
    return parse_length(text, GIVEN) * 1e9


def pixel_size(session, movie=None, given_nm: float | None = None) -> tuple[float | None, str | None]:
    """(nm per pixel, where it came from), or (None, None) when nothing states it."""
    if given_nm is not None:
        return float(given_nm), GIVEN
    kept = session.meta.get("pixel_size_nm")
    if kept:
        return float(kept), str(session.meta.get("pixel_size_source") or GIVEN)
    stored = getattr(movie, "pixel_size_nm", None) if movie is not None else None
    if stored:
        return float(stored), f"movie metadata: {movie.layout.split(',')[0]}"
    return None, None


def export_row(event, pixel_nm: float | None) -> dict:
    """One event's row of the export: its columns, and its place in nm when the pixel size is known."""
    row = event.as_row()
    for axis in ("x", "y"):
        v = row[axis]
        row[f"{axis}_nm"] = v * pixel_nm if v is not None and pixel_nm is not None else None
    return row


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


def export_inputs(session, movie=None) -> list:
    """What an export must never overwrite besides the session's files: the movie's files."""
    given = session.meta.get("movie") if movie is None else None
    return movie_files(movie, given)


def export_events(session, csv_path: str | os.PathLike,
                  statuses: Iterable[str] = STATUSES, movie=None,
                  pixel_size_nm: float | None = None) -> tuple[Path, Path]:
    """Write the events with the given statuses to csv_path and the provenance beside it; a
    session open for writing remembers the path (`Session.last_export`).

    Raises BadInput when either file would overwrite an input (the movie, its descriptor or times
    file, a session file) and `reviewer.outputs.WriteFailed` (also an OSError) when writing fails;
    either way no file was changed."""
    wanted = parse_statuses(statuses)
    csv_path = Path(csv_path)
    json_path = sidecar_path(csv_path)
    guard([csv_path, (json_path, f"sidecar of {csv_path.name}")], export_inputs(session, movie),
          sessions=[session.folder])
    pixel_nm, pixel_source = pixel_size(session, movie, pixel_size_nm)
    rows = [export_row(e, pixel_nm) for e in session.events if e.status in wanted]
    counts = session.counts()
    info = {
        "program": "reviewer",
        "version": reviewer.__version__,
        "exported_at": utc_now(),
        "movie": _movie_facts(session, movie),
        "detector": session.meta.get("detector"),
        "statuses": list(wanted),
        "counts": {**counts, "exported": len(rows)},
        "reviewers": list(dict.fromkeys([*getattr(session, "reviewers", []),
                                         *(r["reviewer"] for r in rows if r["reviewer"])])),
        "pixel_size_nm": pixel_nm,
        "pixel_size_source": pixel_source,
        "csv": csv_path.name,
        "session": str(session.folder),
    }
    data = json_bytes(info)
    # Both files are written in full first; then the sidecar is renamed into place before the CSV.
    # Readers start from the CSV and look for its sidecar, so a CSV never appears without one: a
    # crash between the two renames leaves the new sidecar beside the previous CSV (or beside none),
    # which describes the same movie; the other order could leave a CSV with no sidecar.
    with replacing(json_path, csv_path) as (tmp_json, tmp_csv):
        with opened(tmp_csv, newline="", encoding="utf-8", errors="surrogateescape") as f:
            write_csv(rows, f)
        with opened(tmp_json, "wb") as f:
            f.write(data)
    remember = getattr(session, "remember_export", None)
    if remember is not None:
        remember(csv_path)
    return csv_path, json_path
