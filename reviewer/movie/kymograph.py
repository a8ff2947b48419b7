"""Kymographs: intensity along a line across a growth front, against time.

A line from (x0, y0) to (x1, y1) in pixel coordinates (x = column, y = row, pixel centres at integer
coordinates) is sampled at one point per pixel of its length; with a width W > 1 the samples are the
mean of W parallel lines spaced one pixel apart across it. Sampling is bilinear. Frames are read in
order, a block at a time, and only the rows the line passes through are kept, so a kymograph of a whole
movie needs memory for its output only; consecutive frames can be averaged in bins of `bin` frames so
that 10^6 frames fit an image.

Layer-by-layer growth shows as a staircase (the edge jumps at the frames where a layer is added),
continuous step flow as a slope (common practice, no source).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from reviewer.errors import BadInput


@dataclass(frozen=True)
class Line:
    x0: float
    y0: float
    x1: float
    y1: float
    width: int = 1

    @classmethod
    def parse(cls, text: str, width: int = 1) -> Line:
        """'x0,y0,x1,y1' in pixels."""
        parts = text.replace(" ", "").split(",")
        try:
            vals = [float(p) for p in parts]
        except ValueError:
            vals = []
        if len(vals) != 4 or not all(math.isfinite(v) for v in vals):
            raise BadInput(f"--line {text!r}: expected four numbers x0,y0,x1,y1 (pixels)")
        line = cls(*vals, width=int(width))
        if line.length < 1:
            raise BadInput(f"--line {text!r}: the line must be at least 1 pixel long")
        if line.width < 1:
            raise BadInput(f"--width {width}: must be 1 or more pixels")
        return line

    @property
    def length(self) -> float:
        return math.hypot(self.x1 - self.x0, self.y1 - self.y0)

    def points(self) -> tuple[np.ndarray, np.ndarray]:
        """Sample coordinates (rows, cols), each of shape (width, n): n points along, width across."""
        n = int(math.floor(self.length)) + 1
        t = np.linspace(0.0, 1.0, n)
        xs = self.x0 + t * (self.x1 - self.x0)
        ys = self.y0 + t * (self.y1 - self.y0)
        # unit normal to the line; offsets centred on it, one pixel apart
        nx, ny = -(self.y1 - self.y0) / self.length, (self.x1 - self.x0) / self.length
        off = np.arange(self.width, dtype=np.float64) - (self.width - 1) / 2.0
        return ys[None, :] + off[:, None] * ny, xs[None, :] + off[:, None] * nx

    def check_inside(self, height: int, width: int) -> None:
        rows, cols = self.points()
        if rows.min() < 0 or cols.min() < 0 or rows.max() > height - 1 or cols.max() > width - 1:
            raise BadInput(f"line {self.x0:g},{self.y0:g},{self.x1:g},{self.y1:g} (width "
                           f"{self.width}) leaves the {width} x {height} frame (x 0..{width - 1}, "
                           f"y 0..{height - 1})")


class Sampler:
    """Bilinear sampling of one line, precomputed: indices into a crop of the frame and weights."""

    def __init__(self, line: Line, height: int, width: int) -> None:
        line.check_inside(height, width)
        rows, cols = line.points()
        r0 = np.clip(np.floor(rows).astype(np.int64), 0, max(height - 2, 0))
        c0 = np.clip(np.floor(cols).astype(np.int64), 0, max(width - 2, 0))
        self.top, self.left = int(r0.min()), int(c0.min())
        self.bottom = min(int(r0.max()) + 2, height)
        self.right = min(int(c0.max()) + 2, width)
        fr, fc = rows - r0, cols - c0
        r0 -= self.top
        c0 -= self.left
        r1 = np.minimum(r0 + 1, self.bottom - self.top - 1)
        c1 = np.minimum(c0 + 1, self.right - self.left - 1)
        cw = self.right - self.left
        self.index = np.stack([r0 * cw + c0, r0 * cw + c1, r1 * cw + c0, r1 * cw + c1])
        self.weight = np.stack([(1 - fr) * (1 - fc), (1 - fr) * fc, fr * (1 - fc), fr * fc])
        self.n_points = rows.shape[1]

    def crop(self, block: np.ndarray) -> np.ndarray:
        """The rows and columns of a (frames, height, width) block the line needs."""
        return block[:, self.top:self.bottom, self.left:self.right]

    def sample(self, block: np.ndarray) -> np.ndarray:
        """(frames, n_points) float64: the profile of each frame, averaged across the width."""
        flat = self.crop(block).reshape(len(block), -1).astype(np.float64)
        vals = (flat[:, self.index] * self.weight).sum(axis=1)  # (frames, width, n)
        return vals.mean(axis=1)


def frame_range(text: str | None, n_frames: int) -> tuple[int, int]:
    """'A:B' (B exclusive; either may be left out; negative counts from the end) -> (start, stop)."""
    if not text:
        return 0, n_frames
    try:
        a, b = text.split(":")
        start = int(a) if a.strip() else 0
        stop = int(b) if b.strip() else n_frames
    except ValueError:
        raise BadInput(f"--frames {text!r}: expected A:B (first frame, one past the last)") from None
    start += n_frames if start < 0 else 0
    stop += n_frames if stop < 0 else 0
    start, stop = max(start, 0), min(stop, n_frames)
    if stop <= start:
        raise BadInput(f"--frames {text!r}: no frames in that range (movie has {n_frames})")
    return start, stop


def kymograph(movie, line: Line, start: int = 0, stop: int | None = None, bin_frames: int = 1,
              progress: Callable[[int], None] | None = None) -> np.ndarray:
    """Rows = time bins of `bin_frames` frames from `start`, columns = points along the line.

    float32 means; a last, partial bin is the mean of the frames it has."""
    stop = movie.n_frames if stop is None else stop
    sampler = Sampler(line, movie.height, movie.width)
    bin_frames = max(int(bin_frames), 1)
    n_rows = -(-(stop - start) // bin_frames)
    out = np.zeros((n_rows, sampler.n_points), dtype=np.float64)
    counts = np.zeros(n_rows, dtype=np.int64)
    block = max(bin_frames, 64)
    block -= block % bin_frames
    for s, frames in movie.iter_blocks(block, start, stop):
        prof = sampler.sample(frames)
        rows = (np.arange(s, s + len(frames)) - start) // bin_frames
        np.add.at(out, rows, prof)
        np.add.at(counts, rows, 1)
        if progress is not None:
            progress(len(frames))
    return (out / counts[:, None]).astype(np.float32)


def auto_bin(n_frames: int, max_rows: int = 4096) -> int:
    """Frames per row so that a kymograph of n_frames has at most max_rows rows."""
    return max(1, -(-n_frames // max_rows))
