"""meta.json of a session: the movie (path, fingerprint, frames, fps, size) and the detector settings.

Per-frame times, when the movie has them, go beside it in times_s.npy (float64) to keep meta.json small.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from reviewer.store.events import utc_now
from reviewer.store.journal import write_json_atomic

META = "meta.json"
TIMES = "times_s.npy"


def _line(value) -> list[float]:
    """x0, y0, x1, y1, width of the review's kymograph line (movie pixels)."""
    out = [float(v) for v in value]
    if len(out) != 5:
        raise ValueError("a kymograph line is x0, y0, x1, y1, width")
    return out


# pixel_size_nm / pixel_size_source: a pixel size the user gave the review (--pixel-size), for exports
# kymograph_line: the line the review samples for its kymograph pane
_AS = {"frames": int, "fps": float, "height": int, "width": int, "detector": lambda v: v,
       "pixel_size_nm": float, "pixel_size_source": str, "kymograph_line": _line}
KEYS = tuple(_AS)


def load_meta(folder: Path) -> tuple[dict, np.ndarray | None, list[str]]:
    notes: list[str] = []
    meta: dict = {}
    times = None
    try:
        meta = json.loads((folder / META).read_text(encoding="utf-8"))
        if not isinstance(meta, dict):
            raise ValueError("not a JSON object")
    except FileNotFoundError:
        meta = {}
    except (OSError, ValueError) as exc:
        meta = {}
        notes.append(f"{folder / META}: unreadable, ignored ({exc})")
    if meta.get("times_file"):
        try:
            times = np.load(folder / TIMES, allow_pickle=False).astype(np.float64)
        except (OSError, ValueError) as exc:
            notes.append(f"{folder / TIMES}: unreadable, per-frame times ignored ({exc})")
    return meta, times, notes


def merge_meta(meta: dict, times: np.ndarray | None, new: dict, movie_path, fingerprint: str,
               folder: Path | None) -> tuple[dict, np.ndarray | None]:
    """Overlay the given (non-None) values; write meta.json when something changed and folder is set."""
    out = dict(meta)
    out["movie"] = str(Path(movie_path).resolve()) if movie_path else out.get("movie")
    if fingerprint:
        out["fingerprint"] = fingerprint
    for key in KEYS:
        if new.get(key) is not None:
            value = new[key]
            out[key] = _AS[key](value)
    new_times = new.get("times_s")
    times_changed = False
    if new_times is not None:
        new_times = np.asarray(new_times, dtype=np.float64)
        times_changed = times is None or not np.array_equal(times, new_times)
        times = new_times
        out["times_file"] = TIMES
    if folder is not None and (out != meta or times_changed):
        out.setdefault("created", utc_now())
        if times_changed:
            tmp = folder / (TIMES + ".tmp")
            with open(tmp, "wb") as f:
                np.save(f, times)
                f.flush()
                os.fsync(f.fileno())
            os.replace(tmp, folder / TIMES)
        write_json_atomic(folder / META, out)
    return out, times
