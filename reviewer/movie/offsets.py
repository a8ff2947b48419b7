"""Frames stored plainly at known byte offsets of one file, read with positioned reads (os.preadv).

Used by uncompressed TIFF (contiguous or page-per-frame), .npy and raw binary files. Nothing is read at
open; a frame read reads that frame's bytes straight into the output array. Random access uses no memory
map: a file that shrinks while open gives a clear error instead of a crash (SIGBUS), and resident memory
stays the size of what was asked for. The one sequential pass (`iter_blocks(reuse=True)`, used by the
scan) reads every block into the same buffer: no fresh memory to fault in per block.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Iterator
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, Timing
from reviewer.movie.pixels import to_frames

MAX_FRAMES = 100_000_000  # 10^8 frames (an 800 MB offset index): more is a damaged header


def even_offsets(first: int, n: int, frame_bytes: int, path: Path) -> np.ndarray:
    """Byte offsets of n frames stored one after the other from `first` (checked before allocating)."""
    if n > MAX_FRAMES:
        raise BadInput(f"{path}: {n:,} frames of {frame_bytes:,} bytes: more than the {MAX_FRAMES:,} "
                       "frames a movie may have (a damaged header?)")
    return first + np.arange(n, dtype=np.int64) * frame_bytes


class OffsetMovie(Movie):
    """Frame i is `frame_shape` pixels of `file_dtype` starting at byte `offsets[i]`.

    `frame_shape` is (h, w) or (h, w, samples) for colour (read as luminance).
    """

    def __init__(self, path: Path, offsets: np.ndarray, frame_shape: tuple[int, ...],
                 file_dtype: np.dtype, out_dtype: np.dtype, *, layout: str, timing: Timing | None = None,
                 fingerprint: str = "", notices: list[str] | None = None) -> None:
        self.offsets = np.ascontiguousarray(offsets, dtype=np.int64)
        self.frame_shape = tuple(int(s) for s in frame_shape)
        self.file_dtype = np.dtype(file_dtype)
        self.rgb = len(self.frame_shape) == 3
        self.frame_bytes = int(np.prod(self.frame_shape)) * self.file_dtype.itemsize
        self._fd: int | None = os.open(path, os.O_RDONLY)
        self._lock = threading.Lock()  # only for the seek+read fallback
        size = os.fstat(self._fd).st_size
        if len(self.offsets) and (self.offsets.min() < 0
                                  or self.offsets.max() + self.frame_bytes > size):
            self.close()
            raise ValueError("frame offsets outside the file")
        super().__init__(path=Path(path), n_frames=len(self.offsets),
                         shape=(self.frame_shape[0], self.frame_shape[1]), dtype=np.dtype(out_dtype),
                         layout=layout, timing=timing or Timing(), fingerprint=fingerprint,
                         notices=list(notices or []))

    def _fill(self, buf: np.ndarray, offset: int, first: int, count: int = 1) -> None:
        """Read exactly buf.nbytes bytes at offset into buf (frames first..first+count-1)."""
        if self._fd is None:
            raise ValueError("movie is closed")
        view = memoryview(buf).cast("B")
        done = 0
        while done < len(view):
            if hasattr(os, "preadv"):
                got = os.preadv(self._fd, [view[done:]], offset + done)
            else:  # pragma: no cover - non-POSIX fallback
                with self._lock:
                    os.lseek(self._fd, offset + done, os.SEEK_SET)
                    got = os.readv(self._fd, [view[done:]])
            if got <= 0:
                starts = self.offsets[first:first + count]
                bad = first + max(0, int(np.searchsorted(starts, offset + done, "right")) - 1)
                raise BadInput(f"{self.path}: frame {bad} cannot be read: the file ends at byte "
                               f"{offset + done} (was it truncated after opening?)")
            done += got

    def _raw(self, start: int, stop: int) -> np.ndarray:
        """Frames [start, stop) in the file's dtype: one read when they are evenly spaced and the gaps
        are small, else one read a frame."""
        offs = self.offsets[start:stop]
        n, fb = stop - start, self.frame_bytes
        step = int(offs[1] - offs[0]) if n > 1 else fb
        if n > 1 and step >= fb and step <= 2 * fb and np.all(np.diff(offs) == step):
            span = np.empty((n - 1) * step + fb, np.uint8)
            self._fill(span, int(offs[0]), start, n)
            strided = np.lib.stride_tricks.as_strided(span, (n, fb), (step, 1))
            return np.ascontiguousarray(strided).view(self.file_dtype).reshape(n, *self.frame_shape)
        out = np.empty((n, *self.frame_shape), self.file_dtype)
        for k, o in enumerate(offs):
            self._fill(out[k], int(o), start + k)
        return out

    def _stride(self) -> int | None:
        """The constant byte distance between consecutive frames, if there is one and the gaps are
        small (at most one frame: the reused buffer spans the gaps too; a plane of a hyperstack,
        with other planes between its frames, is read frame by frame instead)."""
        if not hasattr(self, "_const_stride"):
            d = np.diff(self.offsets)
            ok = (len(d) > 0 and bool(np.all(d == d[0]))
                  and self.frame_bytes <= int(d[0]) <= 2 * self.frame_bytes)
            self._const_stride = int(d[0]) if ok else None
        return self._const_stride

    def iter_blocks(self, size: int = 64, start: int = 0, stop: int | None = None, *,
                    reuse: bool = False) -> Iterator[tuple[int, np.ndarray]]:
        step = self._stride()
        if (not reuse or self.rgb or step is None or self.file_dtype != self.dtype
                or not self.file_dtype.isnative):
            yield from super().iter_blocks(size, start, stop, reuse=reuse)
            return
        stop = self.n_frames if stop is None else min(stop, self.n_frames)
        if stop <= start:
            return
        item = self.file_dtype.itemsize
        inner = tuple(int(v) for v in np.cumprod((1, *self.frame_shape[:0:-1]))[::-1] * item)
        buf = np.empty((min(size, stop - start) - 1) * step + self.frame_bytes, np.uint8)
        for s in range(start, stop, size):
            n = min(s + size, stop) - s
            span = buf[: (n - 1) * step + self.frame_bytes]
            self._fill(span, int(self.offsets[s]), s, n)
            yield s, np.ndarray((n, *self.frame_shape), self.file_dtype, buffer=span,
                                strides=(step, *inner))

    def _read(self, start: int, stop: int) -> np.ndarray:
        raw = self._raw(start, stop)
        if not self.rgb and raw.dtype == self.dtype:
            return raw  # already a fresh array in native order: no second copy
        return to_frames(raw, self.dtype, self.rgb)

    def close(self) -> None:
        fd, self._fd = self._fd, None
        if fd is not None:
            os.close(fd)
