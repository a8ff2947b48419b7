"""Adapter to RosettaSciIO (optional extra ``formats``): files of the many formats that general-purpose
library reads — microscope vendors' formats among them — mapped lazily onto the Movie interface.

Registered as the ``*`` reader of the entry-point group ``reviewer.readers`` (see `plugins`), so it
is tried after the built-in readers, for files whose suffix one of RosettaSciIO's plug-ins claims.
The library returns each signal as a dict with its (lazy, dask) ``data`` and ``axes``; a signal with
one navigation axis and two signal axes is a movie (its navigation axis is time), a 2-D signal is a
one-frame movie. A time unit on the frame axis gives the frame interval; a length unit on the signal
axes gives the pixel size.
"""

from __future__ import annotations

import importlib
import logging
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.arrays import AxesView
from reviewer.movie.base import Movie, Timing, fingerprint_file
from reviewer.movie.extra import Lifted
from reviewer.movie.npy import DatasetMovie, frames_layout
from reviewer.movie.pixels import frame_limit
from reviewer.movie.timing import _seconds

NM_PER = {"nm": 1.0, "µm": 1e3, "um": 1e3, "\u03bcm": 1e3, "å": 0.1, "a": 0.1, "angstrom": 0.1,
          "pm": 1e-3, "mm": 1e6, "m": 1e9}


def _plugin_for(rsciio, path: Path) -> dict | None:
    suffix = path.suffix.lower().lstrip(".")
    for plugin in rsciio.IO_PLUGINS:
        if suffix in {str(e).lower() for e in plugin.get("file_extensions", ())}:
            return plugin
    return None


def _fingerprint(path: Path) -> str:
    """The file and the files beside it with the same stem (formats such as Ripple keep the pixels
    in a second file: ``m.rpl`` + ``m.raw``)."""
    beside = sorted(p for p in path.parent.glob(path.stem + ".*") if p != path and p.is_file())
    return fingerprint_file(path, also=tuple(beside))


def _frame_axis(axes: list[dict], ndim: int) -> int:
    """Array index of the time axis of a 3-D signal: its one navigation axis, else the first."""
    nav = [k for k, a in enumerate(axes[:ndim]) if a.get("navigate")]
    return nav[0] if len(nav) == 1 else 0


def open_with_rsciio(path: Path) -> Movie | None:
    """The movie in `path` as RosettaSciIO reads it; None when no RosettaSciIO plug-in claims it."""
    try:
        rsciio = importlib.import_module("rsciio")
    except ImportError:
        return None
    plugin = _plugin_for(rsciio, Path(path))
    if plugin is None:
        return None
    log = logging.getLogger("rsciio")
    level = log.level
    log.setLevel(logging.ERROR)  # e.g. "numba is not installed": not the user's business here
    try:
        reader = importlib.import_module(plugin["api"]).file_reader
        try:
            signals = reader(str(path), lazy=True)
        except Exception:  # noqa: BLE001 - some plug-ins fail lazily; small files load whole
            if Path(path).stat().st_size > frame_limit():
                raise
            signals = reader(str(path), lazy=False)
    finally:
        log.setLevel(level)
    colour = set()
    for k, s in enumerate(signals):
        dtype = getattr(s.get("data"), "dtype", None)
        if dtype is not None and dtype.names and set(dtype.names) >= {"R", "G", "B"}:
            # colour stored as a record per pixel (RosettaSciIO's rgb8/rgba8): plain samples last
            s["data"] = np.stack([np.asarray(s["data"][c]) for c in ("R", "G", "B")], axis=-1)
            colour.add(k)

    def image_dims(k: int) -> int:
        return len(getattr(signals[k].get("data"), "shape", ())) - (k in colour)

    images = [k for k in range(len(signals)) if image_dims(k) in (2, 3)]
    if not images:
        shapes = ", ".join(str(tuple(s["data"].shape)) for s in signals)[:100]
        raise BadInput(f"{path}: RosettaSciIO ({plugin['name']}) finds no image stack here ({shapes})")
    best = max(images, key=lambda k: (image_dims(k), signals[k]["data"].size))
    data, axes = signals[best]["data"], list(signals[best].get("axes") or [])
    if axes and "index_in_array" in axes[0]:
        axes.sort(key=lambda a: a["index_in_array"])
    notices = [f"read by RosettaSciIO's {plugin['name']} plug-in"]
    timing, pixel_nm, space = Timing(), None, axes[-2:]
    if image_dims(best) == 3:
        t = _frame_axis(axes, 3)
        order = (t, *(k for k in range(data.ndim) if k != t))
        view = data if t == 0 else AxesView(data, tuple(None if k == t else slice(None)
                                                       for k in range(data.ndim)), order)
        if len(axes) >= 3:
            step = _seconds(axes[t].get("scale"), axes[t].get("units") or "")
            if step:
                timing = Timing(fps=1.0 / step, source=f"{plugin['name']} time axis")
            space = [a for k, a in enumerate(axes[:3]) if k != t]
    else:
        view = Lifted(data)
        notices.append("a single 2-D image: read as a 1-frame movie")
    for a in space[-1:]:
        scale = NM_PER.get(str(a.get("units") or "").strip().lower())
        if scale and float(a.get("scale") or 0) > 0:
            pixel_nm = float(a["scale"]) * scale
    shape, rgb, more = frames_layout(tuple(view.shape), path, "signal")
    movie = DatasetMovie(view, Path(path), layout=f"{plugin['name']} file (RosettaSciIO), "
                         f"{shape[0]} frames", rgb=rgb, timing=timing,
                         fingerprint=_fingerprint(Path(path)), notices=notices + more)
    movie.pixel_size_nm = pixel_nm
    return movie
