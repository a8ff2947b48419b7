"""Playback in movie time: the frame-stepping arithmetic as pure functions, then the app through
Pilot (x1 is real time, frames are skipped to hold it, skip-idle draws only active frames).

Expected frames are worked out by hand from frame rate x speed x elapsed time."""

from __future__ import annotations

import time

import numpy as np
from test_tui_app import FPS, N_FRAMES, SIZE, _app, _press, sync

from reviewer.tui.playback import SPEEDS, drawn_rate, movie_frame, play_target


def test_speeds_run_from_a_tenth_to_a_hundred_times_real_time():
    assert SPEEDS == (0.1, 0.25, 0.5, 1, 2, 5, 10, 20, 50, 100)


def test_movie_frame_counts_movie_time_from_the_base():
    assert movie_frame(100, 0.5, 400.0, 1) == 300  # half a second at 400 frames/s
    assert movie_frame(0, 1.0, 400.0, 0.1) == 40  # x0.1: 40 frames in a second
    assert movie_frame(0, 0.004, 400.0, 1) == 1  # 1.6 frames of movie time: frame 1, never early
    assert movie_frame(0, 0.3, 10.0, 2) == 6  # 0.3 s x 10 frames/s x 2
    assert movie_frame(7, 0.0, 400.0, 100) == 7 and movie_frame(7, -1.0, 400.0, 1) == 7


def test_per_frame_times_count_movie_time_from_the_base_frames_time():
    from reviewer.tui.playback import movie_frame_by_times

    times = np.array([0.0, 0.1, 0.2, 1.0, 1.05, 1.1])  # a pause between frames 2 and 3
    assert movie_frame_by_times(times, 0, 0.25, 1) == 2  # 0.25 s: frames at 0, 0.1, 0.2 passed
    assert movie_frame_by_times(times, 0, 0.5, 2) == 3  # 1.0 s of movie time
    assert movie_frame_by_times(times, 3, 0.06, 1) == 4  # from 1.0 s: 1.06 s
    assert movie_frame_by_times(times, 5, 9.0, 1) == 5  # the last frame stays the last


def test_play_target_skips_to_the_frame_movie_time_has_reached():
    assert play_target(10, 60, 100) == (60, False)  # frames 11..59 are skipped
    assert play_target(10, 500, 100) == (99, False)  # not past the last frame
    assert play_target(10, 10, 100) == (10, False)  # not yet time for the next frame


def test_play_target_in_skip_idle_mode():
    active = np.array([30, 31, 70])
    assert play_target(10, 20, 100, active) == (30, True)  # all idle: next active, clock restarts
    assert play_target(30, 35, 100, active) == (31, False)  # an active frame in (30, 35]: it
    assert play_target(30, 80, 100, active) == (70, False)  # the last active one up to 80
    assert play_target(31, 40, 100, active) == (70, True)
    assert play_target(70, 90, 100, active) == (99, True)  # none left: the end
    assert play_target(70, 70, 100, active) == (70, False)


def test_drawn_rate_is_frames_drawn_and_movie_seconds_per_second():
    assert drawn_rate([(0.0, 0), (0.5, 200), (1.0, 400)], 400.0) == (2.0, 1.0)
    assert drawn_rate([(0.0, 0), (0.1, 40)], 400.0) is None  # too short to tell
    assert drawn_rate([(5.0, 0)], 400.0) is None


@sync
async def test_x1_plays_in_real_time_and_skips_frames_the_screen_cannot_draw(tmp_path):
    app = _app(tmp_path)  # 100 frames/s; the screen draws at most play_fps (12) frames/s
    async with app.run_test(size=SIZE) as pilot:
        assert app.speed == 1
        t0 = time.monotonic()
        await _press(pilot, "space")
        await pilot.pause(1.0)
        assert "/s drawn = x" in app.play_text()
        await _press(pilot, "space")
        elapsed = time.monotonic() - t0
        assert not app.playing
        # real time: about 100 frames in a second, never ahead of the clock
        assert 0.5 * FPS <= app.frame <= elapsed * FPS + 1, (app.frame, elapsed)
        drawn = len(app.draws) - 1
        assert drawn <= app.play_fps * elapsed + 2 < app.frame  # most frames were skipped
        await app.action_quit()


@sync
async def test_speed_keys_step_through_the_speeds_and_say_the_rate(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "right_square_bracket right_square_bracket")
        assert app.speed == 5
        assert app.alert_text == ("speed x5 = 500 movie frames/s; drawn at most 12/s, "
                                  "the rest skipped")
        await _press(pilot, "right_square_bracket " * 9)
        assert app.speed == 100  # the fastest
        await _press(pilot, "left_square_bracket " * 12)
        assert app.speed == 0.1 and app.alert_text == "speed x0.1 = 10 movie frames/s"
        await _press(pilot, "right_square_bracket right_square_bracket right_square_bracket right_square_bracket")  # x2
        t0 = time.monotonic()
        await _press(pilot, "space")
        while app.playing and time.monotonic() - t0 < 5:
            await pilot.pause(0.05)
        # x2 of 100 frames/s: the 300 frames take 1.5 s, then playback stops at the last frame
        assert not app.playing and app.frame == N_FRAMES - 1
        assert time.monotonic() - t0 >= (N_FRAMES - 1) / (2 * FPS) - 0.05
        await app.action_quit()


@sync
async def test_skip_idle_draws_only_active_frames(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        scores = np.ones(N_FRAMES)
        scores[[20, 50, 80, 81, 120, 160]] = 50.0
        app.scores = scores
        await _press(pilot, "i right_square_bracket right_square_bracket space")  # skip idle, x5
        t0 = time.monotonic()
        while app.playing and time.monotonic() - t0 < 5:
            await pilot.pause(0.05)
        drawn = [f for _, f in app.draws][1:]
        assert drawn and drawn[-1] == N_FRAMES - 1  # to the end
        assert set(drawn[:-1]) <= {20, 50, 80, 81, 120, 160}, drawn
        await app.action_quit()
