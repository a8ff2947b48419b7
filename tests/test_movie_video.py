"""Video files written by PyAV (FFmpeg's encoders): luma frames, timing from the stream's timestamps
(variable rate kept), random access through the cached keyframe index, the lossy-compression notice."""

from __future__ import annotations

import csv
import json
from fractions import Fraction

import numpy as np
import pytest

from reviewer.cli import main
from reviewer.movie import open_movie

av = pytest.importorskip("av")

N, H, W, STEP = 120, 48, 64, 60


def step_movie(seed=8):
    lam = np.full((N, H, W), 80.0)
    lam[STEP:, 20:23, 10:30] *= 0.4
    return np.clip(np.random.default_rng(seed).poisson(lam), 0, 255).astype(np.uint8)


def write(path, frames, codec, pix, rate=50, options=None, pts=None, time_base=None):
    with av.open(str(path), "w") as c:
        s = c.add_stream(codec, rate=rate)
        s.width, s.height, s.pix_fmt = frames.shape[2], frames.shape[1], pix
        if time_base is not None:
            s.codec_context.time_base = time_base
        if options:
            s.options = options
        for k, f in enumerate(frames):
            frame = av.VideoFrame.from_ndarray(f, format="gray")
            if pts is not None:
                frame.pts, frame.time_base = int(pts[k]), time_base
            for packet in s.encode(frame):
                c.mux(packet)
        for packet in s.encode():
            c.mux(packet)
    return path


def test_lossless_video_reads_the_written_pixels(tmp_path, capsys):
    frames = step_movie()
    p = write(tmp_path / "m.mkv", frames, "ffv1", "gray")
    assert main(["info", str(p), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert (d["frames"], d["height"], d["width"], d["dtype"], d["fps"]) == (N, H, W, "uint8", 50.0)
    assert not any("lossy" in n for n in d["notices"])
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, N), frames)
        for i in (97, 3, 119, 0, 64):  # random access, backwards too
            np.testing.assert_array_equal(m.frame(i), frames[i])
        for i in range(90, 70, -1):  # stepping back one frame at a time (recent frames kept)
            np.testing.assert_array_equal(m.frame(i), frames[i])
        np.testing.assert_array_equal(m.block(60, 100), frames[60:100])
    with open_movie(p) as m:
        assert "cached frame index" in m.layout


def test_h264_luma_timing_notice_and_scan(tmp_path, capsys):
    frames = step_movie()
    p = write(tmp_path / "m.mp4", frames, "libx264", "yuv420p", rate=400,
              options={"crf": "12", "g": "30"})
    with open_movie(p) as m:
        assert (m.n_frames, m.shape, m.fps) == (N, (H, W), 400.0)
        assert any("lossy video (h264)" in n for n in m.notices)
        block = m.block(0, N).astype(int)
        assert np.abs(block - frames).mean() < 4  # lossy: close to what was written, not equal
        np.testing.assert_array_equal(m.frame(45), block[45])  # a frame between keyframes
        np.testing.assert_array_equal(m.frame(31), block[31])
    out = tmp_path / "found.csv"
    assert main(["scan", str(p), "-o", str(out)]) == 0
    with open(out, newline="") as f:
        assert any(abs(int(r["frame"]) - STEP) <= 1 for r in csv.DictReader(f))


def test_variable_frame_rate_is_kept(tmp_path):
    frames = step_movie()[:20]
    tb = Fraction(1, 1000)
    pts = np.cumsum(np.r_[0, np.where(np.arange(19) < 10, 20, 50)])  # 50 fps, then 20 fps
    p = write(tmp_path / "vfr.mkv", frames, "ffv1", "gray", pts=pts, time_base=tb)
    with open_movie(p) as m:
        assert m.n_frames == 20 and m.fps is None
        np.testing.assert_allclose(m.timing.times_s, pts / 1000.0)
        np.testing.assert_array_equal(m.block(0, 20), frames)


def test_sample_movie_encoded_to_h264(tmp_path):
    """The bundled sample scenario (smaller) through H.264: right frames and timing, and the scan
    still finds most of its known events (lossy noise adds false candidates: see the notice)."""
    from sample_movies.growth import PRESETS, generate, scaled

    movie, truth = generate(scaled(PRESETS["sample"], 800, 64, 96), seed=5)
    frames = np.clip(movie, 0, 255).astype(np.uint8)
    p = write(tmp_path / "sample.mp4", frames, "libx264", "yuv420p", rate=400, options={"crf": "18"})
    with open_movie(p) as m:
        assert (m.n_frames, m.shape, m.fps) == (800, (64, 96), 400.0)
    out = tmp_path / "found.csv"
    assert main(["scan", str(p), "-o", str(out)]) == 0
    with open(out, newline="") as f:
        found = [int(r["frame"]) for r in csv.DictReader(f)]
    hits = sum(any(abs(f - t) <= 1 for f in found) for t in truth["frame"])
    assert hits >= len(truth) // 2, (hits, len(truth), found)
