"""The what-changed view's legend: shown with that view only, naming which colour is brighter and
which darker, the scale in noise SDs and the windows compared; in NO_COLOR the glyphs instead."""

from __future__ import annotations

from test_tui_app import SIZE, _app, _press, sync

from reviewer.tui import render
from reviewer.tui.legend import legend_text


def test_legend_names_both_directions_the_scale_and_the_windows():
    t = legend_text(6.0, 12, 1.0, "256")
    assert "brighter" in t.plain and "darker" in t.plain
    assert "±6 noise SD" in t.plain and "mean 12 after − 12 before" in t.plain
    assert len(t.plain) <= 80
    colours = {span.style.color.triplet for span in t.spans if hasattr(span.style, "color")
               and span.style.color is not None}
    assert render.change_rgb(255) in {tuple(c) for c in colours}  # the palette's own ends
    assert render.change_rgb(0) in {tuple(c) for c in colours}
    mono = legend_text(6.0, 12, 1.0, "mono").plain
    assert render.SHADES[-1] * 2 + " brighter" in mono and render.DARKER[-1] * 2 + " darker" in mono


@sync
async def test_legend_follows_the_view(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        legend = app.query_one("#legend")
        assert not legend.display
        await _press(pilot, "t")  # what changed
        assert app.frameview.mode == "change" and legend.display
        assert f"±{app.frameview.change_sds:g} noise SD" in legend.text.plain
        await _press(pilot, "c")  # stronger contrast: fewer SDs for full colour
        assert f"±{app.frameview.change_sds:g} noise SD" in legend.text.plain
        await _press(pilot, "t")  # average
        assert not legend.display
        await app.action_quit()
