"""The one read-only interface every movie container offers."""

from __future__ import annotations

import hashlib
import os
from abc import ABC, abstractmethod
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput


@dataclass(frozen=True)
class Timing:
    """When each frame was taken. Either a constant rate (`fps`) or per-frame `times_s`, or neither."""

    fps: float | None = None
    times_s: np.ndarray | None = None  # float64, one per frame, seconds from the first frame
    source: str = "unknown"  # e.g. "ImageJ finterval", "OME DeltaT", "times CSV", "--fps"

    @property
    def known(self) -> bool:
        return self.fps is not None or self.times_s is not None

    def time_of(self, frames: np.ndarray | int) -> np.ndarray | float | None:
        """Seconds since frame 0 for frame index (or indices); None when timing is unknown."""
        if self.times_s is not None:
            idx = np.clip(np.asarray(frames), 0, len(self.times_s) - 1)
            out = self.times_s[idx]
            return float(out) if np.ndim(out) == 0 else out
        if self.fps:
            out = np.asarray(frames, dtype=np.float64) / self.fps
            return float(out) if np.ndim(out) == 0 else out
        return None

    def duration_s(self, n_frames: int) -> float | None:
        """Recording length: n_frames frame periods (fps), or last time plus a median period."""
        if self.fps:
            return n_frames / self.fps
        if self.times_s is not None and len(self.times_s) > 1:
            period = float(np.median(np.diff(self.times_s)))
            return float(self.times_s[-1] - self.times_s[0]) + period
        return None


FINGERPRINT_VERSION = 2  # part of every fingerprint: a change of what is hashed gives new keys
SPREAD_BLOCKS = 16  # blocks sampled evenly through the middle of a file (one at its exact centre)
SPREAD_BYTES = 64 << 10
TIMES_SUFFIX = ".times.csv"  # per-frame times beside a movie: <movie>.times.csv (see timing.py)


def _hash_content(h, path: Path, chunk: int, label: str = "") -> None:
    """Size, mtime, the first and last `chunk` bytes (the whole file up to 2 chunks), blocks spread
    evenly between them and one at the exact centre."""
    st = path.stat()
    h.update(f"{label}:{st.st_size}:{st.st_mtime_ns};".encode())
    size = st.st_size
    with open(path, "rb") as f:
        h.update(f.read(chunk))
        if size > 2 * chunk:
            inner = size - 2 * chunk - SPREAD_BYTES
            for k in range(SPREAD_BLOCKS + 1):
                at = chunk + max(0, inner) * k // SPREAD_BLOCKS
                f.seek(at)
                h.update(f.read(SPREAD_BYTES))
            f.seek(size // 2 - SPREAD_BYTES // 2)
            h.update(f.read(SPREAD_BYTES))
        if size > chunk:
            f.seek(max(size - chunk, chunk))
            h.update(f.read(chunk))


def companions(path: str | os.PathLike) -> list[Path]:
    """Files beside a movie that decide how it is read: ``<movie>.times.csv`` (frame times)."""
    p = Path(path)
    return [q for q in (p.parent / (p.name + TIMES_SUFFIX),) if q.is_file()]


def fingerprint_file(path: str | os.PathLike, chunk: int = 1 << 20,
                     also: tuple[str | os.PathLike, ...] = ()) -> str:
    """Cheap stable identity of a movie file: size, mtime and hashes of its first and last MiB and of
    blocks spread through its middle, plus the same of each companion file that decides the result
    (`also`, e.g. a raw descriptor, and the ``<movie>.times.csv`` when there is one; files up to
    2 MiB are hashed whole). The movie's name is not part of it: caches follow a renamed file."""
    p = Path(path)
    h = hashlib.blake2b(digest_size=12)
    h.update(f"v{FINGERPRINT_VERSION};".encode())
    _hash_content(h, p, chunk)
    for extra in (*map(Path, also), *companions(p)):
        try:
            _hash_content(h, extra, chunk, "+" + extra.name[len(p.name):])
        except OSError:
            h.update(f"{extra.name}: unreadable;".encode())
    return h.hexdigest()


@dataclass
class Movie(ABC):
    """A movie opened read-only. Frames are 2-D arrays (height, width); index 0 is the first frame.

    Subclasses set the fields in their constructor and implement `_read(start, stop)`.
    """

    path: Path
    n_frames: int
    shape: tuple[int, int]  # (height, width)
    dtype: np.dtype
    layout: str  # one-line description of the container, e.g. "page-per-frame TIFF, 200000 IFDs"
    timing: Timing = field(default_factory=Timing)
    fingerprint: str = ""
    notices: list[str] = field(default_factory=list)  # things the user must be told (truncation, ...)
    axes: str = "TYX"  # the stored axes, frames axis T first or not, e.g. "YXT", "TZCYX", "TYXS"
    selection: dict = field(default_factory=dict)  # what was chosen in the file: series, channel, z, ...
    pixel_size_nm: float | None = None  # when the file stores it (MRC voxel size, ...)

    @abstractmethod
    def _read(self, start: int, stop: int) -> np.ndarray:
        """Frames start..stop-1 as an array (stop - start, height, width); indices already checked."""

    def frame(self, i: int) -> np.ndarray:
        i = int(i)
        if i < 0:
            i += self.n_frames
        if not 0 <= i < self.n_frames:
            raise IndexError(f"frame {i} outside 0..{self.n_frames - 1}")
        return self._safe_read(i, i + 1)[0]

    def _safe_read(self, start: int, stop: int) -> np.ndarray:
        """`_read`, with any failure of the file or its decoder turned into BadInput naming the
        frames: the one exception for "these frames cannot be read" (the UI draws a placeholder)."""
        try:
            return self._read(start, stop)
        except BadInput:
            raise
        except Exception as exc:  # noqa: BLE001 - decoders and filters raise anything
            what = f"frame {start}" if stop - start == 1 else f"frames {start}..{stop - 1}"
            text = str(exc).splitlines()[0][:100] if str(exc) else exc.__class__.__name__
            raise BadInput(f"{self.path}: {what} cannot be read ({text})") from None

    def block(self, start: int, stop: int) -> np.ndarray:
        """Consecutive frames [start, stop), clipped to the movie."""
        start = max(0, int(start))
        stop = min(self.n_frames, int(stop))
        if stop <= start:
            return np.empty((0, *self.shape), dtype=self.dtype)
        return self._safe_read(start, stop)

    def iter_blocks(self, size: int = 64, start: int = 0, stop: int | None = None, *,
                    reuse: bool = False) -> Iterator[tuple[int, np.ndarray]]:
        """Yield (first frame index, block) over the movie, in order. With reuse=True a reader may
        hand out the same buffer for every block (faster for one pass; the caller copies what it
        keeps)."""
        stop = self.n_frames if stop is None else min(stop, self.n_frames)
        for s in range(start, stop, size):
            yield s, self.block(s, min(s + size, stop))

    @property
    def height(self) -> int:
        return self.shape[0]

    @property
    def width(self) -> int:
        return self.shape[1]

    @property
    def fps(self) -> float | None:
        return self.timing.fps

    @property
    def duration_s(self) -> float | None:
        return self.timing.duration_s(self.n_frames)

    def close(self) -> None:  # noqa: B027 - optional hook
        """Release file handles (memory maps are released when the object goes)."""

    def __enter__(self) -> Movie:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _median_fps(self) -> float | None:
        """The constant rate, or 1 / the median period of per-frame times (variable frame rate)."""
        if self.fps:
            return self.fps
        times = self.timing.times_s
        if times is None or len(times) < 2:
            return None
        period = float(np.median(np.diff(times)))
        return 1.0 / period if period > 0 else None

    def describe(self) -> dict:
        """The facts `reviewer info` prints."""
        try:
            size = self.path.stat().st_size if self.path.is_file() else sum(
                f.stat().st_size for f in self.path.iterdir() if f.is_file())
        except OSError:
            size = None
        return {
            "path": str(self.path),
            "frames": self.n_frames,
            "height": self.height,
            "width": self.width,
            "dtype": str(np.dtype(self.dtype)),
            "fps": self.fps,
            "median_fps": self._median_fps(),
            "duration_s": self.duration_s,
            "timing_source": self.timing.source,
            "file_size": size,
            "layout": self.layout,
            "axes": self.axes,
            "selection": dict(self.selection),
            "pixel_size_nm": self.pixel_size_nm,
            "fingerprint": self.fingerprint,
            "notices": list(self.notices),
        }


class ArrayMovie(Movie):
    """A movie held in (or memory-mapped as) a 3-D numpy array: tests, `.npy`, contiguous TIFF data."""

    def __init__(self, data: np.ndarray, path: str | os.PathLike = "<array>", *, layout: str = "array",
                 timing: Timing | None = None, fingerprint: str = "",
                 notices: list[str] | None = None) -> None:
        if data.ndim != 3:
            raise ValueError("ArrayMovie needs a (frames, height, width) array")
        self.data = data
        super().__init__(path=Path(path), n_frames=int(data.shape[0]),
                         shape=(int(data.shape[1]), int(data.shape[2])), dtype=data.dtype,
                         layout=layout, timing=timing or Timing(), fingerprint=fingerprint,
                         notices=list(notices or []))

    def _read(self, start: int, stop: int) -> np.ndarray:
        return np.asarray(self.data[start:stop])
