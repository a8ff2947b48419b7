"""Raw binary movies described by a small JSON file.

The descriptor sits beside the data as ``<data file>.json`` (e.g. ``run7.raw`` + ``run7.raw.json``);
either file may be given. Keys::

    {"shape": [frames, height, width]  (or "height" + "width", frames optional: from the file size),
     "dtype": "uint16", "byte_order": "little" | "big", "header_bytes": 0, "fps": 400.0,
     "file": "run7.raw"  (optional, relative to the descriptor),
     "pixel_size": 0.05, "pixel_unit": "nm"  (optional; the unit defaults to nm)}
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, Timing
from reviewer.movie.offsets import OffsetMovie, even_offsets
from reviewer.movie.pixels import output_dtype
from reviewer.movie.scale import to_nm

RAW_SUFFIXES = (".raw", ".bin", ".dat")


def descriptor_for(path: Path) -> tuple[Path, Path]:
    """(data file, descriptor file) for either of the two paths."""
    if path.suffix.lower() == ".json":
        return path.with_suffix(""), path
    return path, path.parent / (path.name + ".json")


def _load(desc_path: Path) -> dict:
    try:
        desc = json.loads(desc_path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise BadInput(f"{desc_path}: raw movie descriptor missing (shape, dtype, byte_order, "
                       "header_bytes, fps)") from None
    except (OSError, ValueError) as exc:
        raise BadInput(f"{desc_path}: unreadable raw movie descriptor ({exc})") from None
    if not isinstance(desc, dict):
        raise BadInput(f"{desc_path}: raw movie descriptor must be a JSON object")
    return desc


def open_raw(path: Path, fingerprint_of) -> Movie:
    data_path, desc_path = descriptor_for(path)
    desc = _load(desc_path)
    if "file" in desc:
        data_path = desc_path.parent / str(desc["file"])
    if not data_path.is_file():
        raise BadInput(f"{data_path}: raw data file missing")
    try:
        shape = [int(v) for v in desc.get("shape") or (desc["height"], desc["width"])]
        if len(shape) not in (2, 3) or min(shape) <= 0:
            raise ValueError("shape must be [frames, height, width] or [height, width]")
        order = {"little": "<", "big": ">", "<": "<", ">": ">"}[str(desc.get("byte_order", "little"))]
        dtype = np.dtype(str(desc["dtype"])).newbyteorder(order)
        header = int(desc.get("header_bytes", 0))
        fps = desc.get("fps")
        fps = float(fps) if fps is not None else None
        if header < 0 or (fps is not None and not (math.isfinite(fps) and fps > 0)):
            raise ValueError("header_bytes must be >= 0 and fps > 0")
        if dtype.kind not in "iuf":
            raise ValueError(f"dtype {dtype} is not a pixel type")
    except (KeyError, ValueError, TypeError) as exc:
        raise BadInput(f"{desc_path}: bad raw movie descriptor ({exc})") from None
    h, w = shape[-2:]
    frame_bytes = h * w * dtype.itemsize
    size = data_path.stat().st_size
    whole = max(0, (size - header) // frame_bytes)
    declared = shape[0] if len(shape) == 3 else None
    n = min(whole, declared) if declared else whole
    notices = []
    if n == 0:
        raise BadInput(f"{data_path}: raw data holds no whole {h}x{w} {dtype.name} frame ({size} bytes)")
    if declared and n < declared:
        notices.append(f"truncated: {n} of {declared} frames readable")
    elif not declared and (size - header) % frame_bytes:
        notices.append(f"truncated: {n} whole frames readable, {(size - header) % frame_bytes} "
                       "bytes left over")
    out, note = output_dtype(dtype, "raw data")
    notices += [note] if note else []
    timing = Timing(fps=fps, source=f"descriptor {desc_path.name}") if fps else Timing()
    offsets = even_offsets(header, n, frame_bytes, data_path)
    layout = f"raw binary + JSON descriptor, {n} frames {h}x{w} {dtype.name} ({desc.get('byte_order', 'little')}-endian)"
    movie = OffsetMovie(data_path, offsets, (h, w), dtype, out, layout=layout, timing=timing,
                        fingerprint=fingerprint_of(data_path, also=(desc_path,)), notices=notices)
    if desc.get("pixel_size") is not None:
        movie.pixel_size_nm = to_nm(desc["pixel_size"], desc.get("pixel_unit", "nm"))
        if movie.pixel_size_nm is None:
            raise BadInput(f"{desc_path}: pixel_size {desc['pixel_size']!r} "
                           f"{desc.get('pixel_unit', 'nm')!r} is not a length")
    return movie
