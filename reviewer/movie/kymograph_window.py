"""A kymograph of the frames around a cursor, for the review UI: one line's profile per frame, kept.

Moving the cursor by one frame reads one new frame; the profiles already sampled are kept (up to
`keep` of them, the oldest dropped first), so memory is bounded by the profiles, not the frames.
Sampling is movie/kymograph.py's Sampler (bilinear, averaged across the width). `whole_movie` is the
same for every frame, binned in time, in one pass that holds one frame at a time.
"""

from __future__ import annotations

from collections import OrderedDict
from collections.abc import Callable

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.kymograph import Line, Sampler


def centred_range(cursor: int, rows: int, n_frames: int) -> tuple[int, int]:
    """`rows` consecutive frames with the cursor in the middle, shifted to stay in the movie."""
    rows = max(1, min(int(rows), n_frames))
    start = int(min(max(cursor - rows // 2, 0), n_frames - rows))
    return start, start + rows


class KymographWindow:
    """Profiles of one line for any frames asked for; reads each frame at most once while kept."""

    def __init__(self, movie, line: Line, keep: int = 4096) -> None:
        self.movie = movie
        self.line = line
        self.sampler = Sampler(line, movie.height, movie.width)
        self.keep = keep
        self._profiles: OrderedDict[int, np.ndarray] = OrderedDict()
        self.reads = 0  # frames read so far (for tests and the status text)
        self.unreadable: set[int] = set()  # frames that could not be read (NaN rows)

    def profile(self, frame: int, image: np.ndarray | None = None) -> np.ndarray:
        """The line's profile in one frame; `image`, when given, is that frame already read."""
        got = self._profiles.get(frame)
        if got is None:
            try:
                img = np.asarray(self.movie.frame(frame) if image is None else image)
            except BadInput:  # a damaged frame: a row of NaN (drawn black), the rest still shown
                img = None
                self.unreadable.add(frame)
            self.reads += int(image is None)
            got = (np.full(self.sampler.n_points, np.nan, np.float32) if img is None
                   else self.sampler.sample(img[None])[0].astype(np.float32))
            self._profiles[frame] = got
            while len(self._profiles) > self.keep:
                self._profiles.popitem(last=False)
        else:
            self._profiles.move_to_end(frame)
        return got

    def image(self, start: int, stop: int, known: dict | None = None) -> np.ndarray:
        """(stop - start, points) float32: row i is frame start + i, as `reviewer kymograph` with
        --frames start:stop --bin 1 gives. `known`: frames already read, by index."""
        known = known or {}
        return np.stack([self.profile(f, known.get(f)) for f in range(start, stop)])


class _FrameByFrame:
    """A movie seen through iter_blocks of one frame each (memory: one frame), calling `check`
    before each read (it raises to stop the pass)."""

    def __init__(self, movie, check: Callable[[], None]) -> None:
        self.movie, self.check = movie, check
        self.n_frames, self.height, self.width = movie.n_frames, movie.height, movie.width

    def iter_blocks(self, size: int = 1, start: int = 0, stop: int | None = None):
        stop = self.n_frames if stop is None else stop
        for i in range(start, stop):
            self.check()
            yield i, self.movie.block(i, i + 1)


def whole_movie(movie, line: Line, bin_frames: int, check: Callable[[], None] | None = None,
                progress: Callable[[int], None] | None = None) -> np.ndarray:
    """The kymograph of the whole movie in bins of `bin_frames` (movie/kymograph.py's kymograph),
    reading one frame at a time, so that memory is one frame plus the result."""
    from reviewer.movie.kymograph import kymograph

    return kymograph(_FrameByFrame(movie, check or (lambda: None)), line, 0, movie.n_frames,
                     bin_frames, progress)
