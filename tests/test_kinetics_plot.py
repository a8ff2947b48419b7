"""The kinetics figure: the recording's start and end, the gap before the first event, the band
around the rate and the log-survival panel, read back with Pillow."""

from __future__ import annotations

import numpy as np
from PIL import Image

from reviewer.kinetics import summarise
from reviewer.kinetics.plot import BAND, EDGE, GAP, PANEL_W, plot_groups


def _colours(img: Image.Image, box) -> set:
    return {c for _, c in img.crop(box).convert("RGB").getcolors(1 << 20)}


def test_incubated_table_shows_the_gap_and_the_recording_edges(tmp_path):
    t = 150 + np.cumsum(np.random.default_rng(5).exponential(1.0, 60))
    s = summarise(t, duration_s=float(t[-1] + 10), n_boot=99, n_gof=99)
    png = tmp_path / "k.png"
    plot_groups(png, [("layer", t, s)])
    with Image.open(png) as img:  # Pillow reads back what we wrote
        assert img.size == (3 * PANEL_W, 340)
        middle = _colours(img, (PANEL_W, 0, 2 * PANEL_W, 340))
        survival = _colours(img, (2 * PANEL_W, 0, 3 * PANEL_W, 340))
        # the shaded gap spans 150 of ~220 s: most of the plot's width left of the first event
        gap_px = np.sum(np.all(np.asarray(img.convert("RGB"))[170, PANEL_W:2 * PANEL_W] == GAP,
                               axis=-1))
    assert GAP in middle and EDGE in middle and BAND in middle
    assert gap_px > 0.5 * (PANEL_W - 80)
    assert (200, 60, 40) in survival  # the exponential's straight line on the log-survival panel


def test_without_a_gap_nothing_is_shaded(tmp_path):
    t = np.cumsum(np.random.default_rng(6).exponential(1.0, 40)) - 0.9  # first event near 0
    t = t - t[0]
    s = summarise(t, n_boot=99, n_gof=99)
    png = tmp_path / "k.png"
    plot_groups(png, [("layer", t, s)])
    with Image.open(png) as img:
        assert GAP not in _colours(img, (PANEL_W, 0, 2 * PANEL_W, 340))
