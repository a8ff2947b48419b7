"""Decision keys act only on the event at the viewed frame (its span, or within ±2 frames).

Same invented movie as tests/test_tui_app.py: candidates at frames 20, 50, 80 (span 80…84), 120, 160.
Expected statuses are written out by hand from the key presses.
"""

from __future__ import annotations

from test_tui_app import SIZE, _app, _press, _status, sync

UNTOUCHED = {"d000000": "candidate", "d000001": "candidate", "d000002": "candidate",
             "d000003": "candidate", "d000004": "candidate"}


async def _goto(pilot, frame: int) -> None:
    await _press(pilot, "g " + " ".join(str(frame)) + " enter")


@sync
async def test_keys_far_from_any_event_change_nothing_and_say_why(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _goto(pilot, 35)  # 15 frames from 20 and from 50
        assert app.frame == 35
        for key in ("a", "r", "2", "comma", "full_stop"):
            await _press(pilot, key)
            assert _status(app) == UNTOUCHED, key
            assert app.alert_text.startswith("no event at frame 35"), (key, app.alert_text)
        assert "m marks one" in app.alert_text
        assert [e.frame for e in app.session.events] == [20, 50, 80, 120, 160]  # nothing nudged
        await app.action_quit()


@sync
async def test_moving_off_an_event_then_deciding_does_not_touch_it(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n right right right a")  # at 20, then 23: 3 frames away
        assert app.frame == 23 and _status(app) == UNTOUCHED
        await _press(pilot, "left a")  # 22: within the ±2 tolerance of 20
        assert _status(app)["d000000"] == "accepted"
        await app.action_quit()


@sync
async def test_a_frame_inside_a_span_acts_on_that_event(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _goto(pilot, 83)  # d000002 spans 80…84
        await _press(pilot, "r")
        assert _status(app) == {**UNTOUCHED, "d000002": "rejected"}
        await _goto(pilot, 87)  # 3 past the span's end: nothing
        await _press(pilot, "a")
        assert _status(app) == {**UNTOUCHED, "d000002": "rejected"}
        await app.action_quit()


@sync
async def test_list_choice_moves_the_view_to_the_event(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "tab down down down enter")  # the list has focus: 4th row = frame 120
        assert app.frame == 120 and app.current_id == "d000003"
        await _press(pilot, "tab a")  # focus back to the frame; accept the one viewed
        assert _status(app)["d000003"] == "accepted"
        await app.action_quit()


@sync
async def test_a_decision_key_pauses_playback(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "space")
        assert app.playing
        await _press(pilot, "a")
        assert not app.playing
        await app.action_quit()
