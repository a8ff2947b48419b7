"""Robust statistics of the scan: non-finite pixels, blanked starts, the beam reference, the cache's
detector version (generated movies with known events)."""

from __future__ import annotations

import json

import numpy as np

from reviewer.detect import load_scan, save_scan, scan_movie
from reviewer.movie import ArrayMovie, Timing

EVENTS = [(150, 8, 8), (250, 8, 40), (350, 40, 8), (450, 40, 40), (550, 24, 24), (650, 8, 24)]


def _movie(n=800, dose=40.0, seed=3) -> np.ndarray:
    """64x64 Poisson frames; at each EVENTS frame a 10x10 patch darkens for good (a new island)."""
    rng = np.random.default_rng(seed)
    lam = np.full((n, 64, 64), dose)
    for t, y, x in EVENTS:
        lam[t:, y: y + 10, x: x + 10] *= 0.6
    return rng.poisson(lam).astype(np.float32)


def _found(c) -> list[int]:
    local = c[c["kind"] != "global"]
    return [t for t, _, _ in EVENTS if np.any(np.abs(local["frame"].to_numpy() - t) <= 1)]


def test_the_clean_movie_finds_every_event():
    c = scan_movie(ArrayMovie(_movie())).candidates
    assert _found(c) == [t for t, _, _ in EVENTS], c
    assert not (c["kind"] == "global").any(), c


def test_one_nan_pixel_in_the_first_block_is_masked_and_counted():
    frames = _movie()
    frames[5, 30, 30] = np.nan
    frames[400, 3, 60] = np.inf
    res = scan_movie(ArrayMovie(frames))
    c = res.candidates
    assert _found(c) == [t for t, _, _ in EVENTS], c
    assert not (c["kind"] == "global").any(), c
    assert res.meta["nonfinite_pixels"] == 2
    assert any("2 non-finite pixels" in n for n in res.meta["notices"])
    assert np.isfinite(res.features["score"]).all()


def test_a_frame_with_no_finite_pixel_is_blanked():
    frames = _movie()
    frames[300] = np.nan
    c = scan_movie(ArrayMovie(frames)).candidates
    g = c[c["kind"] == "global"]
    assert list(g["frame"]) == [300] and list(g["frame_end"]) == [300], c
    assert _found(c) == [t for t, _, _ in EVENTS], c


def test_a_blanked_start_is_one_short_global_event_and_the_events_are_still_found():
    for blanked in (50, 70, 130):  # within the first read block, past it, most of two blocks
        frames = _movie()
        frames[:blanked] *= 0.004
        c = scan_movie(ArrayMovie(frames, timing=Timing(fps=100.0))).candidates
        g = c[c["kind"] == "global"]
        assert len(g) == 1, (blanked, c)
        assert g.iloc[0]["frame"] == 0 and abs(int(g.iloc[0]["frame_end"]) - (blanked - 1)) <= 3
        assert _found(c) == [t for t, _, _ in EVENTS], (blanked, c)
        assert len(c) == len(EVENTS) + 1, (blanked, c)


def test_the_beam_reference_ignores_blanked_frames_in_the_first_block():
    clean = scan_movie(ArrayMovie(_movie())).features["level"]
    frames = _movie()
    frames[5:45] *= 0.004  # most of the first read block is dark
    res = scan_movie(ArrayMovie(frames))
    lev = res.features["level"]
    good = res.features["blank"] == 0
    assert np.flatnonzero(~good).tolist() == list(range(5, 45))
    # the beam level of the good frames is measured against the same reference as without blanks
    np.testing.assert_allclose(lev[good], clean[good], rtol=5e-3)
    assert _found(res.candidates) == [t for t, _, _ in EVENTS]


def test_a_cached_scan_from_another_detector_version_is_not_reused(tmp_path, monkeypatch):
    from reviewer.detect import cache

    res = scan_movie(ArrayMovie(_movie(n=300)))
    save_scan(res, tmp_path / "scan")
    info = json.loads((tmp_path / "scan" / "scan.json").read_text())
    assert info["detector"] == cache.DETECTOR_VERSION
    assert load_scan(tmp_path / "scan") is not None
    monkeypatch.setattr(cache, "DETECTOR_VERSION", cache.DETECTOR_VERSION + "-next")
    assert load_scan(tmp_path / "scan") is None
