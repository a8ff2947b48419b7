"""The help screen: focused when opened (the arrow keys scroll it at once), the whole key map in
two columns at 120×40, and it says how focus moves and what the timeline glyphs mean."""

from __future__ import annotations

from test_tui_app import _app, _press, sync

from reviewer.tui.screens import HelpScreen


@sync
async def test_help_fits_120x40_in_columns(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=(120, 40)) as pilot:
        await _press(pilot, "question_mark")
        await pilot.pause()
        help_ = app.screen.query_one("#help")
        assert app.screen.focused is help_
        assert len(app.screen.query(".help-column")) == 2
        assert help_.max_scroll_y == 0, help_.max_scroll_y  # nothing hidden below
        text = app.screen.text.plain
        for needed in ("tab: the event list takes ↑ ↓", "◆ accepted", "× rejected", "◇ pending",
                       "±2 frames", "save and quit", "beam step", "x1 is real time",
                       "write a note", "next disputed event"):
            assert needed in text, needed
        await _press(pilot, "escape")
        assert not isinstance(app.screen, HelpScreen)
        await app.action_quit()


@sync
async def test_help_scrolls_at_once_at_80x24(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await _press(pilot, "question_mark")
        await pilot.pause()
        help_ = app.screen.query_one("#help")
        assert help_.max_scroll_y > 0
        await _press(pilot, "down down")
        await pilot.pause()
        assert help_.scroll_y == 2
        await _press(pilot, "end")
        await pilot.pause()
        assert help_.scroll_y == help_.max_scroll_y
        await _press(pilot, "pageup home")
        await pilot.pause()
        assert help_.scroll_y == 0
        await _press(pilot, "q")
        assert not isinstance(app.screen, HelpScreen)
        await app.action_quit()
