"""Writing a clip: animated GIF / APNG, strip PNG, or TIFF stack (see clip.py), never over an input."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.clip import (
    GAP_PX,
    Window,
    annotate,
    contrast,
    scale_bar,
    stamp_text,
    strip_panels,
    to_grey,
)

KINDS = {".gif": "animation", ".apng": "animation", ".png": "strip", ".tif": "stack",
         ".tiff": "stack"}


def kind_of(path: Path) -> str:
    kind = KINDS.get(path.suffix.lower())
    if kind is None:
        raise BadInput(f"{path}: unknown clip type; use .gif or .apng (animation), .png (strip) "
                       f"or .tif (raw frames)")
    return kind


def render(frames: np.ndarray, window: Window, movie, kind: str, pixel_m: float | None,
           zoom: int, playback_fps: float) -> tuple[list, dict]:
    """Pillow images (or, for a stack, the raw crop as one array) and facts about them."""
    lo, hi = contrast(frames)
    bar = scale_bar(pixel_m, window.width, zoom)
    facts = {"first_frame": window.first, "event_frame": window.event, "frames": len(frames),
             "crop": [window.left, window.top, window.width, window.height], "zoom": zoom,
             "contrast": [lo, hi], "scale_bar": None}
    if bar:
        facts["scale_bar"] = {"length_m": bar.metres, "pixels": bar.pixels, "text": bar.text}
    if kind == "stack":
        return [frames], facts
    if kind == "animation":
        images = [annotate(to_grey(f, lo, hi), zoom, stamp_text(movie, window.first + i), bar)
                  for i, f in enumerate(frames)]
        facts["playback_fps"] = playback_fps
        return images, facts
    panels = strip_panels(frames, window)
    images = []
    for n, (img, caption) in enumerate(panels):
        stamp = stamp_text(movie, window.event) if caption == "event" else caption
        images.append(annotate(to_grey(img, lo, hi), zoom, stamp, bar if n == 0 else None))
    facts["panels"] = [c for _, c in panels]
    return images, facts


def _strip(images: list):
    from PIL import Image

    w = sum(i.width for i in images) + GAP_PX * (len(images) - 1)
    out = Image.new("RGB", (w, images[0].height), (255, 255, 255))
    x = 0
    for img in images:
        out.paste(img, (x, 0))
        x += img.width + GAP_PX
    return out


def write(images: list, kind: str, out: Path, facts: dict) -> None:
    """Write `out` whole or not at all (guard it against the inputs first: reviewer.outputs)."""
    import tifffile

    from reviewer.outputs import json_text, replacing

    with replacing(out) as (tmp,):
        if kind == "stack":
            tifffile.imwrite(tmp, images[0], description=json_text(facts))
        elif kind == "strip":
            _strip(images).save(tmp, format="PNG")
        else:
            ms = int(round(1000 / facts["playback_fps"]))
            fmt = "GIF" if out.suffix.lower() == ".gif" else "PNG"
            images[0].save(tmp, format=fmt, save_all=True, append_images=images[1:],
                           duration=ms, loop=0)
