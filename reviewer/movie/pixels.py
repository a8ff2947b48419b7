"""Pixel types: which dtypes frames come in, and colour frames turned into luminance."""

from __future__ import annotations

import os

import numpy as np

MAX_FRAME_BYTES = 8 << 30  # one frame over 8 GiB is refused: no camera writes such frames


def frame_limit() -> int:
    """Largest frame (bytes) a movie may have here: 8 GiB, or a quarter of this machine's memory."""
    try:
        memory = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (AttributeError, ValueError, OSError):
        return MAX_FRAME_BYTES
    return min(MAX_FRAME_BYTES, max(1 << 28, memory // 4))


def frame_size_problem(frame_bytes: int) -> str | None:
    """Why a frame of this many bytes cannot be read here, or None."""
    limit = frame_limit()
    if frame_bytes > limit:
        return (f"one frame would take {frame_bytes / 2**30:.1f} GiB, more than the "
                f"{limit / 2**30:.1f} GiB a frame may take on this machine")
    return None

# Frames keep these dtypes as stored (native byte order).
KEPT = (np.uint8, np.uint16, np.int16, np.uint32, np.float32)

# ITU-R BT.601 luma weights (Rec. 601: Y' = 0.299 R' + 0.587 G' + 0.114 B').
BT601 = np.array([0.299, 0.587, 0.114], dtype=np.float32)
RGB_NOTICE = "colour frames read as float32 luminance (ITU-R BT.601 weights 0.299 R + 0.587 G + 0.114 B)"


def output_dtype(dtype: np.dtype, what: str) -> tuple[np.dtype, str | None]:
    """The dtype frames are handed out in, and a notice when it differs from the stored one.

    Raises ValueError for types that are not pixel values (bool, complex, strings, records).
    """
    dtype = np.dtype(dtype)
    native = dtype.newbyteorder("=")
    if any(native == np.dtype(k) for k in KEPT):
        return native, None
    if dtype.kind in "iu" and dtype.itemsize <= 2:
        out = np.dtype(np.int16) if dtype.kind == "i" else np.dtype(np.uint16)
        return out, f"{what} holds {dtype.name} pixels: read as {out.name}"
    if dtype.kind in "iuf":
        return np.dtype(np.float32), f"{what} holds {dtype.name} pixels: read as float32"
    raise ValueError(f"pixel type {dtype} is not supported")


def luminance(rgb: np.ndarray) -> np.ndarray:
    """(..., 3 or 4) colour samples -> float32 luminance (BT.601 weights; alpha ignored)."""
    return np.tensordot(rgb[..., :3].astype(np.float32, copy=False), BT601, axes=([-1], [0]))


def to_frames(block: np.ndarray, dtype: np.dtype, rgb: bool) -> np.ndarray:
    """A read block (n, h, w[, s]) in the movie's output dtype (a fresh native-order array)."""
    if rgb:
        return luminance(block).astype(np.float32, copy=False)
    return np.array(block, dtype=dtype, copy=True)
