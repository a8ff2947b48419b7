"""The layout from 80×24 up: the frame keeps ≥ 40 columns, the key bar always shows help and quit,
the status line keeps the frame number and drops fields by priority; below 80×24 (at any time) the
too-small message covers the screen until the window is large enough again."""

from __future__ import annotations

from rich.text import Text
from test_tui_app import _app, _press, sync

from reviewer.tui.screens import TooSmallScreen
from reviewer.tui.status import clock, decimals_for, fit_fields, format_time


@sync
async def test_80x24_keeps_frame_keys_and_frame_number(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()
        assert not isinstance(app.screen, TooSmallScreen)
        assert app.frameview.size.width >= 40
        bar = app.query_one("#keybar").render().plain
        assert "? " in bar and " help" in bar and "q " in bar and " quit" in bar
        assert len(bar) <= 80
        shown = app.status.shown
        assert shown.startswith(" frame 0/299") and len(shown) <= 80
        await _press(pilot, "o")  # the list can be hidden: the frame takes the whole width
        await pilot.pause()
        assert app.frameview.size.width == 80
        await app.action_quit()


@sync
async def test_shrinking_a_running_app_shows_the_message_and_growing_restores(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=(120, 40)) as pilot:
        await pilot.pause()
        await pilot.resize_terminal(70, 20)
        await pilot.pause(0.1)
        assert isinstance(app.screen, TooSmallScreen)
        text = str(app.screen.query_one("#too-small").render())
        assert "70×20" in text and "80×24" in text
        await _press(pilot, "n a")  # keys of the review do nothing meanwhile
        assert app.session.get("d000000").status == "candidate"
        await pilot.resize_terminal(90, 26)
        await pilot.pause(0.1)
        assert not isinstance(app.screen, TooSmallScreen)
        assert app.query_one("#body").has_class("narrow")  # below 110 columns
        await pilot.resize_terminal(140, 40)
        await pilot.pause(0.1)
        assert not app.query_one("#body").has_class("narrow")
        await app.action_quit()


def test_status_fields_drop_by_priority_not_by_cutting():
    fields = {"frame": Text("frame 12/99"), "time": Text("0.120 s"), "event": Text("d000001 step"),
              "pending": Text("5 pending"), "mode": Text("frame · zoom 1×"), "play": Text("⏸ x1")}
    wide = fit_fields(fields, 200).plain
    assert wide == " frame 12/99 │ 0.120 s │ d000001 step │ 5 pending │ frame · zoom 1× │ ⏸ x1"
    narrow = fit_fields(fields, 50).plain  # mode then pending go first
    assert narrow == " frame 12/99 │ 0.120 s │ d000001 step │ ⏸ x1"
    assert fit_fields(fields, 14).plain == " frame 12/99"


def test_times_have_digits_for_the_frame_rate_and_a_clock_for_long_movies():
    assert decimals_for(1 / 400) == 3 and decimals_for(1 / 10) == 1 and decimals_for(2.0) == 0
    assert format_time(0.1975, 1 / 400) == "0.198 s"
    assert clock(3723.456) == "1:02:03.46"  # 1 h 2 min 3.456 s
    assert format_time(3723.456, 1 / 10, long_movie=True) == "3723.5 s (1:02:03.46)"
