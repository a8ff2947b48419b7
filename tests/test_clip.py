"""`reviewer clip`: animation frame count, strip panels, scale bar length, raw crop, bad input."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
import tifffile
from PIL import Image

from reviewer.errors import BadInput
from reviewer.movie.units import format_length, parse_length, round_length


def run(*args):
    return subprocess.run([sys.executable, "-m", "reviewer", *map(str, args)],
                          capture_output=True, text=True, timeout=120)


@pytest.fixture
def movie(tmp_path):
    """A 60-frame 80x100 movie; a bright 6x6 island appears at frame 30 around x=70, y=20."""
    rng = np.random.default_rng(5)
    data = rng.poisson(30, (60, 80, 100)).astype(np.uint16)
    data[30:, 17:23, 67:73] += 60
    path = tmp_path / "island.npy"
    np.save(path, data)
    table = tmp_path / "events.csv"
    table.write_text("event_id,frame,x,y\nd000000,30,70,20\n")
    return path, table, data


def test_animation_has_the_stated_frames(movie, tmp_path):
    path, table, _ = movie
    out = tmp_path / "c.gif"
    r = run("clip", path, "d000000", "--events", table, "--before", 7, "--after", 5,
            "--crop", 32, "-o", out, "--fps", 100)
    assert r.returncode == 0, r.stderr
    facts = json.loads(r.stdout)
    gif = Image.open(out)
    assert gif.n_frames == 12 == facts["frames"]
    assert facts["first_frame"] == 23 and facts["event_frame"] == 30
    # the crop is centred on the event's place and lies inside the frame
    left, top, w, h = facts["crop"]
    assert (w, h) == (32, 32) and left <= 70 < left + w and top <= 20 < top + h


def test_strip_and_scale_bar_length(movie, tmp_path):
    path, table, _ = movie
    out = tmp_path / "strip.png"
    r = run("clip", path, "d000000", "--events", table, "--crop", "full", "--zoom", 2,
            "--pixel-size", "0.25nm", "-o", out)
    assert r.returncode == 0, r.stderr
    facts = json.loads(r.stdout)
    img = np.asarray(Image.open(out).convert("RGB"))
    assert facts["panels"] == ["mean of 10 before", "event", "mean of 10 from event"]
    assert img.shape[1] == 3 * 200 + 2 * 4  # three 100-px panels at zoom 2, two 4-px gaps
    bar_m = facts["scale_bar"]["length_m"]
    assert bar_m == pytest.approx(5e-9)  # a fifth of 100 px x 0.25 nm = 5 nm, already round
    # measure the white bar in the first panel: the longest white run in its bottom rows
    white = np.all(img[-10:, :200] == 255, axis=2)
    longest = 0
    for row in white:
        runs = np.diff(np.flatnonzero(np.diff(np.r_[0, row.astype(int), 0])))[::2]
        longest = max(longest, int(runs.max()) if len(runs) else 0)
    expected = bar_m / 0.25e-9 * 2  # stated length / pixel size, times the zoom
    assert abs(longest - expected) <= 1, (longest, expected)
    # the event panel shows the island, the before panel does not
    before, event = img[:, :200, 0].astype(float), img[:, 204:404, 0].astype(float)
    island = (slice(34, 46), slice(134, 146))
    assert event[island].mean() - event[60:100, 20:60].mean() > 40
    assert abs(before[island].mean() - before[60:100, 20:60].mean()) < 30


def test_stack_is_the_raw_crop(movie, tmp_path):
    path, table, data = movie
    out = tmp_path / "raw.tif"
    r = run("clip", path, "--frame", 30, "--x", 70, "--y", 20, "--crop", 16, "-o", out)
    assert r.returncode == 0, r.stderr
    left, top, w, h = json.loads(r.stdout)["crop"]
    stack = tifffile.imread(out)
    np.testing.assert_array_equal(stack, data[20:40, top:top + h, left:left + w])


@pytest.mark.parametrize("bad", [
    ["d000009"],                                  # no such event
    ["d000000", "--crop", "3"],
    ["d000000", "--pixel-size", "0.2"],           # no unit
    ["d000000", "--pixel-size=-1nm"],
    ["d000000", "--before", "-1"],
    ["--frame", "500"],
    ["d000000", "--frame", "3"],                  # both
])
def test_bad_input_is_one_line(movie, tmp_path, bad):
    path, table, _ = movie
    r = run("clip", path, *bad, "--events", table, "-o", tmp_path / "x.gif")
    assert r.returncode == 2, r.stderr
    assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
    assert not (tmp_path / "x.gif").exists()


def test_never_writes_over_the_movie(movie):
    path, table, data = movie
    r = run("clip", path, "d000000", "--events", table, "-o", table)
    assert r.returncode == 2  # .csv is no clip type
    r = run("clip", path, "d000000", "--events", table, "-o", path.with_suffix(".tif"))
    assert r.returncode == 0  # a new file beside the movie is fine
    np.testing.assert_array_equal(np.load(path), data)


def test_lengths():
    # 1 Å = 0.1 nm (SI brochure, 9th ed.); round lengths are 1, 2 or 5 x 10^k (common practice)
    assert parse_length("0.5A") == pytest.approx(5e-11)
    assert parse_length("2 um") == pytest.approx(2e-6)
    assert round_length(7.3e-9) == pytest.approx(5e-9)
    assert round_length(2.0e-9) == pytest.approx(2e-9)
    assert round_length(1.9e-7) == pytest.approx(1e-7)
    assert format_length(5e-9) == "5 nm" and format_length(2e-6) == "2 µm"
    with pytest.raises(BadInput):
        parse_length("3 furlongs")


def test_scale_bar_from_the_pixel_size_stored_in_an_mrc_file(tmp_path):
    # mrcfile writes the voxel size (Å) into the MRC2014 header (Cheng et al. 2015); the bar is a
    # round length drawn at length / pixel size x zoom pixels
    mrcfile = pytest.importorskip("mrcfile")
    path = tmp_path / "stack.mrc"
    with mrcfile.new(path) as m:
        m.set_data(np.random.default_rng(0).poisson(20, (30, 64, 64)).astype(np.int16))
        m.voxel_size = 2.5  # Å = 0.25 nm
    r = run("clip", path, "--frame", 10, "--fps", 10, "--zoom", 4, "-o", tmp_path / "c.png")
    assert r.returncode == 0, r.stderr
    bar = json.loads(r.stdout)["scale_bar"]
    assert bar["length_m"] == pytest.approx(2e-9)  # a fifth of 64 x 0.25 nm = 3.2 nm -> 2 nm
    assert bar["pixels"] == round(2e-9 / 0.25e-9 * 4)
