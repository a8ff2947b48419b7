"""Frames reduced to the pane's resolution once, kept in an LRU, with sliding window sums.

No Textual here: the frame view uses it, and so can anything that shows frames small.

A *grid* says which part of the frame is shown and how coarsely: the region (y0, y1, x0, x1) in frame
pixels and an integer factor k; a reduced frame is the mean of each k x k block of the region (the
last row / column of blocks may be partial), summed in the frame's own integer type widened (uint16
-> uint32, exact) or in float32 for float movies, so a camera frame is never copied to full-size
floats. :class:`ReducedFrames` keeps reduced frames in an LRU by (frame, grid), keeps the sums of the
before / after windows and moves them by adding the frame that enters and subtracting the one that
leaves, and reduces neighbouring frames in one worker thread while the user looks (only frames within
the windows of the neighbouring cursor positions: never more than is shown plus its windows).
"""

from __future__ import annotations

import threading
import time
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np

CACHE_BYTES = 256 << 20  # reduced frames kept (all grids together)
PREFETCH_STEPS = 2  # frames either side of the cursor reduced ahead at once
IDLE_S = 0.5  # the rest of the windows' frames only after the cursor stayed this long
SETTLE_S = 0.03  # the worker starts this long after a wish (the screen is being written)


@dataclass(frozen=True)
class Grid:
    """The visible region (y0, y1, x0, x1) of a frame, reduced by k x k block means."""

    region: tuple[int, int, int, int]
    k: int

    @property
    def shape(self) -> tuple[int, int]:
        y0, y1, x0, x1 = self.region
        return -(-(y1 - y0) // self.k), -(-(x1 - x0) // self.k)


def grid_for(region: tuple[int, int, int, int], out_h: int, out_w: int) -> Grid:
    """The coarsest grid whose reduced image still has at least out_h x out_w pixels."""
    y0, y1, x0, x1 = region
    k = max(1, min((y1 - y0) // max(out_h, 1), (x1 - x0) // max(out_w, 1)))
    return Grid(tuple(int(v) for v in region), int(k))  # type: ignore[arg-type]


def _sum_dtype(dtype: np.dtype) -> np.dtype:
    if dtype.kind == "u":
        return np.dtype(np.uint64 if dtype.itemsize > 2 else np.uint32)
    if dtype.kind == "i":
        return np.dtype(np.int64 if dtype.itemsize > 2 else np.int32)
    return np.dtype(np.float64 if dtype.itemsize > 4 else np.float32)


def _block_sums(a: np.ndarray, k: int, axis: int, acc: np.dtype) -> np.ndarray:
    """Sums of k consecutive rows (axis 0) or columns (axis 1); the last block may be partial.
    Reshaped sums: ``np.add.reduceat`` with a widening dtype is many times slower."""
    n = a.shape[axis]
    full = n // k
    if axis == 0:
        parts = [a[: full * k].reshape(full, k, a.shape[1]).sum(axis=1, dtype=acc)]
        if n > full * k:
            parts.append(a[full * k:].sum(axis=0, dtype=acc, keepdims=True))
        return np.concatenate(parts, axis=0) if len(parts) > 1 else parts[0]
    if k <= 16:  # a short inner axis reduces slowly: add the k strided column sets instead
        main = a[:, 0: full * k: k].astype(acc)
        for j in range(1, k):
            main += a[:, j: full * k: k]
        parts = [main]
    else:
        parts = [a[:, : full * k].reshape(a.shape[0], full, k).sum(axis=2, dtype=acc)]
    if n > full * k:
        parts.append(a[:, full * k:].sum(axis=1, dtype=acc, keepdims=True))
    return np.concatenate(parts, axis=1) if len(parts) > 1 else parts[0]


def block_mean(frame: np.ndarray, grid: Grid) -> np.ndarray:
    """Mean of each k x k block of the grid's region of a 2-D frame, as float32."""
    y0, y1, x0, x1 = grid.region
    a = np.asarray(frame)[y0:y1, x0:x1]
    k = grid.k
    if k == 1:
        return a.astype(np.float32)
    acc = _sum_dtype(a.dtype)
    h, w = a.shape
    sums = _block_sums(_block_sums(a, k, 0, acc), k, 1, acc)  # rows first: adds of whole rows
    counts_y = np.minimum(k, h - np.arange(0, h, k)).astype(np.float32)
    counts_x = np.minimum(k, w - np.arange(0, w, k)).astype(np.float32)
    return sums.astype(np.float32) / (counts_y[:, None] * counts_x[None, :])


class Window:
    """Sum of the reduced frames start..stop-1 (those that could be read) on one grid."""

    def __init__(self) -> None:
        self.grid: Grid | None = None
        self.start = self.stop = 0
        self.total: np.ndarray | None = None
        self.frames: set[int] = set()  # frames inside the sum


class ReducedFrames:
    """Reduced frames of one movie (anything with ``frame(i)`` and ``n_frames``)."""

    def __init__(self, movie, *, cache_bytes: int = CACHE_BYTES, prefetch: bool = True) -> None:
        self.movie = movie
        self.cache_bytes = cache_bytes
        self.reads = 0  # frames read from the movie
        self._lru: OrderedDict[tuple[int, Grid], np.ndarray] = OrderedDict()
        self._bytes = 0
        self._busy: dict[tuple[int, Grid], threading.Event] = {}
        self._bad: dict[int, Exception] = {}
        self._lock = threading.Lock()
        self._read_lock = threading.Lock()  # one movie read at a time (readers share handles)
        self._windows = {"before": Window(), "after": Window()}
        self._wanted: list[tuple[int, Grid]] = []
        self._later: list[tuple[int, Grid]] = []
        self._since = 0.0
        self._wake = threading.Condition(self._lock)
        self._closed = False
        self._worker: threading.Thread | None = None
        if prefetch:
            self._worker = threading.Thread(target=self._prefetch_loop, daemon=True,
                                            name="reviewer-prefetch")
            self._worker.start()

    # ---- one frame ----------------------------------------------------------------------------
    def get(self, i: int, grid: Grid) -> np.ndarray:
        """The reduced frame i; raises what the movie raises when it cannot be read."""
        key = (int(i), grid)
        while True:
            with self._lock:
                got = self._lru.get(key)
                if got is not None:
                    self._lru.move_to_end(key)
                    return got
                if key[0] in self._bad:
                    raise self._bad[key[0]]
                busy = self._busy.get(key)
                if busy is None:
                    busy = self._busy[key] = threading.Event()
                    break
            busy.wait()  # the worker is reducing this frame: wait for it instead of reading twice
        try:
            with self._read_lock:
                frame = self.movie.frame(key[0])
                self.reads += 1
            small = block_mean(frame, grid)
            del frame
        except Exception as exc:
            with self._lock:
                self._bad[key[0]] = exc
            raise
        finally:
            with self._lock:
                self._busy.pop(key, None)
            busy.set()
        with self._lock:
            self._lru[key] = small
            self._bytes += small.nbytes
            while self._bytes > self.cache_bytes and len(self._lru) > 1:
                _, old = self._lru.popitem(last=False)
                self._bytes -= old.nbytes
        return small

    def cached(self, i: int, grid: Grid) -> bool:
        with self._lock:
            return (int(i), grid) in self._lru

    def try_get(self, i: int, grid: Grid) -> np.ndarray | None:
        """The reduced frame, or None when it cannot be read."""
        try:
            return self.get(i, grid)
        except Exception:  # noqa: BLE001 - any reader failure means "not this frame"
            return None

    # ---- windows ------------------------------------------------------------------------------
    def window_sum(self, side: str, start: int, stop: int,
                   grid: Grid) -> tuple[np.ndarray | None, int]:
        """(sum, count) of the readable reduced frames start..stop-1 (clipped to the movie);
        (None, 0) when there is none. Moved incrementally from the last call on the same side and
        grid: one step of the cursor adds one frame and subtracts one."""
        start, stop = max(0, int(start)), min(self.movie.n_frames, int(stop))
        w = self._windows[side]
        wanted = set(range(start, stop))
        old = set(range(w.start, w.stop))
        if w.grid != grid or w.total is None or len(wanted ^ old) > len(wanted):
            w.grid, w.total, w.frames, old = grid, None, set(), set()
        for i in sorted(old - wanted):
            if i in w.frames:
                small = self.try_get(i, grid)
                if small is None:  # evicted and now unreadable: start again
                    w.grid = None
                    return self.window_sum(side, start, stop, grid)
                w.total -= small
                w.frames.discard(i)
        for i in sorted(wanted - old):
            small = self.try_get(i, grid)
            if small is None:
                continue
            if w.total is None:
                w.total = small.astype(np.float64)
            else:
                w.total += small
            w.frames.add(i)
        w.start, w.stop = start, stop
        if not w.frames:
            return None, 0
        return w.total, len(w.frames)

    # ---- prefetch -----------------------------------------------------------------------------
    def prefetch(self, frames: list[int], grid: Grid, later: list[int] = ()) -> None:
        """Reduce these frames (in this order) in the worker, then ``later`` once the cursor has
        stayed IDLE_S seconds; replaces any earlier wish."""
        n = self.movie.n_frames
        with self._lock:
            self._wanted = [(int(i), grid) for i in frames if 0 <= i < n]
            self._later = [(int(i), grid) for i in later if 0 <= i < n]
            self._since = time.monotonic()
            self._wake.notify()

    def _prefetch_loop(self) -> None:
        while True:
            with self._lock:
                while not self._closed and not self._wanted:
                    if self._later:
                        wait = self._since + IDLE_S - time.monotonic()
                        if wait <= 0:
                            self._wanted, self._later = self._later, []
                            continue
                        self._wake.wait(wait)
                    else:
                        self._wake.wait()
                if self._closed:
                    return
                settle = self._since + SETTLE_S - time.monotonic()
                if settle > 0:
                    self._wake.wait(settle)
                    continue
                key = self._wanted.pop(0)
                skip = key in self._lru or key in self._busy or key[0] in self._bad
            if not skip:
                self.try_get(*key)

    def close(self) -> None:
        with self._lock:
            self._closed = True
            self._wanted = self._later = []
            self._wake.notify()


def neighbours(index: int, direction: int, window: int,
               mode: str = "frame") -> tuple[list[int], list[int]]:
    """Frames to reduce ahead, (now, once idle). Now: the next frames in the direction of travel
    first, then the other side, and in the change / average views the frames the windows of the
    neighbouring positions add. Once idle: the rest of the windows (so the change view opens
    quickly after a look)."""
    d = 1 if direction >= 0 else -1
    near = []
    for s in range(1, PREFETCH_STEPS + 1):
        near += [index + d * s, index - d * s]
    if window <= 0:
        return near, []
    edges = [index + d * (window + 1), index - d * (window + 1)]
    rest = [index + d * s for s in range(PREFETCH_STEPS + 1, window + 1)]
    rest += [index - d * s for s in range(PREFETCH_STEPS + 1, window + 1)]
    if mode == "frame":
        return near, edges + rest
    return near + edges, rest
