"""Where frame times come from, strongest first: the `fps` argument (--fps), a `<movie>.times.csv`
file beside the movie (header ``frame,time_s``, one row per frame), then the container's own metadata
(OME ``Plane@DeltaT``, OME ``Pixels@TimeIncrement``, ImageJ ``finterval``/``fps``, a raw descriptor's
``fps``, ...). Unknown timing is ``Timing()`` (fps None)."""

from __future__ import annotations

import csv
import math
from pathlib import Path
from typing import Any

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.base import TIMES_SUFFIX, Timing

# Seconds per unit, for the time units ImageJ and OME write (OME uses UCUM-style symbols).
_UNITS = {"s": 1.0, "sec": 1.0, "second": 1.0, "seconds": 1.0, "ms": 1e-3, "msec": 1e-3,
          "us": 1e-6, "µs": 1e-6, "\u03bcs": 1e-6, "usec": 1e-6, "ns": 1e-9, "min": 60.0, "h": 3600.0,
          "hr": 3600.0}


def _seconds(value: Any, unit: Any = "s") -> float | None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    scale = _UNITS.get(str(unit or "s").strip().lower())
    if scale is None or not math.isfinite(v) or v <= 0:
        return None
    return v * scale


def times_csv_path(movie_path: str | Path) -> Path:
    """``<movie>.times.csv`` beside the movie file (or folder)."""
    p = Path(movie_path)
    return p.parent / (p.name + TIMES_SUFFIX)


def read_times_csv(path: Path, n_frames: int) -> tuple[np.ndarray, list[str]]:
    """Per-frame seconds (relative to frame 0) from a ``frame,time_s`` CSV, and notices."""
    try:
        with open(path, newline="", encoding="utf-8") as f:
            rows = list(csv.reader(f))
    except (OSError, UnicodeDecodeError) as exc:
        raise BadInput(f"{path}: cannot read frame times ({exc.__class__.__name__})") from None
    if not rows or [c.strip().lower() for c in rows[0][:2]] != ["frame", "time_s"]:
        raise BadInput(f"{path}: frame times need the header 'frame,time_s'")
    try:
        table = np.array([(int(r[0]), float(r[1])) for r in rows[1:] if r and any(c.strip() for c in r)],
                         dtype=np.float64).reshape(-1, 2)
    except (ValueError, IndexError):
        raise BadInput(f"{path}: frame times must be an integer frame and a number of seconds") from None
    frames, times = table[:, 0].astype(np.int64), table[:, 1]
    if len(frames) < n_frames or not np.array_equal(frames[:n_frames], np.arange(n_frames)):
        raise BadInput(f"{path}: frame times must list frames 0..{n_frames - 1} in order "
                       f"({len(frames)} rows)")
    times = times[:n_frames]
    if not np.all(np.isfinite(times)) or np.any(np.diff(times) <= 0):
        raise BadInput(f"{path}: frame times must be finite and increasing")
    notices = []
    if len(frames) > n_frames:
        notices.append(f"{path.name}: {len(frames) - n_frames} times beyond the last frame ignored")
    return times - times[0], notices


def imagej_timing(md: dict | None) -> Timing | None:
    """Frame rate from ImageJ metadata (``finterval`` in ``tunit``, else ``fps``)."""
    if not md:
        return None
    interval = _seconds(md.get("finterval"), md.get("tunit", "s"))
    if interval:
        return Timing(fps=1.0 / interval, source="ImageJ finterval")
    fps = _seconds(md.get("fps"))
    if fps:
        return Timing(fps=fps, source="ImageJ fps")
    return None


def ome_timing(ome: dict | None, n_frames: int, image_index: int = 0, z: int = 0,
               c: int = 0) -> Timing | None:
    """Timing of one OME image's time points (plane z, channel c): per-plane DeltaT when every frame
    has one, else TimeIncrement.

    `ome` is ``tifffile.xml2dict(ome_xml)``."""
    if not ome:
        return None
    image = ome.get("OME", {}).get("Image")
    if isinstance(image, list):
        image = image[image_index] if len(image) > image_index else None
    pixels = (image or {}).get("Pixels") or {}
    planes = pixels.get("Plane")
    planes = [planes] if isinstance(planes, dict) else list(planes or [])
    planes = [p for p in planes if isinstance(p, dict) and _int(p.get("TheZ", 0)) == z
              and _int(p.get("TheC", 0)) == c]
    if n_frames > 1 and len(planes) >= n_frames:
        order = sorted(range(len(planes)), key=lambda i: _int(planes[i].get("TheT", 0)))[:n_frames]
        try:
            scale = [_UNITS.get(str(planes[i].get("DeltaTUnit", "s")).lower()) for i in order]
            times = np.array([float(planes[i]["DeltaT"]) * s for i, s in zip(order, scale, strict=True)])
        except (KeyError, TypeError, ValueError):
            times = None
        if times is not None and np.all(np.isfinite(times)) and np.all(np.diff(times) > 0):
            return Timing(times_s=times - times[0], source="OME DeltaT")
    step = _seconds(pixels.get("TimeIncrement"), pixels.get("TimeIncrementUnit", "s"))
    if step:
        return Timing(fps=1.0 / step, source="OME TimeIncrement")
    return None


def _int(value: Any) -> int:
    try:
        return int(value)
    except (TypeError, ValueError):
        return -1


def resolve(movie_path: Path, n_frames: int, stored: Timing | None, fps: float | None,
            notices: list[str]) -> Timing:
    """The timing a movie is read with: --fps, else a times CSV beside it, else the stored timing."""
    if fps is not None:
        if not (math.isfinite(fps) and fps > 0):
            raise BadInput(f"{movie_path}: fps must be a positive number, not {fps}")
        return Timing(fps=float(fps), source="--fps")
    csv_path = times_csv_path(movie_path)
    if csv_path.is_file() and n_frames > 0:
        times, more = read_times_csv(csv_path, n_frames)
        notices.extend(more)
        return Timing(times_s=times, source=f"times CSV {csv_path.name}")
    return stored if stored is not None else Timing()
