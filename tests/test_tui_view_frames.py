"""Frames reduced to the pane (tui/frames_cache.py) and the frame view drawing from them: block means,
sliding window sums, what is read, and the same contrast rules for 8-, 16-bit and float movies."""

from __future__ import annotations

import asyncio
import time

import numpy as np
import pytest
from test_tui_view_widgets import sync
from textual.app import App, ComposeResult

from reviewer.movie import ArrayMovie
from reviewer.tui.frames_cache import Grid, ReducedFrames, block_mean, grid_for, neighbours
from reviewer.tui.frameview import FrameView


class One(App):
    CSS = "FrameView { width: 40; height: 12; }"

    def __init__(self, widget) -> None:
        super().__init__()
        self.widget = widget

    def compose(self) -> ComposeResult:
        yield self.widget


class Counting(ArrayMovie):
    """An in-memory movie that counts the frames read, per frame."""

    def __init__(self, data: np.ndarray) -> None:
        super().__init__(data)
        self.read: dict[int, int] = {}

    def _read(self, start: int, stop: int) -> np.ndarray:
        for i in range(start, stop):
            self.read[i] = self.read.get(i, 0) + 1
        return super()._read(start, stop)


def blocks_by_hand(frame: np.ndarray, region, k: int) -> np.ndarray:
    """Reference: the mean of each k x k block (partial at the far edges), one block at a time."""
    y0, y1, x0, x1 = region
    return np.array([[float(np.mean(frame[y:min(y + k, y1), x:min(x + k, x1)], dtype=np.float64))
                      for x in range(x0, x1, k)] for y in range(y0, y1, k)])


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.int16, np.float32, np.float64])
def test_block_mean_matches_the_mean_of_each_block(dtype):
    rng = np.random.default_rng(1)
    top = 200 if np.dtype(dtype).kind in "ui" else 5000.0
    frame = (rng.random((53, 71)) * top).astype(dtype)
    for region, k in [((0, 53, 0, 71), 5), ((3, 50, 10, 61), 4), ((0, 53, 0, 71), 1),
                      ((0, 53, 0, 71), 53)]:
        got = block_mean(frame, Grid(region, k))
        want = blocks_by_hand(frame, region, k)
        assert got.dtype == np.float32 and got.shape == want.shape == Grid(region, k).shape
        assert np.allclose(got, want, rtol=1e-5, atol=1e-3)


def test_uint16_sums_are_exact_at_full_scale():
    frame = np.full((64, 64), 65535, dtype=np.uint16)
    assert np.all(block_mean(frame, Grid((0, 64, 0, 64), 64)) == 65535.0)  # no uint16 overflow


def test_grid_is_the_coarsest_that_still_fills_the_pane():
    g = grid_for((0, 4096, 0, 4096), 110, 140)
    assert g.k == 4096 // 140 and g.shape[0] >= 110 and g.shape[1] >= 140
    assert grid_for((0, 10, 0, 10), 40, 40).k == 1  # magnified: full resolution


def test_window_sums_move_by_one_frame_and_equal_a_fresh_sum():
    rng = np.random.default_rng(2)
    movie = Counting(rng.integers(0, 4000, (60, 32, 48), dtype=np.uint16))
    frames = ReducedFrames(movie, prefetch=False)
    grid = Grid((0, 32, 0, 48), 4)
    total, n = frames.window_sum("after", 11, 23, grid)
    assert n == 12
    reads = sum(movie.read.values())
    looked_up = []
    real = frames.try_get
    frames.try_get = lambda i, g: (looked_up.append(i), real(i, g))[1]
    for start in range(12, 30):  # one step: one frame enters, one leaves; nothing else summed
        looked_up.clear()
        total, n = frames.window_sum("after", start, start + 12, grid)
        assert sorted(looked_up) == [start - 1, start + 11]
        assert sum(movie.read.values()) == reads + 1
        reads += 1
        fresh = np.mean([blocks_by_hand(movie.data[i], grid.region, 4)
                         for i in range(start, start + 12)], axis=0)
        assert np.allclose(total / n, fresh, rtol=1e-6)
    total, n = frames.window_sum("after", 55, 67, grid)  # a jump, clipped to the movie
    assert n == 5
    assert np.allclose(total / n, np.mean([blocks_by_hand(movie.data[i], grid.region, 4)
                                           for i in range(55, 60)], axis=0), rtol=1e-6)
    assert max(movie.read.values()) == 1  # nothing read twice


def test_unreadable_frames_are_left_out_of_a_window():
    class Damaged(Counting):
        def _read(self, start, stop):
            if start == 5:
                raise OSError("bad sector")
            return super()._read(start, stop)

    movie = Damaged(np.ones((10, 8, 8), dtype=np.uint16))
    frames = ReducedFrames(movie, prefetch=False)
    total, n = frames.window_sum("before", 2, 8, Grid((0, 8, 0, 8), 2))
    assert n == 5 and np.allclose(total, 5.0)
    with pytest.raises(Exception, match="bad sector"):
        frames.get(5, Grid((0, 8, 0, 8), 2))


def test_prefetch_reduces_the_neighbours_in_the_worker():
    movie = Counting(np.zeros((40, 16, 16), dtype=np.uint8))
    frames = ReducedFrames(movie)
    grid = Grid((0, 16, 0, 16), 2)
    now, later = neighbours(20, 1, 3, "change")
    assert now[:2] == [21, 19] and set(now + later) == set(range(16, 25)) - {20}
    frames.prefetch(now, grid, later)
    end = time.monotonic() + 5
    while not all(frames.cached(i, grid) for i in now + later) and time.monotonic() < end:
        time.sleep(0.02)
    assert all(frames.cached(i, grid) for i in now + later)
    assert set(movie.read) == set(now + later) and max(movie.read.values()) == 1
    frames.close()


def _movie_app(movie, **kw):
    fv = FrameView(system="truecolor", **kw)
    return fv, One(fv)


@sync
async def test_the_view_reads_only_the_frame_and_its_windows():
    rng = np.random.default_rng(3)
    movie = Counting(rng.integers(0, 4000, (80, 120, 160), dtype=np.uint16))
    fv, app = _movie_app(movie, prefetch=False)
    async with app.run_test(size=(44, 14)) as pilot:
        fv.show_at(movie, 30, window=5)
        await pilot.pause()
        assert set(movie.read) == {30}  # the frame view reads the frame alone
        fv.mode = "change"
        fv.show_at(movie, 30, window=5)
        await pilot.pause()
        assert set(movie.read) == set(range(25, 36))
        for i in range(31, 36):  # steps: one new frame each (the one entering the after window)
            fv.show_at(movie, i, window=5)
            await pilot.pause()
        assert set(movie.read) == set(range(25, 41)) and max(movie.read.values()) == 1


@sync
async def test_with_prefetch_the_reads_stay_within_the_windows_of_the_neighbours():
    rng = np.random.default_rng(4)
    movie = Counting(rng.integers(0, 4000, (80, 120, 160), dtype=np.uint16))
    fv, app = _movie_app(movie)
    async with app.run_test(size=(44, 14)) as pilot:
        fv.mode = "change"
        fv.show_at(movie, 40, window=4)
        await pilot.pause()
        await asyncio.sleep(1.5)  # the user looks: the worker reduces ahead, then goes idle
        await pilot.pause()
        assert set(movie.read) <= set(range(40 - 5, 40 + 6))
        assert {39, 41, 45} <= set(movie.read)  # neighbours and the next window edge are ready
        before = dict(movie.read)
        fv.show_at(movie, 41, window=4)  # the step reads nothing new in the foreground
        assert movie.read == before
        assert max(movie.read.values()) == 1


@sync
async def test_8_16_bit_and_float_movies_look_the_same():
    """Percentile contrast and the noise-scaled change view do not depend on the units: the same
    scene as uint8, as uint16 (x 257) and as float (/ 255) gives the same cells."""
    rng = np.random.default_rng(5)
    scene = rng.integers(0, 200, (12, 90, 120)).astype(np.uint8)
    scene[7:, 30:50, 40:70] += 50  # something appears at frame 7
    canvases = {}
    for name, data in {"uint8": scene, "uint16": scene.astype(np.uint16) * 257,
                       "float32": scene.astype(np.float32) / 255}.items():
        movie = Counting(data)
        fv, app = _movie_app(movie, prefetch=False)
        async with app.run_test(size=(44, 14)) as pilot:
            out = []
            for mode in ("frame", "change", "average"):
                fv.mode = mode
                fv.show_at(movie, 6, window=3)
                await pilot.pause()
                out.append(fv.canvas(12, 40)[0])
            canvases[name] = out
    for name in ("uint16", "float32"):
        for a, b in zip(canvases["uint8"], canvases[name], strict=True):
            assert np.abs(a.astype(int) - b.astype(int)).max() <= 1, name
    change = canvases["uint8"][1]
    assert change.max() > 200  # the brighter patch shows in the change view
