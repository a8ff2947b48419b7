"""Reading ahead: a background thread reads the movie's blocks in order and reduces each to tile
sums while the caller scores the previous ones (numpy and the file reads release the GIL, so the
two overlap on two cores). Only the reader thread touches the movie and the reduce function."""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable, Iterator

import numpy as np

AHEAD = 4  # reduced blocks waiting at most (tile sums: small)


def read_ahead(movie, per: int, reduce: Callable[[np.ndarray], np.ndarray],
               stop: threading.Event | None = None) -> Iterator[tuple[int, np.ndarray]]:
    """Yield (start, reduce(block)) for every block of `per` frames, in order. An error in the
    reader is raised here; closing the generator (or an error in the caller) stops the reader and
    waits for it, so the movie is free again when this returns."""
    stop = stop or threading.Event()
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
            for start, block in movie.iter_blocks(per, reuse=True):
                if not put((start, reduce(np.asarray(block)))):
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
