"""Large frames in bounded memory: bands of tile rows, a calibration whose cost does not grow with the
frame size, small read blocks and scan buffers."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from reviewer.detect import DetectSettings, scan_movie, scoring
from reviewer.detect.pulse import _simulated_pulse_tests, null_pulse_tests
from reviewer.detect.stream import _Scanner, block_frames
from reviewer.movie import ArrayMovie


def _movie(n=500, h=160, w=128, seed=8):
    rng = np.random.default_rng(seed)
    lam = np.full((n, h, w), 30.0)
    lam[200:, 20:30, 30:40] *= 0.6      # island at the top
    lam[300:, 120:128, 90:104] *= 0.55  # island near the bottom
    lam[380:383, 70:76, 60:66] *= 0.3   # particle across the middle (3 frames)
    return rng.poisson(lam).astype(np.uint16)


def test_scoring_in_bands_finds_what_the_whole_grid_finds(monkeypatch):
    frames = _movie()
    whole = scan_movie(ArrayMovie(frames)).candidates
    monkeypatch.setattr(scoring, "BAND_CELLS", 20_000)  # bands of a few tile rows (20 rows here)
    banded = scan_movie(ArrayMovie(frames)).candidates
    assert len(whole) >= 3, whole
    pd.testing.assert_frame_equal(whole[["frame", "kind"]], banded[["frame", "kind"]])
    assert np.allclose(whole["x"], banded["x"], atol=4, equal_nan=True)
    assert np.allclose(whole["y"], banded["y"], atol=4, equal_nan=True)


def test_calibration_on_a_capped_grid_matches_a_direct_one():
    # the scaled number of tests on a 64x64 grid against running the null simulation on it
    direct = scoring._simulated_tests(64, 64, (3, 10, 24), 0)
    scaled = scoring.null_tests(64, 64, (3, 10, 24), 0)
    assert scaled == pytest.approx(direct, rel=0.15)
    assert scoring.null_tests(20, 30, (3, 10, 24), 0) == scoring._simulated_tests(20, 30, (3, 10, 24), 0)
    assert null_pulse_tests(64, 64) == pytest.approx(4 * _simulated_pulse_tests(32, 32), rel=1e-3)


def test_the_stored_calibrations_are_the_simulations():
    from reviewer.detect.pulse import KNOWN_PULSE_TESTS

    for (gy, gx, windows, outer), k in scoring.KNOWN_TESTS.items():
        assert scoring._simulated_tests(gy, gx, windows, outer) == pytest.approx(k, rel=1e-3)
    for (gy, gx), k in KNOWN_PULSE_TESTS.items():
        assert _simulated_pulse_tests(gy, gx) == pytest.approx(k, rel=1e-3)


def test_buffers_stay_bounded_for_camera_size_frames():
    s = DetectSettings()
    per = block_frames(ArrayMovie(np.zeros((1, 4096, 4096), np.uint16)), s)
    assert per == 1  # one 32 MiB frame per read
    sc = _Scanner(1000, (4096, 4096), s, "big", per)
    assert sc.buf.nbytes <= 200 * 2**20, sc.buf.nbytes / 2**20
    small = _Scanner(1000, (128, 128), s, "small", 64)
    assert small.chunk == s.chunk  # small frames keep the long chunks


def test_features_written_as_they_are_made_are_moved_into_the_cache(tmp_path):
    from reviewer.detect import load_scan, save_scan

    frames = _movie(n=400)
    ram = scan_movie(ArrayMovie(frames))
    folder = tmp_path / "scan"
    disk = scan_movie(ArrayMovie(frames), workdir=folder)
    assert isinstance(disk.features["score"], np.memmap)
    assert (folder / "features.new" / "score.npy").is_file()
    pd.testing.assert_frame_equal(ram.candidates, disk.candidates)
    save_scan(disk, folder)
    assert not (folder / "features.new").exists()
    back = load_scan(folder)
    assert back is not None and isinstance(back.features["score"], np.memmap)
    assert set(back.features) == set(ram.features)
    for k, v in ram.features.items():
        np.testing.assert_array_equal(back.features[k], v)
    save_scan(back, folder)  # re-proposed from the cached features: still loadable
    again = load_scan(folder)
    np.testing.assert_array_equal(again.features["zw"], ram.features["zw"])
    pd.testing.assert_frame_equal(again.candidates, ram.candidates, check_dtype=False)
