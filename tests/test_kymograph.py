"""`reviewer kymograph`: bilinear line sampling against outside references, and a staircase front."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest
import tifffile
from PIL import Image

from reviewer.errors import BadInput
from reviewer.movie import ArrayMovie
from reviewer.movie.kymograph import Line, Sampler, frame_range, kymograph

STEPS = (30, 75, 120)  # frames at which the front advances by one pixel (invented for the test)


def front_movie(n=160, h=48, w=64, dose=40.0, seed=3):
    """A bright crystal on the left whose straight edge advances one pixel to the right at STEPS."""
    rng = np.random.default_rng(seed)
    edge = 20 + np.searchsorted(np.array(STEPS), np.arange(n), side="right")
    cols = np.arange(w)[None, None, :]
    expected = np.where(cols < edge[:, None, None], dose * 1.6, dose) * np.ones((n, h, w))
    return rng.poisson(expected).astype(np.uint16), edge


def test_sampling_matches_scipy_map_coordinates():
    # Reference: scipy.ndimage.map_coordinates with order=1 is bilinear interpolation.
    from scipy.ndimage import map_coordinates

    rng = np.random.default_rng(0)
    frames = rng.random((3, 40, 50)) * 1000
    line = Line(3.3, 5.7, 41.9, 30.2, width=3)
    ours = Sampler(line, 40, 50).sample(frames)
    rows, cols = line.points()
    for k in range(3):
        ref = map_coordinates(frames[k], [rows.ravel(), cols.ravel()], order=1)
        ref = ref.reshape(rows.shape).mean(axis=0)
        np.testing.assert_allclose(ours[k], ref, rtol=0, atol=1e-6)


def test_sampling_matches_skimage_profile_line():
    # Reference: skimage.measure.profile_line(order=1, linewidth=W, reduce_func=mean) samples
    # ceil(length + 1) points from src to dst (row, col), W parallel lines one pixel apart.
    from skimage.measure import profile_line

    rng = np.random.default_rng(1)
    image = rng.random((60, 70)) * 500
    line = Line(10.0, 12.0, 50.0, 42.0, width=5)  # length 50: 51 points in both
    ours = Sampler(line, 60, 70).sample(image[None])[0]
    ref = profile_line(image, (line.y0, line.x0), (line.y1, line.x1), linewidth=5, order=1,
                       mode="constant", reduce_func=np.mean)
    assert ref.shape == ours.shape
    np.testing.assert_allclose(ours, ref, rtol=0, atol=1e-6)


def test_bins_are_means_of_their_frames():
    frames = np.arange(10 * 4 * 6, dtype=np.float64).reshape(10, 4, 6)
    movie = ArrayMovie(frames)
    line = Line(0, 1, 5, 1)
    whole = kymograph(movie, line)
    binned = kymograph(movie, line, bin_frames=3)
    assert binned.shape == (4, 6)
    np.testing.assert_allclose(binned[0], whole[0:3].mean(axis=0), rtol=1e-6)
    np.testing.assert_allclose(binned[3], whole[9], rtol=1e-6)  # last, partial bin


def test_staircase_steps_at_the_known_frames(tmp_path):
    data, _ = front_movie()
    movie_path = tmp_path / "front.npy"
    np.save(movie_path, data)
    png = tmp_path / "kymo.png"
    out = subprocess.run(
        [sys.executable, "-m", "reviewer", "kymograph", str(movie_path), "--line", "5,24,45,24",
         "--width", "9", "-o", str(png), "--fps", "100"],
        capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    report = json.loads(out.stdout)
    samples = tifffile.imread(report["tiff"])
    assert samples.shape == (len(data), 41)
    # Edge position per frame: pixels of the line brighter than halfway between the plateaus; a
    # 5-frame median ignores a stray noisy frame. The position must change exactly at STEPS (+-1).
    from scipy.ndimage import median_filter

    lo, hi = np.median(samples[:, -8:]), np.median(samples[:, :8])
    position = (samples > (lo + hi) / 2).sum(axis=1)
    position = median_filter(position, 5, mode="nearest")
    changes = np.flatnonzero(np.diff(position) != 0) + 1
    assert len(changes) == len(STEPS), changes
    assert np.all(np.abs(changes - np.array(STEPS)) <= 1), changes
    assert position[-1] - position[0] == len(STEPS)  # one pixel per step
    assert Image.open(png).size == (41, len(data))


def test_event_marks_and_bad_lines(tmp_path):
    data, _ = front_movie(n=40)
    movie_path = tmp_path / "front.npy"
    np.save(movie_path, data)
    events = tmp_path / "events.csv"
    events.write_text("event_id,frame\nd000001,10\nd000002,30\n")
    png = tmp_path / "k.png"
    out = subprocess.run(
        [sys.executable, "-m", "reviewer", "kymograph", str(movie_path), "--line", "5,24,45,24",
         "--events", str(events), "-o", str(png)], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    pix = np.asarray(Image.open(png))
    marked = np.flatnonzero(pix[:, 0, 0] == 255)
    assert marked.tolist() == [10, 30]
    for bad in (["--line", "1,2,3"], ["--line", "0,0,500,0"], ["--line", "5,5,5,5"],
                ["--line", "1,1,20,1", "--frames", "50:60"]):
        out = subprocess.run(
            [sys.executable, "-m", "reviewer", "kymograph", str(movie_path), *bad, "-o",
             str(tmp_path / "x.png")], capture_output=True, text=True, timeout=60)
        assert out.returncode == 2, (bad, out.stderr)
        assert len(out.stderr.strip().splitlines()) == 1 and "Traceback" not in out.stderr
    # the movie itself is never a target
    out = subprocess.run(
        [sys.executable, "-m", "reviewer", "kymograph", str(movie_path), "--line", "1,1,20,1",
         "-o", str(tmp_path / "front.png")], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0  # front.png/front.tif are new files, not the movie
    assert np.array_equal(np.load(movie_path), data)


def test_frame_range():
    assert frame_range(None, 100) == (0, 100)
    assert frame_range("10:20", 100) == (10, 20)
    assert frame_range(":-10", 100) == (0, 90)
    assert frame_range("-5:", 100) == (95, 100)
    with pytest.raises(BadInput):
        frame_range("a:b", 100)
    with pytest.raises(BadInput):
        frame_range("90:10", 100)


def test_samples_tiff_never_replaces_a_tiff_movie(tmp_path):
    # kymo.png writes kymo.tif beside it: when the movie is kymo.tif that is refused before any work
    data, _ = front_movie(n=20)
    movie_path = tmp_path / "kymo.tif"
    tifffile.imwrite(movie_path, data)
    before = movie_path.read_bytes()
    for cmd in (["kymograph", movie_path, "--line", "5,24,45,24", "-o", tmp_path / "kymo.png"],
                ["clip", movie_path, "--frame", "5", "-o", movie_path]):
        out = subprocess.run([sys.executable, "-m", "reviewer", *map(str, cmd)],
                             capture_output=True, text=True, timeout=60)
        assert out.returncode == 2, out.stderr
        assert "refusing to overwrite" in out.stderr and len(out.stderr.strip().splitlines()) == 1
    assert movie_path.read_bytes() == before
    assert not (tmp_path / "kymo.png").exists()
