"""Movies inside array containers (HDF5, Zarr, .npz): which array is the movie, which of its axes is
time, and where its frame times are stored.

Rules (shared by every container):
- candidates are numeric arrays of 3 dimensions, or 4 with one singleton or a last axis of 3/4
  colour samples; the one with the most elements is the movie (``--dataset`` names another);
  several equally large ones are reported in one line;
- frames first (T, Y, X) or last (Y, X, T): from the chunk shape (one frame per chunk on that axis),
  else frames first unless the first two sizes are clearly more alike than the last two (then they
  are taken as the image, with a notice); ``--axes`` decides instead;
- timing from an attribute of the array, its group or the file (``fps``/``frame_rate`` in Hz,
  ``frame_interval`` in seconds or in the unit its ``unit`` attribute names), scalar or one-element
  array; or a one-dimensional time array beside the movie with one increasing value per frame.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.base import Timing
from reviewer.movie.timing import _UNITS, _seconds

PREFERRED = ("movie", "frames", "data")
RATE_KEYS = ("fps", "frame_rate", "framerate", "frames_per_second")
INTERVAL_KEYS = ("frame_interval", "frame_time", "time_increment", "dt")
TIME_NAMES = ("time", "times", "time_s", "timestamps", "timestamp", "frame_times", "t")
AXES = ("TYX", "YXT")


def _numeric(arr) -> bool:
    try:
        return np.dtype(arr.dtype).kind in "iuf"
    except TypeError:
        return False


def movie_shape(shape: tuple[int, ...]) -> tuple[int, ...] | None:
    """The shape without its one singleton axis (4-D), or None when it cannot hold a movie."""
    shape = tuple(int(s) for s in shape)
    if len(shape) == 4 and shape[-1] in (3, 4):
        return shape
    if len(shape) == 4 and 1 in shape:
        drop = shape.index(1)
        return shape[:drop] + shape[drop + 1:]
    return shape if len(shape) in (2, 3) else None


def pick(arrays: Mapping[str, object], path: Path, wanted: str | None, what: str) -> tuple[str, object]:
    """(name, array) of the movie among the container's arrays."""
    if wanted is not None:
        key = wanted.strip("/")
        found = {k.strip("/"): v for k, v in arrays.items()}
        if key not in found:
            names = ", ".join(sorted(found))[:160] or "none"
            raise BadInput(f"{path}: no {what} named {wanted} (it holds: {names})")
        return key, found[key]
    movies = {k: v for k, v in arrays.items() if _numeric(v) and movie_shape(v.shape) is not None}
    stacks = {k: v for k, v in movies.items() if len(movie_shape(v.shape)) >= 3}
    pool = stacks or movies
    if not pool:
        raise BadInput(f"{path}: no numeric 3-D image {what} found")
    size = max(math.prod(v.shape) for v in pool.values())
    best = {k: v for k, v in pool.items() if math.prod(v.shape) == size}
    if len(best) > 1:
        named = [k for k in best if k.rsplit("/", 1)[-1] in PREFERRED]
        if len(named) == 1:
            return named[0], best[named[0]]
        raise BadInput(f"{path}: several {what}s of {size} values ({', '.join(sorted(best))[:160]}); "
                       "choose one with --dataset")
    return next(iter(best.items()))


def holdings(arrays: Mapping[str, object], key: str, what: str) -> str | None:
    """A notice listing the other image arrays of the container, when there are any."""
    others = [(k, tuple(v.shape)) for k, v in arrays.items()
              if k != key and _numeric(v) and movie_shape(v.shape) is not None]
    if not others:
        return None
    listed = "; ".join(f"{k} {'x'.join(map(str, s))}" for k, s in sorted(others)[:6])
    more = f"; ... {len(others)} in all" if len(others) > 6 else ""
    return f"reading {what} {key}; the file also holds {listed}{more} (--dataset chooses another)"


def frames_axis(shape: tuple[int, ...], chunks: tuple[int, ...] | None, axes: str | None,
                notices: list[str], key: str) -> str:
    """'TYX' or 'YXT' for a 3-D shape (see the module rules)."""
    if axes is not None:
        if axes.upper() not in AXES:
            raise ValueError(f"--axes must be one of {', '.join(AXES)}")
        return axes.upper()
    if chunks and len(chunks) == 3:
        if chunks[-1] == 1 and chunks[0] > 1 and shape[-1] > 1:
            return "YXT"
        if chunks[0] == 1 and chunks[-1] > 1:
            return "TYX"
    a, b, c = shape
    first, last = max(a, b) / max(1, min(a, b)), max(b, c) / max(1, min(b, c))
    if first * 1.5 < last:  # frames first unless the first two sizes are clearly the more alike
        notices.append(f"{key}: frames taken from the last axis of {shape} (the first two are the "
                       "image, by their sizes); --axes TYX reads it the other way")
        return "YXT"
    return "TYX"


class AxesView:
    """A (T, Y, X[, S]) view of an array-like stored in another axis order; slicing T reads lazily."""

    def __init__(self, arr, index: tuple, order: tuple[int, ...]) -> None:
        # index: the array's full index with a None where T goes; order: the transpose after reading
        self.arr, self._index, self._order = arr, index, order
        probe = [s for s, i in zip(arr.shape, index, strict=True) if not isinstance(i, int)]
        self.shape = tuple(probe[k] for k in order)
        self.dtype = arr.dtype

    def __getitem__(self, sl: slice) -> np.ndarray:
        index = tuple(sl if i is None else i for i in self._index)
        return np.transpose(np.asarray(self.arr[index]), self._order)


def frames_view(arr, key: str, axes: str | None, notices: list[str]) -> tuple[object, str]:
    """(array-like with frames first, or None for a single 2-D image; the stored axes, e.g. 'YXT')."""
    shape = tuple(int(s) for s in arr.shape)
    chunks = getattr(arr, "chunks", None)
    chunks = tuple(chunks) if isinstance(chunks, tuple) else None
    index: list = [slice(None)] * len(shape)
    kept = list(range(len(shape)))
    if len(shape) == 4 and shape[-1] not in (3, 4) and 1 in shape:
        drop = shape.index(1)
        index[drop] = 0
        kept.remove(drop)
    core = tuple(shape[k] for k in kept)
    if len(core) == 2:
        return None, "YX"
    if len(core) == 4:  # colour samples last
        order_axes = "TYX"
    else:
        ck = tuple(chunks[k] for k in kept) if chunks else None
        order_axes = frames_axis(core, ck, axes, notices, key)
    label = order_axes + ("S" if len(core) == 4 else "")
    if len(kept) < len(shape):
        label = _with_singleton(label, shape, kept)
    t = kept[0] if order_axes == "TYX" else kept[2]
    index[t] = None
    if order_axes == "TYX" and len(kept) == len(shape):
        return arr, label
    # after indexing, the kept axes appear in file order: put T first, the others after it
    order = (kept.index(t), *(kept.index(k) for k in kept if k != t))
    return AxesView(arr, tuple(index), order), label


def _with_singleton(label: str, shape: tuple[int, ...], kept: list[int]) -> str:
    """The axes label with '1' where the dropped singleton axis sits, e.g. 'T1YX'."""
    out, it = [], iter(label)
    for k in range(len(shape)):
        out.append(next(it) if k in kept else "1")
    return "".join(out)


def positive_number(value) -> float | None:
    """A positive finite number from an attribute value (scalar, 1-element array, numeric text)."""
    if isinstance(value, bytes):
        value = value.decode("utf-8", "replace")
    try:
        arr = np.asarray(value, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError):
        return None
    if arr.size != 1 or not math.isfinite(arr[0]) or arr[0] <= 0:
        return None
    return float(arr[0])


def attribute_timing(attr_sets: list[tuple[str, Mapping]]) -> Timing | None:
    """Timing from the first attribute set (array, then its groups) that names a rate or interval."""
    for where, attrs in attr_sets:
        lower = {str(k).lower(): k for k in attrs}
        for name in RATE_KEYS:
            if name in lower:
                fps = positive_number(attrs[lower[name]])
                if fps:
                    return Timing(fps=fps, source=f"{where} attribute {lower[name]}")
        for name in INTERVAL_KEYS:
            if name in lower:
                step = positive_number(attrs[lower[name]])
                unit = next((attrs[lower[u]] for u in ("unit", "units", "time_unit", f"{name}_unit")
                             if u in lower), "s")
                if isinstance(unit, bytes):
                    unit = unit.decode("utf-8", "replace")
                step = _seconds(step, unit) if step else None
                if step:
                    return Timing(fps=1.0 / step, source=f"{where} attribute {lower[name]}")
    return None


def time_array_timing(siblings: Mapping[str, object], n_frames: int,
                      any_name: bool = False) -> Timing | None:
    """Timing from a 1-D array beside the movie named like a time axis (or, with `any_name`, any
    array given, e.g. the dimension scale of the time axis), one increasing value a frame."""
    for key, arr in siblings.items():
        name = key.rsplit("/", 1)[-1].lower()
        if not (any_name or name in TIME_NAMES) or len(getattr(arr, "shape", ())) != 1 \
                or not _numeric(arr):
            continue
        if arr.shape[0] != n_frames:
            continue
        times = np.asarray(arr[...], dtype=np.float64)
        attrs = getattr(arr, "attrs", {})
        unit = next((attrs[u] for u in ("unit", "units") if u in attrs), "s")
        if isinstance(unit, bytes):
            unit = unit.decode("utf-8", "replace")
        scale = _UNITS.get(str(unit).strip().lower())
        if scale is None or not np.all(np.isfinite(times)) or np.any(np.diff(times) <= 0):
            continue
        times = (times - times[0]) * scale
        return Timing(times_s=times, source=f"time array {key}")
    return None
