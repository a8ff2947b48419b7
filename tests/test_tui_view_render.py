"""Pure rendering functions of the frame view: glyphs, colour tables, contrast and resampling."""

from __future__ import annotations

import unicodedata

import numpy as np
import pytest
from PIL import Image
from rich._palettes import EIGHT_BIT_PALETTE
from rich.color import Color, ColorSystem
from skimage.transform import downscale_local_mean

from reviewer.tui import render


def test_half_block_and_shade_glyphs_are_the_unicode_ones():
    # Unicode Standard, code chart "Block Elements" U+2580..U+259F.
    assert render.HALF_BLOCK == "\u2580"
    assert unicodedata.name(render.HALF_BLOCK) == "UPPER HALF BLOCK"
    assert [unicodedata.name(c) for c in render.SHADES[1:]] == [
        "LIGHT SHADE", "MEDIUM SHADE", "DARK SHADE", "FULL BLOCK"]


def test_xterm_grey_ramp_levels():
    # xterm 256colres.h: grey ramp 232-255 at 8 + 10*i (from memory); cross-checked against the
    # 256-colour palette shipped in Rich (rich._palettes.EIGHT_BIT_PALETTE).
    for i in range(24):
        assert render.xterm_rgb(232 + i) == (8 + 10 * i,) * 3
    for n in range(16, 256):
        assert render.xterm_rgb(n) == tuple(EIGHT_BIT_PALETTE[n]), n


def test_grey_snaps_to_nearest_ramp_level():
    # the ramp: 16 (black), 232-255, 231 (white), levels taken from Rich's xterm palette
    ramp = [16, *range(232, 256), 231]
    levels = np.array([EIGHT_BIT_PALETTE[n][0] for n in ramp])
    for v in range(256):
        got = render.nearest_grey_number(v)
        assert got in ramp
        assert abs(EIGHT_BIT_PALETTE[got][0] - v) == np.abs(levels - v).min(), v
    assert render.nearest_grey_number(0) == 16 and render.nearest_grey_number(255) == 231


@pytest.mark.parametrize("pair", [(0, 0), (0, 255), (255, 0), (17, 200), (128, 127)])
def test_truecolor_table_maps_top_to_fg_and_bottom_to_bg(pair):
    top, bottom = pair
    seg = render.segment_table("grey", "truecolor")[top * 256 + bottom]
    assert seg.text == "\u2580"
    assert tuple(seg.style.color.triplet) == (top, top, top)
    assert tuple(seg.style.bgcolor.triplet) == (bottom, bottom, bottom)


def test_256_table_uses_snapped_xterm_numbers_and_renders_them_exactly():
    table = render.segment_table("grey", "256")
    seg = table[250 * 256 + 9]
    assert seg.style.color.number == render.nearest_grey_number(250) == 231
    assert seg.style.bgcolor.number == render.nearest_grey_number(9) == 232
    # ECMA-48 SGR 38;5;n / 48;5;n as written by a 256-colour Rich console
    text = table[238 * 256 + 18].style.render("x", color_system=ColorSystem.EIGHT_BIT)
    assert text == "\x1b[38;5;255;48;5;233mx\x1b[0m"


def test_tables_are_separate_per_colour_system():
    a = render.segment_table("grey", "truecolor")[5]
    b = render.segment_table("grey", "256")[5]
    assert a.style is not b.style  # Rich caches the escape codes on each Style


def test_rgb_round_trip_would_shift_the_grey_ramp():
    # why FrameView drops Textual's ANSI-to-truecolor filter in 256 colours: Rich maps the
    # truecolor equivalent of xterm 255 (238, 238, 238) back to 254.
    rgb = Color.from_ansi(255).get_truecolor()
    assert Color.from_rgb(*rgb).downgrade(ColorSystem.EIGHT_BIT).number == 254


def test_mono_table_has_no_colours():
    table = render.segment_table("grey", "mono")
    assert all(s.style.color is None and s.style.bgcolor is None for s in table[::997])
    assert table[0].text == " " and table[255 * 256 + 255].text == "\u2588"
    assert table[128 * 256 + 128].text == "\u2592"  # mid grey -> medium shade


def test_change_palette_is_signed():
    zero, dark, bright = (render.change_rgb(i) for i in (128, 0, 255))
    assert max(zero) < 40  # no change: near black
    assert dark[2] > dark[0] + 100  # darker: blue dominates
    assert bright[0] > bright[2] + 100  # brighter: red/green (amber) dominate
    assert sum(render.change_rgb(200)) < sum(bright)  # grows with the magnitude


def test_image_to_strips_pairs_rows():
    img = np.array([[10, 20, 30], [40, 50, 60], [70, 80, 90], [100, 110, 120]], dtype=np.uint8)
    table = render.segment_table("grey", "truecolor")
    strips = render.image_to_strips(img, table)
    assert len(strips) == 2 and all(s.cell_length == 3 for s in strips)
    segs = list(strips[1])
    assert tuple(segs[2].style.color.triplet) == (90, 90, 90)
    assert tuple(segs[2].style.bgcolor.triplet) == (120, 120, 120)
    one = render.image_to_strips(img[:, :1], table)
    assert tuple(list(one[0])[0].style.bgcolor.triplet) == (40, 40, 40)
    with pytest.raises(ValueError):
        render.image_to_strips(img[:3], table)


@pytest.mark.parametrize("clip", [0.0, 0.5, 2.0])
def test_contrast_limits_are_numpy_percentiles(clip):
    img = np.random.default_rng(3).gamma(2.0, 100.0, size=(96, 128)).astype(np.float32)
    lo, hi = render.contrast_limits(img, clip)
    assert (lo, hi) == pytest.approx(tuple(np.percentile(img, [clip, 100 - clip])))


def test_contrast_limits_ignore_nan():
    img = np.arange(100, dtype=np.float32).reshape(10, 10)
    img[0, 0] = np.nan
    assert render.contrast_limits(img, 0.0) == (1.0, 99.0)


def test_to_indices_linear_and_clipped():
    out = render.to_indices(np.array([[-5.0, 0.0, 50.0, 100.0, 200.0]]), 0.0, 100.0)
    assert out.tolist() == [[0, 0, 128, 255, 255]]  # 127.5 rounds half to even -> 128
    assert render.to_indices(np.ones((2, 2)), 1.0, 1.0).tolist() == [[0, 0], [0, 0]]


def test_signed_indices_centre_on_128():
    out = render.signed_to_indices(np.array([[-3.0, -1.5, 0.0, 1.5, 3.0, 9.0]]), 3.0)
    assert out.tolist() == [[0, 64, 128, 191, 255, 255]]


@pytest.mark.parametrize("factor", [(2, 2), (4, 4), (3, 2)])
def test_area_resampling_matches_reference_libraries_on_integer_factors(factor):
    img = np.random.default_rng(1).random((24, 36)).astype(np.float32) * 1000
    fy, fx = factor
    out = render.resample(img, 24 // fy, 36 // fx)
    # scikit-image block mean
    np.testing.assert_allclose(out, downscale_local_mean(img, factor), rtol=1e-5)
    # Pillow's box filter
    pil = np.asarray(Image.fromarray(img, mode="F").resize((36 // fx, 24 // fy), Image.BOX))
    np.testing.assert_allclose(out, pil, rtol=1e-4)


def test_nearest_upsampling_on_integer_factor_repeats_pixels():
    img = np.arange(12, dtype=np.float32).reshape(3, 4)
    out = render.resample(img, 9, 8)
    np.testing.assert_array_equal(out, np.repeat(np.repeat(img, 3, axis=0), 2, axis=1))


def test_fit_keeps_aspect_ratio_and_centres():
    # 96 x 128 frame in 60 rows x 200 cols = 120 x 200 square pixels: scale 1.25 -> 120 x 160
    assert render.fit(96, 128, 60, 200) == (120, 160, 0, 20)
    # a wide strip: width limits, height centred
    assert render.fit(10, 400, 30, 100) == (2, 100, 29, 0)


def test_system_from_env():
    assert render.system_from_env({"COLORTERM": "truecolor"}) == "truecolor"
    assert render.system_from_env({"COLORTERM": "24bit", "TERM": "xterm"}) == "truecolor"
    assert render.system_from_env({"TERM": "tmux-256color"}) == "256"
    assert render.system_from_env({"COLORTERM": "truecolor", "NO_COLOR": "1"}) == "mono"
    assert render.system_for_console("standard", False) == "mono"
    assert render.system_for_console("256", False) == "256"
    assert render.system_for_console("truecolor", True) == "mono"


@pytest.mark.parametrize("system", ["truecolor", "256", "mono"])
def test_merged_runs_draw_the_same_cells(system):
    rng = np.random.default_rng(2)
    img = np.repeat(rng.integers(0, 256, (10, 8), dtype=np.uint8), 5, axis=1)  # runs of 5
    table = render.segment_table("grey", system)
    merged = render.image_to_strips(img, table, render.segment_ids("grey", system))
    plain = render.image_to_strips(img, table)
    assert sum(len(list(s)) for s in merged) < sum(len(list(s)) for s in plain)
    for a, b in zip(merged, plain, strict=True):
        cells_a = [(ch, seg.style) for seg in a for ch in seg.text]
        cells_b = [(ch, seg.style) for seg in b for ch in seg.text]
        assert cells_a == cells_b and a.cell_length == b.cell_length == 40
