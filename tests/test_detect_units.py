"""Detection behaviour on small invented movies: globals, transients, cache, settings, cancel."""

from __future__ import annotations

import threading

import numpy as np
import pytest

from reviewer.detect import (
    DetectSettings,
    ScanCancelled,
    load_scan,
    propose,
    save_scan,
    scan_movie,
)
from reviewer.errors import BadInput
from reviewer.movie import ArrayMovie, Timing


def _flat(n=600, dose=40.0, seed=1):
    rng = np.random.default_rng(seed)
    lam = np.full((n, 48, 48), dose)
    return lam, rng


def test_blanked_frame_and_beam_step_are_global_not_growth():
    lam, rng = _flat()
    lam[300] *= 0.004          # blanked frame
    lam[450:] *= 1.15          # beam-current step
    movie = rng.poisson(lam).astype(np.uint16)
    c = scan_movie(ArrayMovie(movie, timing=Timing(fps=400.0))).candidates
    assert set(c["kind"]) == {"global"}, c
    assert sorted(c["frame"]) == [300, 450]


def test_appear_and_leave_is_one_transient():
    lam, rng = _flat()
    lam[250:262, 20:28, 20:28] *= 0.4   # something dark sits there for 12 frames
    movie = rng.poisson(lam).astype(np.uint16)
    c = scan_movie(ArrayMovie(movie)).candidates
    assert len(c) == 1, c
    row = c.iloc[0]
    assert row["kind"] == "transient" and abs(row["frame"] - 250) <= 1
    assert abs(int(row["frame_end"]) - 261) <= 1
    assert np.isnan(row["time_s"])  # no timing known


def test_small_particle_seen_for_two_frames_is_one_transient_on_its_first_frame():
    lam, rng = _flat(n=800)
    yy, xx = np.mgrid[:48, :48]
    for t, (cy, cx) in ((400, (20.0, 19.0)), (401, (21.5, 22.0))):  # a 2.5 px disc moving by
        lam[t][(yy - cy) ** 2 + (xx - cx) ** 2 <= 2.5 ** 2] *= 0.4
    movie = rng.poisson(lam).astype(np.uint16)
    c = scan_movie(ArrayMovie(movie)).candidates
    assert len(c) == 1, c
    row = c.iloc[0]
    assert row["kind"] == "transient" and row["frame"] == 400, c
    assert abs(row["x"] - 20.5) <= 8 and abs(row["y"] - 20.75) <= 8


def test_slow_drift_of_the_beam_raises_no_alarm():
    lam, rng = _flat(n=1500)
    lam *= (1.0 + 0.2 * np.sin(np.arange(1500) / 200.0))[:, None, None]
    movie = rng.poisson(lam).astype(np.uint16)
    res = scan_movie(ArrayMovie(movie))
    assert len(res.candidates) == 0, res.candidates
    assert res.features["score"].dtype == np.float32 and len(res.features["score"]) == 1500


def test_sensitivity_divides_the_threshold():
    lam, rng = _flat(n=1200, seed=4)
    res = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16)))
    few = propose(res.features, DetectSettings(sensitivity=1.0))
    many = propose(res.features, DetectSettings(sensitivity=3.0))
    assert len(many) > len(few)


def test_save_and_load_round_trip(tmp_path):
    lam, rng = _flat(n=400)
    lam[200:, 10:30, 10:12] *= 0.5
    res = scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16), timing=Timing(fps=100.0)))
    save_scan(res, tmp_path / "scan")
    back = load_scan(tmp_path / "scan")
    assert back is not None
    assert back.settings == res.settings
    np.testing.assert_array_equal(back.features["score"], res.features["score"])
    assert list(back.candidates["frame"]) == list(res.candidates["frame"])
    assert load_scan(tmp_path / "missing") is None
    (tmp_path / "scan" / "scan.json").write_text("{broken")
    assert load_scan(tmp_path / "scan") is None


def test_cancel_stops_the_scan():
    lam, rng = _flat(n=300)
    ev = threading.Event()
    ev.set()
    with pytest.raises(ScanCancelled):
        scan_movie(ArrayMovie(rng.poisson(lam).astype(np.uint16)), cancel=ev)


def test_bad_settings_and_tiny_frames_are_bad_input():
    with pytest.raises(BadInput):
        DetectSettings(sensitivity=0)
    with pytest.raises(BadInput):
        scan_movie(ArrayMovie(np.zeros((50, 2, 2), np.uint16)))
    assert DetectSettings.from_dict(DetectSettings(false_alarms=0.1).to_dict()) == \
        DetectSettings(false_alarms=0.1)
    assert DetectSettings.from_dict({"alpha": 0.2}).false_alarms == 0.2  # saved before the rename


def test_large_frames_are_read_in_smaller_blocks():
    """Memory stays bounded for big frames: 2048x2048 uint16 frames (8 MiB) are read a few at a
    time, small frames in full blocks."""
    from reviewer.detect.settings import DetectSettings
    from reviewer.detect.stream import BLOCK_BYTES, block_frames
    from reviewer.movie import ArrayMovie

    s = DetectSettings()
    big = ArrayMovie(np.zeros((1, 2048, 2048), np.uint16))
    small = ArrayMovie(np.zeros((1, 128, 128), np.uint16))
    assert block_frames(big, s) * 2048 * 2048 * 2 <= BLOCK_BYTES
    assert block_frames(small, s) == s.read_block
