"""Writing a kymograph: an 8-bit PNG to look at (time downwards) and a float32 TIFF of the samples."""

from __future__ import annotations

from pathlib import Path

import numpy as np

MARK_PX = 3  # width of the event-mark margin at the left of the PNG


def to_8bit(image: np.ndarray, low: float = 0.5, high: float = 99.5) -> np.ndarray:
    """Percentile contrast (0.5-99.5 % by default) to uint8; a flat image is mid-grey."""
    finite = image[np.isfinite(image)]
    if finite.size == 0:
        return np.full(image.shape, 128, np.uint8)
    lo, hi = np.percentile(finite, [low, high])
    if not hi > lo:
        return np.full(image.shape, 128, np.uint8)
    scaled = (np.nan_to_num(image, nan=lo) - lo) / (hi - lo)
    return (np.clip(scaled, 0, 1) * 255 + 0.5).astype(np.uint8)


def picture(image: np.ndarray, meta: dict, events: np.ndarray | None = None) -> np.ndarray:
    """The PNG's pixels: RGB, with a left margin where rows holding an event are marked."""
    grey = to_8bit(image)
    rgb = np.repeat(grey[:, :, None], 3, axis=2)
    if events is None:
        return rgb
    margin = np.zeros((grey.shape[0], MARK_PX, 3), np.uint8)
    rows = (np.asarray(events, np.int64) - meta["first_frame"]) // meta["bin_frames"]
    rows = rows[(rows >= 0) & (rows < grey.shape[0])]
    margin[rows] = (255, 200, 0)
    return np.concatenate([margin, rgb], axis=1)


def outputs_of(png: Path) -> list:
    """The files a kymograph writes, for reviewer.outputs.guard (call it before the long pass)."""
    return [png, (png.with_suffix(".tif"), f"samples of {png.name}")]


def save_kymograph(image: np.ndarray, png: Path, meta: dict,
                   events: np.ndarray | None = None) -> Path:
    """Write `png` and its TIFF beside it (same stem); both appear whole or not at all."""
    import tifffile
    from PIL import Image

    from reviewer.outputs import json_text, replacing

    png = Path(png)
    tif = png.with_suffix(".tif")
    with replacing(tif, png) as (tmp_tif, tmp_png):
        Image.fromarray(picture(image, meta, events)).save(tmp_png, format="PNG")
        tifffile.imwrite(tmp_tif, image.astype(np.float32), description=json_text(meta))
    return tif
