"""Clips of an event: the frames around it, cropped, with one contrast, a time stamp and a scale bar.

Three products, chosen by the output's extension:
- ``.gif`` / ``.apng``: an animation for slides (every frame from `before` frames before the event to
  `after` frames after it);
- ``.png``: a strip for papers: the mean of the `before` frames before | the event frame | the mean
  of the `after` frames from the event on;
- ``.tif``: the raw crop of every frame of the clip, unscaled, for analysis.
Contrast is fixed over the whole clip (0.5-99.5 % percentiles of all its frames), so brightness changes
are real. The event frame is the first frame showing the new state.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.units import format_length, round_length

GAP_PX = 4  # white gap between the panels of a strip


@dataclass(frozen=True)
class Window:
    """Which frames and which part of them."""

    first: int
    event: int
    stop: int  # one past the last frame
    top: int
    left: int
    height: int
    width: int

    @classmethod
    def around(cls, movie, frame: int, before: int, after: int, x=None, y=None,
               crop: int | None = 96) -> Window:
        if not 0 <= frame < movie.n_frames:
            raise BadInput(f"frame {frame} is outside the movie (0..{movie.n_frames - 1})")
        if before < 0 or after < 1:
            raise BadInput("--before must be 0 or more and --after 1 or more frames")
        first, stop = max(0, frame - before), min(movie.n_frames, frame + after)
        h, w = movie.height, movie.width
        if crop is None or x is None or y is None or not (math.isfinite(x) and math.isfinite(y)):
            return cls(first, frame, stop, 0, 0, h, w)
        ch, cw = min(crop, h), min(crop, w)
        top = int(np.clip(round(y - ch / 2), 0, h - ch))
        left = int(np.clip(round(x - cw / 2), 0, w - cw))
        return cls(first, frame, stop, top, left, ch, cw)

    def read(self, movie) -> np.ndarray:
        out = np.empty((self.stop - self.first, self.height, self.width), np.float32)
        for s, block in movie.iter_blocks(64, self.first, self.stop):
            out[s - self.first:s - self.first + len(block)] = block[
                :, self.top:self.top + self.height, self.left:self.left + self.width]
        return out


def contrast(frames: np.ndarray) -> tuple[float, float]:
    finite = frames[np.isfinite(frames)]
    if finite.size == 0:
        return 0.0, 1.0
    lo, hi = np.percentile(finite, [0.5, 99.5])
    return (float(lo), float(hi)) if hi > lo else (float(lo), float(lo) + 1.0)


def to_grey(frame: np.ndarray, lo: float, hi: float) -> np.ndarray:
    return (np.clip((np.nan_to_num(frame, nan=lo) - lo) / (hi - lo), 0, 1) * 255 + 0.5).astype(
        np.uint8)


def default_zoom(width: int, target: int = 320) -> int:
    """Whole-number enlargement so that a small crop is at least ~`target` pixels wide."""
    return max(1, min(8, target // max(width, 1)))


@dataclass(frozen=True)
class Bar:
    metres: float
    pixels: int  # in the output image (movie pixels x zoom)
    text: str


def scale_bar(pixel_m: float | None, width_px: int, zoom: int) -> Bar | None:
    """A round length of about a fifth of the image width (never over 40 %)."""
    if not pixel_m:
        return None
    metres = round_length(width_px * pixel_m / 5)
    if metres / pixel_m > 0.4 * width_px:
        return None
    return Bar(metres, int(round(metres / pixel_m * zoom)), format_length(metres))


def annotate(grey: np.ndarray, zoom: int, stamp: str | None, bar: Bar | None):
    """An 8-bit frame enlarged by `zoom`, with a time stamp (top left) and a scale bar (bottom left)
    burnt in, white on a black box. Returns a Pillow image."""
    from PIL import Image, ImageDraw, ImageFont

    img = Image.fromarray(grey).convert("RGB")
    if zoom > 1:
        img = img.resize((img.width * zoom, img.height * zoom), Image.NEAREST)
    draw = ImageDraw.Draw(img)
    font = ImageFont.load_default()
    if stamp:
        box = draw.textbbox((3, 2), stamp, font=font)
        draw.rectangle((box[0] - 2, box[1] - 1, box[2] + 2, box[3] + 1), fill=(0, 0, 0))
        draw.text((3, 2), stamp, fill=(255, 255, 255), font=font)
    if bar:
        y = img.height - 6
        x0 = 6
        box = draw.textbbox((x0, 0), bar.text, font=font)
        th = box[3] - box[1]
        draw.rectangle((x0 - 3, y - th - 8, x0 + max(bar.pixels, box[2] - box[0]) + 2, y + 4),
                       fill=(0, 0, 0))
        draw.rectangle((x0, y, x0 + bar.pixels - 1, y + 2), fill=(255, 255, 255))
        draw.text((x0, y - th - 5), bar.text, fill=(255, 255, 255), font=font)
    return img


def stamp_text(movie, frame: int) -> str:
    t = movie.timing.time_of(frame)
    return f"frame {frame}" if t is None else f"t = {t:.4f} s  (frame {frame})"


def strip_panels(frames: np.ndarray, window: Window) -> list[tuple[np.ndarray, str]]:
    """before-mean | event frame | after-mean, with their captions."""
    k = window.event - window.first
    panels = []
    if k > 0:
        panels.append((frames[:k].mean(axis=0), f"mean of {k} before"))
    panels.append((frames[k], "event"))
    panels.append((frames[k:].mean(axis=0), f"mean of {len(frames) - k} from event"))
    return panels
