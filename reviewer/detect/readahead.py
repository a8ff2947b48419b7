"""Reading ahead: a background thread reads the movie's blocks in order and reduces each to tile
sums while the caller scores the previous ones (numpy and the file reads release the GIL, so the
two overlap on two cores). Only the reader thread touches the movie and the reduce function.

A block is read and reduced in pieces of at most PIECE_BYTES (the frames just read are still in
the processor's cache when they are reduced: measured ~30 % faster read + reduce than one 32 MiB
read at 512² and 2048²); the caller still gets one item per block, on the same frame numbers."""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable, Iterator

import numpy as np

AHEAD = 4  # reduced blocks waiting at most (tile sums: small)
PIECE_BYTES = 8 << 20  # raw frames read and reduced at a time within a block


def piece_frames(per: int, frame_bytes: int) -> int:
    """Frames per piece: the largest divisor of `per` whose frames fit PIECE_BYTES (at least 1),
    so every block boundary is a piece boundary."""
    fit = max(1, PIECE_BYTES // max(frame_bytes, 1))
    return max(d for d in range(1, per + 1) if per % d == 0 and d <= fit)


def _joined(parts: list):
    """One block's reduce() outputs, its pieces' in order: arrays end to end, lists chained."""
    if len(parts) == 1:
        return parts[0]
    if isinstance(parts[0], list):
        return [item for p in parts for item in p]
    return np.concatenate(parts)


def read_ahead(movie, per: int, reduce: Callable[[np.ndarray], object],
               stop: threading.Event | None = None, *, piece: int | None = None,
               origin: int = 0) -> Iterator[tuple[int, int, object]]:
    """Yield (start, frames, reduce output) for every block of `per` frames, in order (blocks end
    on multiples of `per` counted from frame -`origin` of `movie`, and at its end), each block
    read in pieces of `piece` frames (a divisor of per; default per). An error in the reader is
    raised here; closing the generator (or an error in the caller) stops the reader and waits for
    it, so the movie is free again when this returns."""
    stop = stop or threading.Event()
    piece = piece or per
    if per % piece:
        raise ValueError(f"piece {piece} does not divide the block of {per} frames")
    q: queue.Queue = queue.Queue(maxsize=AHEAD)

    def put(item) -> bool:
        while not stop.is_set():
            try:
                q.put(item, timeout=0.1)
                return True
            except queue.Full:
                continue
        return False

    def work() -> None:
        try:
            first, count, parts = 0, 0, []
            for start, block in movie.iter_blocks(piece, reuse=True):
                if not parts:
                    first = start
                parts.append(reduce(np.asarray(block)))
                count += len(block)
                if (origin + start + len(block)) % per == 0:
                    if not put((first, count, _joined(parts))):
                        return
                    count, parts = 0, []
            if parts and not put((first, count, _joined(parts))):
                return
            put(None)
        except BaseException as exc:  # noqa: BLE001 - handed to the caller's thread
            put(exc)

    th = threading.Thread(target=work, name="reviewer-read-ahead", daemon=True)
    th.start()
    try:
        while True:
            item = q.get()
            if item is None:
                return
            if isinstance(item, BaseException):
                raise item
            yield item
    finally:
        stop.set()
        th.join()
