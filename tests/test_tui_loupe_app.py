"""Pilot tests of the loupe, blink, kymograph and clip keys in the review app, on generated movies
(tests/loupe_movies.py) that count the frames they are asked for."""

from __future__ import annotations

import asyncio
import contextlib
import functools
import math

import numpy as np
import pandas as pd
import pytest
import tifffile
from loupe_movies import BACKGROUND, LAYER_FRAME, PLATELET, LayerMovie

from reviewer.movie.kymograph import auto_bin, kymograph
from reviewer.store.session import Session
from reviewer.tui.app import CONTEXT_FRAMES, ReviewApp
from reviewer.tui.keymap import load_keymap
from reviewer.tui.kymopane import mark_kinds
from reviewer.tui.labels import load_labels


def sync(fn):
    @functools.wraps(fn)
    def run(*args, **kwargs):
        return asyncio.run(fn(*args, **kwargs))
    return run


def _app(tmp_path, movie) -> ReviewApp:
    movie.path.write_bytes(b"")  # a file there, so outputs are named after its stem
    session = Session.open(movie.path, movie.fingerprint, override=tmp_path / "session",
                           meta={"frames": movie.n_frames, "fps": 10.0})
    x0, x1 = movie.layer_x
    session.seed(pd.DataFrame({"frame": [LAYER_FRAME], "frame_end": [pd.NA], "time_s": [2.0],
                               "kind": ["step"], "score": [9.0], "x": [float((x0 + x1) // 2)],
                               "y": [float(movie.layer_y)]}))
    return ReviewApp(movie, session, keymap=load_keymap(), labels=load_labels(), run_scan=False)


@contextlib.asynccontextmanager
async def _review(tmp_path, movie, size):
    """The app on `movie` in a terminal of `size`; quits (closing the session) at the end."""
    app = _app(tmp_path, movie)
    async with app.run_test(size=size) as pilot:
        yield app, pilot
        await app.action_quit()


async def _until(pilot, condition, seconds: float = 10.0) -> bool:
    """Wait (for a loaded machine) until condition() holds; whether it did."""
    for _ in range(int(seconds / 0.1)):
        if condition():
            return True
        await pilot.pause(0.1)
    return bool(condition())


async def _press(pilot, *keys):
    await pilot.press(*keys)
    await pilot.pause()


def _layer_diff(app, before, after, mag):
    loupe = app.query_one("#loupe")
    diff = np.abs(after.astype(np.int32) - before.astype(np.int32))
    top = (2 * loupe.image_rows(loupe.size.height) - (loupe.box[1] - loupe.box[0]) * mag) // 2
    first = top + (app.movie.layer_y - loupe.box[0]) * mag
    rows = list(range(first, first + mag))
    return diff[rows], np.delete(diff, rows, axis=0)


@sync
async def test_acceptance_blink_in_the_loupe_shows_the_layer_on_a_2048_movie(tmp_path):
    movie = LayerMovie(2048, 40, path=tmp_path / "layer.npy")
    async with _review(tmp_path, movie, (160, 48)) as (app, pilot):
        await _press(pilot, "n", "l")  # the event at frame 20; the loupe on
        loupe = app.query_one("#loupe")
        assert app.frame == LAYER_FRAME and loupe.display and loupe.mag == 1
        await _press(pilot, "B")
        before, limits_before = loupe.canvas.copy(), loupe.limits
        view_before = app.frameview.limits()
        await _press(pilot, "B")
        after, limits_after = loupe.canvas.copy(), loupe.limits
        assert app.blink_side == "after" and limits_before == limits_after
        assert app.frameview.limits() == view_before  # the frame view: one contrast for both
        layer, others = _layer_diff(app, before, after, 1)
        lo, hi = limits_after
        sd_steps = math.sqrt(2 * PLATELET / app.blink_n) * 255 / (hi - lo)
        assert layer.mean() > 0.8 * min((PLATELET - BACKGROUND) * 255 / (hi - lo), 255)
        assert others.max() < 6 * sd_steps + 1
        # frames read: the frame view's windows around the two frames shown (0 at the start, 20;
        # reduced, with its prefetch of the next frame), and at full resolution the
        # loupe's frame and the blink's 2 x 5, nothing more
        n, w = app.blink_n, CONTEXT_FRAMES
        view = set(range(0, w + 2)) | set(range(LAYER_FRAME - w - 1, LAYER_FRAME + w + 2))
        assert set(movie.reads) <= view | set(range(LAYER_FRAME - n, LAYER_FRAME + n))
        # (the view reads its windows again once: opening the loupe narrows it to a new grid)
        assert len(movie.reads) <= 2 * len(view) + 1 + 2 * n
        count = len(movie.reads)
        await _press(pilot, "B", "B", "B")  # flipping reads nothing again
        assert len(movie.reads) == count
        assert "blink before · N 5" in app.status.plain


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.float32])
@sync
async def test_blink_magnify_and_live_frame_on_each_pixel_type(tmp_path, dtype):
    movie = LayerMovie(256, 40, dtype=dtype, path=tmp_path / "layer.npy")
    async with _review(tmp_path, movie, (140, 40)) as (app, pilot):
        await _press(pilot, "t")  # the what-changed view: the blink takes the frame view over
        await _press(pilot, "n", "L", "B")  # event; loupe at 2x; before
        loupe = app.query_one("#loupe")
        assert loupe.mag == 2 and app.frameview.mode == "frame"
        before = loupe.canvas.copy()
        await _press(pilot, "B")
        layer, others = _layer_diff(app, before, loupe.canvas, 2)
        assert layer.mean() > 4 * max(others.mean(axis=1).max(), 1)
        await _press(pilot, "greater_than_sign")  # N 5 -> 8
        assert app.blink_n == 8 and "mean of frames 20–27" in loupe.label
        await _press(pilot, "V")
        assert app.blink_side is None and app.frameview.mode == "change"
        assert loupe.label == ""


@sync
async def test_auto_blink_alternates_by_itself(tmp_path):
    movie = LayerMovie(128, 40, path=tmp_path / "layer.npy")
    async with _review(tmp_path, movie, (140, 40)) as (app, pilot):
        await _press(pilot, "n", "A")
        seen = set()
        for _ in range(50):  # up to 10 s on a loaded machine; 2 flips a second
            await pilot.pause(0.2)
            seen.add(app.blink_side)
            if len(seen) == 2:
                break
        assert seen == {"before", "after"}
        await _press(pilot, "A")
        side = app.blink_side
        await pilot.pause(1.2)
        assert app.blink_side == side  # stopped


@sync
async def test_at_80x24_the_loupe_takes_the_frame_views_place(tmp_path):
    movie = LayerMovie(256, 40, path=tmp_path / "layer.npy")
    movie.pixel_size_nm = 0.05
    async with _review(tmp_path, movie, (80, 24)) as (app, pilot):
        await _press(pilot, "n", "l")
        loupe = app.query_one("#loupe")
        assert not app.frameview.display and loupe.size.width >= 40 and loupe.size.height >= 8
        assert not app.query_one("#framescale").display  # no bar for a hidden view
        x, y = (movie.layer_x[0] + movie.layer_x[1]) // 2, movie.layer_y
        y0, y1, x0, x1 = loupe.box
        assert x0 <= x < x1 and y0 <= y < y1  # the event's place is in it
        n, metres, _ = loupe.bar
        assert abs(n - metres / 0.05e-9 * loupe.mag) <= 1
        drawn = [loupe.render_line(y).text for y in range(loupe.size.height)]
        assert drawn[-1].strip().startswith("\u2501" * n + " ")  # the bar, then its length
        assert sum(line.count(g) for line in drawn for g in "┌┐└┘") == 4  # the event's corners
        await _press(pilot, "l")
        assert app.frameview.display and not loupe.display
        scale = app.query_one("#framescale")
        assert scale.display and scale.bar is not None


@sync
async def test_kymograph_pane_line_placing_and_saving(tmp_path):
    movie = LayerMovie(256, 40, path=tmp_path / "layer.npy")
    async with _review(tmp_path, movie, (160, 48)) as (app, pilot):
        await _press(pilot, "n", "K")
        line = app.kymo_line
        ex, ey = (movie.layer_x[0] + movie.layer_x[1]) // 2, movie.layer_y
        assert abs(line.x1 - line.x0) < 0.05 * line.length and line.y0 < ey < line.y1  # across
        pane = app.query_one("#kymo")
        assert pane.start <= LAYER_FRAME < pane.start + len(pane.image)
        assert len(pane.image) == min(pane.frames_shown(), movie.n_frames)
        # the samples rise at the layer's row from the layer frame on
        k = int(round(ey - line.y0))
        col = pane.image[:, k]
        assert col[LAYER_FRAME - pane.start:].mean() - col[:LAYER_FRAME - pane.start].mean() > 300
        await _press(pilot, "I", "I")
        assert (tmp_path / "layer.kymograph.png").is_file()
        assert (tmp_path / "layer.kymograph.tif").is_file()
        assert (tmp_path / "layer.kymograph-2.png").is_file()  # never over the first
        await _press(pilot, "x")
        assert app.cross == (ex, ey) and app.focused is app.query_one("#loupe")
        await _press(pilot, "left", "left", "left", "enter", "shift+right", "shift+right", "up",
                     "enter")
        assert app.cross is None and app.frame == LAYER_FRAME  # arrows moved the crosshair only
        ln = app.kymo_line
        assert (ln.x0, ln.y0, ln.x1, ln.y1) == (ex - 3, ey, ex + 17, ey - 1)
        await _press(pilot, "W")
        assert app.kymo_line.width == 3


@sync
async def test_clip_key_writes_the_events_clip_and_strip_once_each(tmp_path):
    from PIL import Image

    movie = LayerMovie(256, 40, path=tmp_path / "layer.npy")
    async with _review(tmp_path, movie, (140, 40)) as (app, pilot):
        await _press(pilot, "n", "M")
        gif = tmp_path / "layer.d000000.clip.gif"
        assert await _until(pilot, gif.is_file), app.alert_text
        await _press(pilot, "M")
        assert await _until(pilot, (tmp_path / "layer.d000000.clip-2.gif").is_file)
        with Image.open(gif) as img:
            assert img.n_frames == 20  # 10 before and 10 from the event on
        assert (tmp_path / "layer.d000000.clip.png").is_file()
        assert (tmp_path / "layer.d000000.clip-2.gif").is_file()
        assert "clip of frames 10–29" in app.alert_text


class DamagedLayerMovie(LayerMovie):
    """Frame 17 cannot be read (as a truncated file would fail)."""

    def _read(self, start, stop):
        if start <= 17 < stop:
            raise OSError("truncated page")
        return super()._read(start, stop)


@sync
async def test_a_damaged_frame_in_the_blink_window_is_one_line_not_a_crash(tmp_path):
    movie = DamagedLayerMovie(128, 40, path=tmp_path / "layer.npy")
    async with _review(tmp_path, movie, (140, 40)) as (app, pilot):
        await _press(pilot, "n", "l", "B")
        assert app.blink_side is None  # back to the live frame
        assert "blink: the frames around the event cannot be read" in app.alert_text
        assert "frame 17" in app.alert_text
        await _press(pilot, "K")  # the kymograph of frames 0-37 needs frame 17 too
        pane = app.query_one("#kymo")
        rows = np.isnan(pane.image[:, 0])
        assert rows.sum() == 1 and rows[17 - pane.start]  # one black row, the rest drawn
        assert "1 unreadable frame black" in pane.label
        await _press(pilot, "right")
        assert app.frame == LAYER_FRAME + 1  # the review goes on


@sync
async def test_the_line_is_kept_in_the_session_and_comes_back(tmp_path):
    movie = LayerMovie(128, 40, path=tmp_path / "layer.npy")
    async with _review(tmp_path, movie, (140, 40)) as (app, pilot):
        await _press(pilot, "n", "K")
        ln = app.kymo_line
        assert ln is not None and app.line_saved_in_session
        assert app.session.meta["kymograph_line"] == [ln.x0, ln.y0, ln.x1, ln.y1, ln.width]
    async with _review(tmp_path, movie, (140, 40)) as (app, pilot):  # the same session again
        again = app.kymo_line
        assert again is not None and (again.x0, again.y1, again.width) == (ln.x0, ln.y1, ln.width)


@pytest.mark.parametrize("size", [(80, 24), (200, 60)])
@sync
async def test_every_key_on_a_movie_smaller_than_the_loupe(tmp_path, size):
    movie = LayerMovie(24, 40, path=tmp_path / "layer.npy")  # 24 x 24 px: the whole frame fits
    async with _review(tmp_path, movie, size) as (app, pilot):
        await _press(pilot, "n", "l", "L", "L", "B", "A", "less_than_sign", "V", "K", "x",
                     "enter", "right", "enter", "W", "W", "I", "M", "L", "p", "l")
        loupe = app.query_one("#loupe")
        assert loupe.box is not None and loupe.box[1] - loupe.box[0] <= 24
        assert (tmp_path / "layer.kymograph.png").is_file()
        assert (tmp_path / "layer.d000000.clip.gif").is_file()


@sync
async def test_whole_movie_kymograph_is_binned_to_fit_and_read_in_the_background(tmp_path):
    movie = LayerMovie(64, 400, path=tmp_path / "layer.npy")
    async with _review(tmp_path, movie, (140, 40)) as (app, pilot):
        await _press(pilot, "n", "K", "K")
        assert app.kymo_scope == "movie"
        assert await _until(pilot, lambda: app._whole is not None, 30)  # a thread does the pass
        await pilot.pause()
        pane = app.query_one("#kymo")
        k = auto_bin(400, pane.frames_shown())
        assert k > 1 and pane.bin_frames == k and len(pane.image) == -(-400 // k)
        want = kymograph(LayerMovie(64, 400), app.kymo_line, 0, 400, k)  # the headless pass
        np.testing.assert_allclose(pane.image, want, rtol=1e-6)
        kinds = mark_kinds(0, len(pane.image), app._ev_frames, app.frame, k)
        assert kinds[LAYER_FRAME // k] == 2  # the cursor is on the event's frame
        await _press(pilot, "right")
        # frames read: 0, 20, 21 shown; the frames around the cursor (the first K); the pass once
        assert len(movie.reads) <= 3 + pane.frames_shown() + 400 + 2 * CONTEXT_FRAMES + 3  # + the frame view's windows
        await _press(pilot, "I")
        assert tifffile.imread(tmp_path / "layer.kymograph.tif").shape == pane.image.shape
        await _press(pilot, "K")
        assert not app.kymo_on
