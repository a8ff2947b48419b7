"""The loupe's pure parts: the box it shows, its contrast and picture, the blink means, scale bars,
the line across an edge, and the kymograph of the frames around the cursor.

Expected values are written out by hand or computed here with NumPy from the definitions (a
percentile, a mean), never with the code under test.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from loupe_movies import BACKGROUND, LAYER_FRAME, PLATELET, LayerMovie

from reviewer.movie.base import ArrayMovie
from reviewer.movie.kymograph import Line, kymograph
from reviewer.movie.kymograph_window import KymographWindow, centred_range
from reviewer.movie.regions import (
    across_direction,
    blink_ranges,
    box_around,
    contrast_limits,
    fit_line,
    line_across,
    scale_bar_cells,
    window_mean,
)
from reviewer.tui.kymopane import kymo_canvas, mark_kinds
from reviewer.tui.loupe import loupe_box, loupe_view


def test_box_is_centred_and_kept_inside():
    assert box_around(100, 200, 50, 40, 10, 20) == (35, 45, 40, 60)
    assert box_around(100, 200, 1, 1, 10, 20) == (0, 10, 0, 20)  # shifted in at the corner
    assert box_around(100, 200, 199, 99, 10, 20) == (90, 100, 180, 200)
    assert box_around(8, 8, 4, 4, 10, 20) == (0, 8, 0, 8)  # never larger than the frame


@pytest.mark.parametrize("mag", [1, 2, 4])
def test_one_movie_pixel_per_half_cell_times_the_magnification(mag):
    rows, cols = 10, 40
    y0, y1, x0, x1 = loupe_box(500, 500, 250, 250, rows, cols, mag)
    assert (y1 - y0, x1 - x0) == (2 * rows // mag, cols // mag)


def test_loupe_picture_is_the_region_pixel_for_pixel_with_its_own_percentiles():
    rng = np.random.default_rng(1)
    image = rng.normal(500, 40, size=(300, 400)).astype(np.float32)
    image[:, :100] += 5000  # far from the loupe: must not set its contrast
    canvas, box, (lo, hi), (top, left) = loupe_view(image, 250, 150, 8, 30, 1, 1.0)
    y0, y1, x0, x1 = box
    region = image[y0:y1, x0:x1].astype(np.float64)
    want_lo, want_hi = np.percentile(region, [1.0, 99.0])
    assert (lo, hi) == pytest.approx((want_lo, want_hi))
    want = np.rint(np.clip((region - want_lo) / (want_hi - want_lo) * 255, 0, 255))
    got = canvas[top:top + y1 - y0, left:left + x1 - x0].astype(np.float64)
    assert np.abs(got - want).max() <= 1  # float32 rounding at the .5 boundaries


def test_magnified_pixels_are_blocks():
    image = np.arange(100, dtype=np.float32).reshape(10, 10)
    canvas, box, _, (top, left) = loupe_view(image, 5, 5, 4, 8, 2, 0.0)
    y0, y1, x0, x1 = box
    assert (y1 - y0, x1 - x0) == (4, 4)
    pic = canvas[top:top + 8, left:left + 8]
    assert (pic[0::2, 0::2] == pic[1::2, 1::2]).all() and (pic[0::2] == pic[1::2]).all()
    assert pic[0, 0] == 0 and pic[-1, -1] == 255  # the region's own minimum and maximum


def test_shared_contrast_comes_from_both_images():
    a = np.full((20, 20), 100.0)
    b = np.full((20, 20), 300.0)
    assert contrast_limits([a, b], 0.0) == (100.0, 300.0)
    _, _, limits_a, _ = loupe_view(a, 10, 10, 5, 10, 1, 0.0, contrast_with=[b])
    _, _, limits_b, _ = loupe_view(b, 10, 10, 5, 10, 1, 0.0, contrast_with=[a])
    assert limits_a == limits_b == (100.0, 300.0)
    assert contrast_limits([np.full((3, 3), 7.0)], 0.5) == (6.5, 7.5)  # flat: a range of one
    assert contrast_limits([np.full((3, 3), np.nan)], 0.5) == (0.0, 1.0)


def test_blink_ranges_and_means():
    assert blink_ranges(20, 5, 40) == ((15, 20), (20, 25))
    assert blink_ranges(2, 5, 40) == ((0, 2), (2, 7))
    assert blink_ranges(38, 5, 40) == ((33, 38), (38, 40))
    assert blink_ranges(0, 5, 40)[0] == (0, 0)
    data = np.random.default_rng(2).integers(0, 4000, size=(12, 6, 7)).astype(np.uint16)
    movie = ArrayMovie(data)
    np.testing.assert_allclose(window_mean(movie, 3, 8), data[3:8].mean(axis=0), rtol=1e-6)
    assert window_mean(movie, 5, 5) is None


@pytest.mark.parametrize("pixel_nm,region,cells,metres,n", [
    (0.05, 76, 76, 0.5e-9, 10),  # 76 px x 0.05 nm / 5 = 0.76 nm -> 0.5 nm = 10 px
    (0.05, 512, 66, 5e-9, 13),  # the fitted frame: 100 px of 512 across 66 columns
    (0.2, 100, 400, 2e-9, 40),  # 4x: 10 px -> 40 columns
    (1.3, 64, 64, 10e-9, 8),
])
def test_scale_bar_is_a_round_length_at_the_drawn_scale(pixel_nm, region, cells, metres, n):
    got_n, got_m, text = scale_bar_cells(pixel_nm * 1e-9, region, cells)
    assert got_m == pytest.approx(metres)
    mantissa = got_m / 10 ** math.floor(math.log10(got_m))
    assert round(mantissa, 6) in (1.0, 2.0, 5.0)
    assert got_n == n
    assert abs(got_n - metres / (pixel_nm * 1e-9) * cells / region) <= 1
    assert text.endswith("nm")
    assert scale_bar_cells(None, region, cells) is None


@pytest.mark.parametrize("angle_deg", [0.0, 90.0, 30.0, 135.0])
def test_line_across_an_edge_follows_its_normal(angle_deg):
    """A straight edge whose normal points at `angle_deg` (x right, y down)."""
    h = w = 121
    yy, xx = np.mgrid[0:h, 0:w].astype(float)
    t = math.radians(angle_deg)
    side = (xx - 60) * math.cos(t) + (yy - 60) * math.sin(t)
    image = np.where(side > 0, 2000.0, 1000.0)
    dx, dy = across_direction(image, 60, 60)
    assert abs(abs(dx * math.cos(t) + dy * math.sin(t)) - 1) < 1e-3
    line = line_across(image, 60, 60, 40)
    assert line.length == pytest.approx(40, abs=0.01)
    assert ((line.x0 + line.x1) / 2, (line.y0 + line.y1) / 2) == pytest.approx((60, 60))


def test_lines_stay_inside_the_frame_with_their_width():
    line = fit_line(-5, 3, 40, 3, 5, 30, 30)
    assert (line.x0, line.y0, line.x1, line.y1, line.width) == (2, 3, 27, 3, 5)
    line.check_inside(30, 30)  # raises when any of the 5 parallel lines leaves the frame
    image = np.zeros((30, 30))
    image[:, 2:] = 1.0  # an edge near the left border: the line is shortened to stay inside
    near = line_across(image, 2, 15, 40, width=3)
    near.check_inside(30, 30)
    assert fit_line(4, 4, 4.2, 4, 1, 30, 30) is None


def test_kymograph_window_matches_the_headless_kymograph_and_reads_each_frame_once():
    rng = np.random.default_rng(4)
    data = rng.normal(1000, 30, size=(50, 40, 60)).astype(np.float32)
    reads = []

    class Counting(ArrayMovie):
        def _read(self, start, stop):
            reads.extend(range(start, stop))
            return super()._read(start, stop)

    movie = Counting(data)
    line = Line(5.5, 20.25, 50.0, 12.0, width=3)
    window = KymographWindow(movie, line)
    start, stop = centred_range(30, 16, movie.n_frames)
    assert (start, stop) == (22, 38)
    got = window.image(start, stop)
    want = kymograph(ArrayMovie(data), line, start, stop, 1)  # checked against scipy elsewhere
    np.testing.assert_allclose(got, want, rtol=1e-6)
    assert sorted(reads) == list(range(22, 38))
    window.image(*centred_range(31, 16, movie.n_frames))  # one frame later: one new read
    assert sorted(reads) == list(range(22, 39))
    window.image(40, 42, known={40: data[40], 41: data[41]})  # frames already read: no read
    assert sorted(reads) == list(range(22, 39))
    assert centred_range(2, 16, 50) == (0, 16) and centred_range(49, 16, 50) == (34, 50)
    assert centred_range(5, 100, 50) == (0, 50)


def test_kymograph_canvas_has_one_frame_per_pixel_row_and_marks():
    image = np.tile(np.linspace(0, 1, 20, dtype=np.float32), (12, 1))
    image[6:] += 1.0  # a step at frame start + 6
    canvas, used = kymo_canvas(image, 8, 50, 0.0)
    assert used == 40  # 20 points stretched twice into 50 columns
    assert canvas.shape == (16, 50)
    assert (canvas[:6].astype(int).mean() < canvas[6:12].astype(int).mean())
    assert (canvas[12:] == 0).all()  # no frames there
    kinds = mark_kinds(100, 16, np.array([99, 103, 110, 200]), 105)
    assert kinds.tolist() == [0, 0, 0, 1, 0, 2, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0]


def _layer_rows(canvas_a, canvas_b, movie, box, top, mag):
    diff = np.abs(canvas_a.astype(np.int32) - canvas_b.astype(np.int32))
    y0 = box[0]
    first = top + (movie.layer_y - y0) * mag
    return diff, list(range(first, first + mag))


@pytest.mark.parametrize("mag", [1, 2])
def test_acceptance_the_loupe_shows_a_one_pixel_layer_on_a_2048_movie(mag):
    """2048 x 2048 uint16: a one-pixel-high layer appears at LAYER_FRAME. The loupe's before and
    after pictures (means of N frames, one contrast) differ on the layer's rows and, elsewhere, by
    no more than the shot noise allows."""
    movie = LayerMovie(2048, 40)
    n = 5
    before, after = blink_ranges(LAYER_FRAME, n, movie.n_frames)
    mean_b, mean_a = window_mean(movie, *before), window_mean(movie, *after)
    assert sorted(movie.reads) == list(range(LAYER_FRAME - n, LAYER_FRAME + n))
    x, y, rows, cols = 1024, movie.layer_y, 20, 76
    cb, box, (lo, hi), (top, left) = loupe_view(mean_b, x, y, rows, cols, mag, 0.5, [mean_a])
    ca, box_a, limits_a, _ = loupe_view(mean_a, x, y, rows, cols, mag, 0.5, [mean_b])
    assert box == box_a and limits_a == (lo, hi)
    diff, layer = _layer_rows(ca, cb, movie, box, top, mag)
    # shot noise of a difference of two N-frame means, in palette steps (Poisson-like: var = mean)
    sd_counts = math.sqrt(2 * PLATELET / n)
    sd_steps = sd_counts * 255 / (hi - lo)
    layer_jump = (PLATELET - BACKGROUND) * 255 / (hi - lo)
    assert diff[layer].mean() > 0.8 * min(layer_jump, 255)
    others = np.delete(diff, layer, axis=0)
    assert others.max() < 6 * sd_steps + 1  # no pixel elsewhere beyond noise (6 SD)
    assert np.abs(others.mean(axis=1)).max() < 2 * sd_steps  # no row elsewhere stands out
    # control: two windows both before the layer do not differ on its rows either
    earlier = window_mean(movie, before[0] - n, before[0])
    cc, _, _, _ = loupe_view(earlier, x, y, rows, cols, mag, 0.5, [mean_b, mean_a])
    cb2, _, _, _ = loupe_view(mean_b, x, y, rows, cols, mag, 0.5, [earlier, mean_a])
    control, _ = _layer_rows(cc, cb2, movie, box, top, mag)
    assert control[layer].mean() < 2 * sd_steps
