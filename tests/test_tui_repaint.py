"""What a key sends to the terminal: only the rows of the frame view that changed, only the rows of
the event list the cursor left and reached, and a message line that never changes the layout.

Which rows "changed" is worked out here from the cells of two full drawings (character and style of
every cell), not by the widget's own comparison of palette indices."""

from __future__ import annotations

import numpy as np
from test_tui_app import _app, _press, sync
from test_tui_view_frames import One

from reviewer.tui.frameview import FrameView


def _cells(strip) -> list[tuple[str, object]]:
    return [(ch, seg.style) for seg in strip for ch in seg.text]


def _sent_rows(app, widget) -> list[int]:
    """The widget's rows that the screen updates send to the terminal from now on (the spans of
    Textual's partial updates; a full update sends every row)."""
    sent: list[int] = []
    real = app._display

    def display(screen, update):
        region = widget.region
        spans = getattr(update, "spans", None)
        if update is None:  # nothing to send
            spans = []
        elif spans is None:  # a full update: every row
            spans = [(y, region.x, region.right) for y in range(region.y, region.bottom)]
        for y, x1, x2 in spans:
            if region.y <= y < region.bottom and x1 < region.right and x2 > region.x:
                sent.append(y - region.y)
        return real(screen, update)

    app._display = display
    return sent


def _drawing(fv) -> list[list[tuple[str, object]]]:
    return [_cells(fv.render_line(y)) for y in range(fv.size.height)]


async def _shown(fv, pilot, image) -> list[list[tuple[str, object]]]:
    """Show `image`, let the screen update, and return the drawing."""
    fv.show(image)
    await pilot.pause()
    return _drawing(fv)


def _image() -> np.ndarray:
    rng = np.random.default_rng(3)
    return rng.integers(0, 4000, size=(24, 40)).astype(np.uint16)  # 12 x 40 cells, no margin


@sync
async def test_a_new_frame_draws_again_only_the_rows_whose_cells_changed():
    fv = FrameView(system="256", prefetch=False)
    async with One(fv).run_test(size=(40, 12)) as pilot:
        first = _image()
        before = await _shown(fv, pilot, first)
        second = first.copy()
        # swaps keep every value (so the percentile contrast is the same): pixel rows 8/9 and 20
        # share the cell rows 4 and 10 (two pixel rows a cell)
        second[8, :5], second[9, :5] = first[9, :5], first[8, :5].copy()
        second[20, [3, 30]] = first[20, [30, 3]]
        sent = _sent_rows(fv.app, fv)
        after = await _shown(fv, pilot, second)
        changed = {y for y in range(12) if before[y] != after[y]}
        assert changed == {4, 10}
        assert sorted(sent) == [4, 10]


@sync
async def test_the_same_frame_shown_again_draws_no_row_and_a_moved_mark_only_its_rows():
    fv = FrameView(system="256", prefetch=False)
    async with One(fv).run_test(size=(40, 12)) as pilot:
        image = _image()
        await _shown(fv, pilot, image)
        sent = _sent_rows(fv.app, fv)
        before = await _shown(fv, pilot, image)
        assert sent == []
        fv.set_mark(20.0, 12.0)  # pixel row 12: cell row 6, corners on rows 5 and 7
        await pilot.pause()
        after = _drawing(fv)
        assert {y for y in range(12) if before[y] != after[y]} == {5, 7}
        assert sorted(sent) == [5, 7]


@sync
async def test_a_resize_draws_the_frame_view_once(tmp_path):
    fv = FrameView(system="256", prefetch=False)
    app = One(fv)
    async with app.run_test(size=(40, 12)) as pilot:
        fv.show(_image())
        await pilot.pause()
        builds = []
        real = fv._build
        fv._build = lambda rows, cols: builds.append((rows, cols)) or real(rows, cols)
        fv.styles.height = 10
        await pilot.pause()
        await pilot.pause()
        assert builds == [(10, 40)]


@sync
async def test_moving_the_cursor_in_the_event_list_draws_two_rows(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=(120, 40)) as pilot:
        await _press(pilot, "n")  # cursor on the first event (list row 0, line 1 under the titles)
        sent = _sent_rows(app, app.eventlist)
        await _press(pilot, "n")
        assert sorted(sent) == [1, 2]
        sent.clear()
        await _press(pilot, "a")  # the second event's status changes: its row only
        assert sorted(sent) == [2]
        await app.action_quit()


@sync
async def test_a_message_goes_when_the_cursor_moves_on_and_never_moves_the_frame(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=(120, 40)) as pilot:
        size = app.frameview.size
        await _press(pilot, "u")  # nothing to undo: said in the message line
        assert "nothing to undo" in app.alert_text and app.query_one("#alert").display
        assert app.frameview.size == size
        await _press(pilot, "right")
        assert app.alert_text == ""
        assert app.frameview.size == size
        await _press(pilot, "u")
        await _press(pilot, "t")  # another view of the same frame is not moving on
        assert "nothing to undo" in app.alert_text
        await _press(pilot, "space ]")  # playing: what the speed key said stays while frames pass
        start = app.frame
        await pilot.pause(0.5)
        assert app.frame > start and app.alert_text.startswith("speed")
        await app.action_quit()


@sync
async def test_an_input_thread_left_running_by_its_driver_is_ended():
    # the loop below is Textual's input loop in miniature (drivers/linux_driver.py run_input_thread:
    # `while not self.exit_event.is_set()`), reading end-of-file of a terminal that went away
    import threading

    from textual.app import App
    from textual.driver import Driver

    from reviewer.tui.app import stop_input_threads

    class Gone(Driver):
        def __init__(self, app) -> None:
            super().__init__(app)
            self.exit_event = threading.Event()

        def write(self, data: str) -> None: ...
        def start_application_mode(self) -> None: ...
        def disable_input(self) -> None: ...
        def stop_application_mode(self) -> None: ...

        def read_loop(self) -> None:
            while not self.exit_event.is_set():
                threading.Event().wait(0.01)

    driver = Gone(App())
    thread = threading.Thread(target=driver.read_loop, name="textual-input")
    thread.start()
    try:
        assert stop_input_threads() == 1
        assert not thread.is_alive()
    finally:
        driver.exit_event.set()
        thread.join()
