"""The display widgets mounted in tiny Textual apps: FrameView, Timeline, EventList."""

from __future__ import annotations

import asyncio
import functools
from types import SimpleNamespace

import numpy as np
import pytest
from rich.segment import Segment
from textual.app import App, ComposeResult
from textual.filter import ANSIToTruecolor, Monochrome

from reviewer.tui.eventlist import EventList
from reviewer.tui.frameview import MARK_GLYPHS, FrameView
from reviewer.tui.timeline import BARS, MARKS, Timeline


def sync(test):
    """Run an async test body in a fresh event loop (no pytest async plugin needed)."""
    @functools.wraps(test)
    def run(*args, **kwargs):
        return asyncio.run(test(*args, **kwargs))
    return run


class One(App):
    CSS = """
    FrameView { width: 4; height: 2; }
    Timeline { width: 4; height: 3; }
    """

    def __init__(self, widget, **kw) -> None:
        super().__init__(**kw)
        self.widget = widget
        self.chosen: list[int] = []

    def compose(self) -> ComposeResult:
        yield self.widget

    def on_event_list_chosen(self, message: EventList.Chosen) -> None:
        self.chosen.append(message.event_id)


def cells(widget, y):
    """One segment per cell of line y (runs of equal cells come merged)."""
    return [Segment(ch, seg.style) for seg in widget.render_line(y) for ch in seg.text]


def rgb(colour):
    return tuple(colour.triplet)


FRAME = np.array([[0, 10, 20, 30], [40, 50, 60, 70],
                  [80, 90, 100, 110], [120, 130, 140, 255]], dtype=np.uint8)


@sync
async def test_frameview_draws_known_pixels_as_half_blocks():
    fv = FrameView(system="truecolor")
    async with One(fv).run_test(size=(10, 4)) as pilot:
        fv.contrast_wider()
        while fv.clip > 0:
            fv.contrast_wider()
        fv.show(FRAME)  # 4 x 4 px in 4 x 2 cells: one pixel per half cell, min 0 -> 0, max -> 255
        await pilot.pause()
        assert fv.size == (4, 2)
        for y in range(2):
            for x, seg in enumerate(cells(fv, y)):
                assert seg.text == "\u2580"
                assert rgb(seg.style.color) == (FRAME[2 * y, x],) * 3
                assert rgb(seg.style.bgcolor) == (FRAME[2 * y + 1, x],) * 3


@sync
async def test_frameview_drops_only_the_truecolor_filter():
    fv = FrameView()
    async with One(fv).run_test(size=(10, 4)):
        assert any(isinstance(f, ANSIToTruecolor) for f in fv.app.get_line_filters())
        assert not any(isinstance(f, ANSIToTruecolor) for f in fv.get_line_filters())


@sync
async def test_frameview_no_color_keeps_monochrome_filter_and_uses_shades(monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    fv = FrameView()
    async with One(fv).run_test(size=(10, 4)) as pilot:
        assert fv.system == "mono"
        assert any(isinstance(f, Monochrome) for f in fv.get_line_filters())
        fv.show(FRAME)
        await pilot.pause()
        segs = cells(fv, 0) + cells(fv, 1)
        assert all(s.style.color is None and s.style.bgcolor is None for s in segs)
        assert segs[0].text == " " and segs[-1].text != " "


@sync
async def test_frameview_contrast_uses_percentiles():
    frame = np.random.default_rng(5).normal(1000, 50, (40, 60)).astype(np.float32)
    fv = FrameView(system="truecolor")
    async with One(fv).run_test(size=(10, 4)) as pilot:
        fv.show(frame)
        await pilot.pause()
        # the percentiles are those of the frame as shown: k x k block means (the last blocks
        # partial), computed here block by block; numpy.percentile as reference
        k = fv.grid.k
        assert k > 1
        shown = np.array([[frame[y:y + k, x:x + k].mean() for x in range(0, 60, k)]
                          for y in range(0, 40, k)])
        assert fv.limits() == pytest.approx(tuple(np.percentile(shown, [0.5, 99.5])), rel=1e-5)
        fv.contrast_narrower()
        assert fv.clip > 0.5
        assert fv.limits() == pytest.approx(tuple(np.percentile(shown, [fv.clip, 100 - fv.clip])),
                                            rel=1e-5)


@sync
async def test_frameview_mark_is_drawn_around_the_spot():
    frame = np.full((16, 16), 100, dtype=np.uint16)
    frame[0, 0] = 0
    frame[-1, -1] = 200
    fv = FrameView(system="truecolor")
    app = One(fv)
    app.CSS = "FrameView { width: 16; height: 8; }"
    async with app.run_test(size=(20, 10)) as pilot:
        fv.show(frame)
        fv.set_mark(8, 8)  # pixel (8, 8) -> cell row 4, column 8
        await pilot.pause()
        assert [cells(fv, 3)[7].text, cells(fv, 3)[9].text] == list(MARK_GLYPHS[:2])
        assert [cells(fv, 5)[7].text, cells(fv, 5)[9].text] == list(MARK_GLYPHS[2:])
        assert cells(fv, 4)[8].text == "\u2580"  # the marked pixel itself stays visible
        assert rgb(cells(fv, 3)[7].style.color)[0] > 200  # contrasting mark colour
        fv.set_mark(None)
        await pilot.pause()
        assert all(s.text == "\u2580" for s in cells(fv, 3))


@sync
async def test_change_view_shows_brighter_amber_and_darker_blue():
    rng = np.random.default_rng(0)
    before = (100.0 + rng.normal(0, 1, (3, 8, 8))).astype(np.float32)
    after = (100.0 + rng.normal(0, 1, (3, 8, 8))).astype(np.float32)
    after[:, :2, 2:6] += 40  # a patch at the top got brighter
    after[:, 6:, 2:6] -= 40  # a patch at the bottom got darker; the rest is unchanged noise
    fv = FrameView(system="truecolor")
    app = One(fv)
    app.CSS = "FrameView { width: 8; height: 4; }"
    async with app.run_test(size=(10, 6)) as pilot:
        fv.mode = "change"
        fv.show(before[0], before=before, after=after)
        await pilot.pause()
        top = cells(fv, 0)[3].style.color.triplet
        bottom = cells(fv, 3)[3].style.bgcolor.triplet
        assert top.red > top.blue + 100  # brighter: amber
        assert bottom.blue > bottom.red + 100  # darker: blue
        fv.mode = "average"
        await pilot.pause()
        assert np.allclose(fv.view_image(), np.concatenate([before, before[:1], after]).mean(0))
        with pytest.raises(ValueError):
            fv.mode = "sideways"


@sync
async def test_zoom_and_pan_move_the_visible_region():
    fv = FrameView(system="truecolor")
    async with One(fv).run_test(size=(10, 4)) as pilot:
        fv.show(np.zeros((64, 128), dtype=np.uint8))
        assert fv.view_region() == (0, 64, 0, 128)
        fv.zoom_in()
        assert fv.view_region() == (16, 48, 32, 96)
        fv.zoom_to(10, 60, zoom=4)
        assert fv.view_region() == (48, 64, 0, 32)  # clamped to the frame's corner
        fv.pan(1, 0)  # a quarter of the 32-pixel-wide region
        assert fv.view_region()[2] == 2
        fv.zoom_out(), fv.zoom_out(), fv.zoom_out()
        assert fv.view_region() == (0, 64, 0, 128) and fv.zoom == 1
        await pilot.pause()


@sync
async def test_timeline_bars_are_the_maximum_per_column():
    tl = Timeline()
    async with One(tl).run_test(size=(10, 5)) as pilot:
        score = np.zeros(16, dtype=np.float32)  # 16 frames in 4 columns of 4
        score[[1, 6, 9, 15]] = [4.0, 8.0, 2.0, 16.0]
        score[14] = 1.0
        tl.set_scores(score)
        tl.set_position(-1)
        await pilot.pause()
        # two bar rows = 16 eighths; column maxima 4, 8, 2, 16 of 16 -> 4, 8, 2, 16 eighths
        assert tl.render_line(1).text == BARS[4] + BARS[8] + BARS[2] + BARS[8]
        assert tl.render_line(0).text == BARS[0] + BARS[0] + BARS[0] + BARS[8]


@sync
async def test_timeline_marks_by_status_and_position():
    tl = Timeline()
    async with One(tl).run_test(size=(10, 5)) as pilot:
        tl.set_scores(np.zeros(16, dtype=np.float32))
        tl.set_marks(np.array([0, 5, 6, 13]), ["rejected", "accepted", "candidate", "accepted"])
        tl.set_position(9)
        await pilot.pause()
        segs = cells(tl, 2)
        glyph = {k: v[0] for k, v in MARKS.items()}
        # column 1 holds an accepted and a pending one: the pending one shows
        assert [s.text for s in segs] == [glyph["rejected"], glyph["candidate"], "\u25b2",
                                         glyph["accepted"]]
        assert segs[2].style.bgcolor != segs[0].style.bgcolor  # cursor column highlighted
        tl.zoom_in()
        assert tl.view_range() == (5, 13)  # 8 frames centred on frame 9


def _events(n):
    statuses = ("candidate", "accepted", "rejected")
    return [SimpleNamespace(event_id=f"d{i + 1:06d}", frame=3 * i, time_s=3 * i / 400.0, kind="step",
                            score=2.5, status=statuses[i % 3], label="")
            for i in range(n)]


@sync
async def test_event_list_with_100k_rows_renders_and_moves():
    el = EventList()
    app = One(el)
    async with app.run_test(size=(60, 12)) as pilot:
        el.set_rows(_events(100_000))
        el.focus()
        await pilot.pause()
        # 58 columns beside the scroll bar: id, frame, kind, status, label, duration (no room for
        # a note, the place, the time)
        assert el.scrollable_content_region.width == 58
        assert el.render_line(0).text.split() == ["id", "frame", "kind", "status", "label", "dur",
                                                  "fr"]
        assert el.render_line(1).text.split()[:4] == ["d000001", "0", "step", "candidate"]
        await pilot.press("down", "down", "pagedown")
        assert el.cursor_row == 2 + 10
        await pilot.press("end")
        await pilot.pause()
        assert el.cursor_row == 99_999
        last = el.render_line(el.size.height - 1).text.split()
        assert last[1] == str(3 * 99_999)
        await pilot.press("enter")
        await pilot.pause()
        assert app.chosen == ["d100000"]
        assert el.select_event("d000501")
        await pilot.pause()
        assert el.cursor_row == 500
        assert el.render_line(1).text.split()[1] == "1500"
        assert not el.select_event("d000000")


@sync
async def test_event_list_click_chooses_and_update_redraws():
    el = EventList()
    app = One(el)
    async with app.run_test(size=(60, 12)) as pilot:
        rows = _events(30)
        el.set_rows(rows)
        await pilot.pause()
        await pilot.click(EventList, offset=(5, 3))  # line 3 -> row 2
        await pilot.pause()
        assert app.chosen == ["d000003"] and el.cursor_row == 2
        changed = SimpleNamespace(**{**vars(rows[4]), "status": "accepted", "label": "layer"})
        assert el.update_event(changed)
        await pilot.pause()
        assert el.render_line(5).text.split()[-2:] == ["accepted", "layer"]


@sync
async def test_event_list_columns_follow_the_width():
    from reviewer.tui.eventlist import choose_columns

    assert choose_columns(35) == ["id", "frame", "status", "label"]  # the narrow list at 80 columns
    assert choose_columns(29) == ["id", "frame", "status"]  # no room for a label of 6
    assert choose_columns(60) == ["id", "frame", "kind", "status", "label", "note"]
    wide = choose_columns(100)
    assert wide == ["id", "frame", "time", "kind", "score", "status", "label", "place", "dur",
                    "note"]
    el = EventList()
    app = One(el)
    async with app.run_test(size=(100, 6)) as pilot:
        ev = SimpleNamespace(event_id="m000002", frame=40, frame_end=44, time_s=0.1, kind="step",
                             score=3.0, x=12.4, y=7.6, status="accepted", label="layer",
                             note="edge of  the grid")
        el.set_rows([ev])
        await pilot.pause()
        line = el.render_line(1).text
        assert "12, 8" in line and " 5 " in line and line.rstrip().endswith("edge of the grid")
