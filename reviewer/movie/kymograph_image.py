"""Writing a kymograph: an 8-bit PNG to look at (time downwards) and a float32 TIFF of the samples."""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput

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


def _same(a: Path, b: Path) -> bool:
    try:
        return a.exists() and b.exists() and os.path.samefile(a, b)
    except OSError:
        return a.resolve() == b.resolve()


def refuse_overwrite(outputs: list[Path], inputs: list[Path]) -> None:
    """BadInput when an output is an input, or a movie's descriptor or timestamps file."""
    for out in outputs:
        for src in inputs:
            src = Path(src)
            related = [src, Path(str(src) + ".json"), src.with_suffix(".json"),
                       Path(str(src) + ".times.csv")]
            if any(_same(Path(out), r) for r in related):
                raise BadInput(f"{out}: that is an input of this command; choose another -o")


def save_kymograph(image: np.ndarray, png: Path, meta: dict, events: np.ndarray | None = None,
                   inputs: list[Path] | None = None) -> Path:
    """Write `png` and its TIFF beside it (same stem); refuse to write over any input; each file
    goes through a temporary name in the same folder and is renamed into place."""
    import tifffile
    from PIL import Image

    png = Path(png)
    tif = png.with_suffix(".tif")
    refuse_overwrite([png, tif], inputs or [])
    if not png.parent.is_dir():
        raise BadInput(f"{png.parent}: no such folder")
    tmps = [png.with_name(f".{png.name}.tmp"), tif.with_name(f".{tif.name}.tmp")]
    try:
        Image.fromarray(picture(image, meta, events)).save(tmps[0], format="PNG")
        tifffile.imwrite(tmps[1], image.astype(np.float32),
                         description=json.dumps(meta, allow_nan=False, default=str))
        for tmp in tmps:
            with open(tmp, "rb") as f:
                os.fsync(f.fileno())
        os.replace(tmps[1], tif)
        os.replace(tmps[0], png)
    except OSError as exc:
        raise BadInput(f"{png}: cannot write ({exc.strerror or exc})") from None
    finally:
        for tmp in tmps:
            tmp.unlink(missing_ok=True)
    return tif
