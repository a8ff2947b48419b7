"""Regions of a frame for looking closely: the box a loupe shows, window means, contrast, direction.

Pure NumPy (and scipy.ndimage for smoothing); the review UI draws what these return. Coordinates:
x = column, y = row, pixel centres at integers, boxes as (y0, y1, x0, x1) with the ends exclusive.
"""

from __future__ import annotations

import math

import numpy as np

from reviewer.movie.kymograph import Line

Box = tuple[int, int, int, int]


def box_around(height: int, width: int, x: float, y: float, box_h: int, box_w: int) -> Box:
    """A box of at most box_h x box_w movie pixels centred on (x, y), shifted to stay inside."""
    bh, bw = max(1, min(int(box_h), height)), max(1, min(int(box_w), width))
    y0 = int(np.clip(math.floor(y + 0.5 - bh / 2), 0, height - bh))
    x0 = int(np.clip(math.floor(x + 0.5 - bw / 2), 0, width - bw))
    return y0, y0 + bh, x0, x0 + bw


def crop(image: np.ndarray, box: Box) -> np.ndarray:
    y0, y1, x0, x1 = box
    return image[y0:y1, x0:x1]


def magnify(image: np.ndarray, k: int) -> np.ndarray:
    """Each pixel repeated k x k times (nearest neighbour)."""
    if k <= 1:
        return image
    return np.repeat(np.repeat(image, k, axis=0), k, axis=1)


def contrast_limits(images, clip: float) -> tuple[float, float]:
    """(low, high): the `clip` and 100 - `clip` percentiles of the finite pixels of all `images`
    together, so that several pictures drawn with them compare directly. A flat region gets a range
    of one around its value."""
    parts = [np.asarray(a, dtype=np.float64).ravel() for a in images if a is not None]
    values = np.concatenate(parts) if parts else np.empty(0)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return 0.0, 1.0
    lo, hi = np.percentile(values, [clip, 100.0 - clip])
    return (float(lo), float(hi)) if hi > lo else (float(lo) - 0.5, float(lo) + 0.5)


def blink_ranges(frame: int, n: int, n_frames: int) -> tuple[tuple[int, int], tuple[int, int]]:
    """The frames of the 'before' mean (the n frames before `frame`) and of the 'after' mean
    (`frame` and the n - 1 after it; the event frame is the first showing the new state), clipped
    to the movie. Either may be empty at the movie's ends."""
    before = (max(0, frame - n), max(0, min(frame, n_frames)))
    after = (min(max(frame, 0), n_frames), min(n_frames, frame + n))
    return before, after


def window_mean(movie, start: int, stop: int) -> np.ndarray | None:
    """Mean of frames start..stop-1 (float32), read one frame at a time (memory: two frames).
    None when the range is empty."""
    if stop <= start:
        return None
    total = np.zeros(movie.shape, dtype=np.float64)
    for i in range(start, stop):
        total += movie.frame(i)
    return (total / (stop - start)).astype(np.float32)


def across_direction(image: np.ndarray, x: float, y: float, radius: int = 12,
                     sigma: float = 1.5) -> tuple[float, float]:
    """Unit vector (dx, dy) across the strongest edge near (x, y): the main eigenvector of the
    structure tensor (sum of the gradient's outer products) over a (2*radius+1)^2 neighbourhood of
    the Gaussian-smoothed image. (1, 0) when the neighbourhood is flat."""
    from scipy import ndimage

    h, w = image.shape
    pad = radius + int(3 * sigma) + 1
    y0, y1, x0, x1 = box_around(h, w, x, y, 2 * pad + 1, 2 * pad + 1)
    patch = ndimage.gaussian_filter(np.nan_to_num(np.asarray(image[y0:y1, x0:x1], np.float64)),
                                    sigma)
    gy, gx = np.gradient(patch)
    cy, cx = int(round(y)) - y0, int(round(x)) - x0
    sl = (slice(max(cy - radius, 0), cy + radius + 1), slice(max(cx - radius, 0), cx + radius + 1))
    jxx, jxy, jyy = (float((a * b)[sl].sum()) for a, b in ((gx, gx), (gx, gy), (gy, gy)))
    if not jxx + jyy > 0:
        return 1.0, 0.0
    angle = 0.5 * math.atan2(2 * jxy, jxx - jyy)  # direction of the larger eigenvalue
    return math.cos(angle), math.sin(angle)


def fit_line(x0: float, y0: float, x1: float, y1: float, width: int, height: int,
             frame_width: int) -> Line | None:
    """The line with its ends moved inside the frame far enough that all `width` parallel lines
    stay inside too (the width shrinks when the frame is narrower); None when under 1 pixel long."""
    width = max(1, min(int(width), height, frame_width))
    m = (width - 1) / 2

    def inside(v: float, hi: int) -> float:
        return float(min(max(v, m), hi - 1 - m))

    line = Line(inside(x0, frame_width), inside(y0, height), inside(x1, frame_width),
                inside(y1, height), width)
    return line if line.length >= 1 else None


def line_across(image: np.ndarray, x: float, y: float, length: int = 64,
                width: int = 1) -> Line | None:
    """A line of about `length` pixels centred on (x, y) across the local edge (see
    across_direction), shortened symmetrically where it would leave the frame."""
    h, w = image.shape
    dx, dy = across_direction(image, x, y)
    if dx < 0 or (dx == 0 and dy < 0):
        dx, dy = -dx, -dy  # drawn left to right (top to bottom when vertical)
    m = (max(1, width) - 1) / 2
    half = length / 2
    for pos, d, hi in ((x, dx, w - 1), (y, dy, h - 1)):
        if abs(d) > 1e-9:
            half = min(half, max(min(pos - m, hi - m - pos) / abs(d), 0.0))
    half = max(half, 1.0)
    return fit_line(x - half * dx, y - half * dy, x + half * dx, y + half * dy, width, h, w)


def scale_bar_cells(pixel_m: float | None, region_px: int, cells: int,
                    fraction: float = 0.2) -> tuple[int, float, str] | None:
    """A scale bar for `region_px` movie pixels drawn across `cells` columns: (length in columns,
    length in metres, label). The length is the round 1-2-5 value just below `fraction` of the
    region; None without a pixel size or when not even one column long."""
    from reviewer.movie.units import format_length, round_length

    if not pixel_m or not pixel_m > 0 or region_px < 1 or cells < 1:
        return None
    metres = round_length(region_px * pixel_m * fraction)
    n = int(round(metres / pixel_m * cells / region_px))
    return (n, metres, format_length(metres)) if n >= 1 else None
