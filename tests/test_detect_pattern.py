"""The pattern statistic (reviewer/detect/pattern.py): its null against scipy's χ², its sums against
a direct loop, a turning lattice patch found at its frame, and quiet under drift and a focus ramp."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from lattice_movies import fringe_movie
from scipy import integrate, stats

from reviewer.detect import DetectSettings, scan_movie
from reviewer.detect.pattern import CELL, DOF, PatternTrack, log_sf, tile_q
from reviewer.movie import ArrayMovie, Timing


def _ram(name, shape, dtype):
    return np.zeros(shape, dtype)


def test_tile_q_against_a_direct_loop():
    # Q_T = Σ d²/s − (Σ d)²/Σ s per CELL × CELL tile, worked out by plain Python loops
    rng = np.random.default_rng(4)
    d = rng.normal(0, 5, (2, 2 * CELL, 3 * CELL + 1)).astype(np.float32)
    s = rng.uniform(20, 60, d.shape).astype(np.float32)
    q = tile_q(d, s)
    assert q.shape == (2, 2, 3)
    for m in range(2):
        for ty in range(2):
            for tx in range(3):
                e = sd = ss = 0.0
                for y in range(ty * CELL, (ty + 1) * CELL):
                    for x in range(tx * CELL, (tx + 1) * CELL):
                        e += float(d[m, y, x]) ** 2 / float(s[m, y, x])
                        sd += float(d[m, y, x])
                        ss += float(s[m, y, x])
                assert q[m, ty, tx] == pytest.approx(e - sd * sd / ss, rel=1e-4, abs=1e-4)


def test_track_sums_windows_as_written_out():
    # a 12×12 frame is 6×6 two-by-two bins and one tile of the 4×4 bins one bin in: the track's
    # Q for frame t is tile_q of (sum of frames t..t+w−1) − (sum of frames t−w..t−1) over their
    # sum, binned by hand
    rng = np.random.default_rng(5)
    w, n = 3, 40
    movie = rng.poisson(30.0, (n, 12, 12)).astype(np.uint16)
    tr = PatternTrack(n, (12, 12), w, _ram)
    for a in range(0, n, 7):  # blocks of any length
        tr.push(movie[a: a + 7])
    tr.flush()
    bins = movie.reshape(n, 6, 2, 6, 2).sum(axis=(2, 4)).astype(np.float64)[:, 1:5, 1:5]
    for t in range(w, n - w):
        after, before = bins[t: t + w].sum(0), bins[t - w: t].sum(0)
        d, s = after - before, after + before
        want = (d * d / s).sum() - d.sum() ** 2 / s.sum()
        if tr.model[t] <= 30.0:  # (frames where the field model was subtracted differ)
            assert tr.qmax[t, 0] == pytest.approx(want, rel=1e-4)
    assert np.all(tr.qmax[:w] == 0) and np.all(tr.qmax[n - w:] == 0)


def test_null_of_q_follows_chi_square():
    # A static lattice under Poisson counts: the tile statistic Q against scipy.stats.chi2 with
    # CELL² − 1 degrees of freedom (KS test and upper quantiles). Frames 2w + 1 apart share no
    # frame, so their Q values are independent.
    w = 4
    n = (2 * w + 1) * 700
    yy, xx = np.mgrid[:12, :12]
    mu = 25.0 * (1 + 0.3 * np.cos(2 * np.pi * xx / 5.0) * np.cos(2 * np.pi * yy / 7.0))
    movie = np.random.default_rng(6).poisson(mu, (n, 12, 12)).astype(np.uint16)
    tr = PatternTrack(n, (12, 12), w, _ram)
    tr.push(movie)
    tr.flush()
    q = tr.qmax[w: n - w: 2 * w + 1, 0].astype(np.float64)
    ref = stats.chi2(DOF[0])  # scipy.stats.chi2
    assert stats.kstest(q, ref.cdf).pvalue > 1e-3
    for p in (0.5, 0.9, 0.99):
        assert np.quantile(q, p) == pytest.approx(ref.ppf(p), rel=0.08)
    # and the score's tail: exact where scipy's survival function is representable
    x = np.array([10.0, 40.0, 90.0])
    assert np.allclose(log_sf(x, DOF[0]), stats.chi2.logsf(x, DOF[0]), rtol=1e-6)
    # far out, where scipy's logsf underflows to -inf: against the log of the density integrated
    # numerically (scipy.integrate.quad of exp(logpdf(x + u) − logpdf(x)) over u ≥ 0)
    for x in (1500.0, 4000.0):
        rest, _ = integrate.quad(lambda u, x=x: np.exp(ref.logpdf(x + u) - ref.logpdf(x)), 0,
                                 np.inf)
        want = ref.logpdf(x) + np.log(rest)
        assert log_sf(np.array([x]), DOF[0])[0] == pytest.approx(want, rel=1e-6)


def _scan(movie, patterns=True):
    return scan_movie(ArrayMovie(movie, timing=Timing(fps=100.0)),
                      DetectSettings(patterns=patterns))


def test_turning_lattice_patch_found_at_its_frame():
    # 5 counts/px, a disc of radius 9 px turns by 60°: the tile sums alone miss it
    movie = fringe_movie(400, 64, 5.0, seed=7, drift=0.005, turn_at=210, turn_deg=60.0,
                         disc=(30.0, 34.0, 9.0))
    assert len(_scan(movie, patterns=False).candidates) == 0
    c = _scan(movie).candidates
    local = c[c["kind"] != "global"]
    hit = local[(local["frame"] - 210).abs() <= 1]
    assert len(hit) == 1
    assert np.hypot(hit["x"].iloc[0] - 34.0, hit["y"].iloc[0] - 30.0) <= 12.0
    assert len(local) == 1  # nothing else in the movie changed


def test_quiet_under_drift_focus_ramp_and_beam_wander():
    # 0.03 px/frame of drift (12 px over the movie), the blur sigma 0.3 -> 1.5 px, ±3 % beam:
    # without the whole-field model this movie gives pattern candidates
    movie = fringe_movie(400, 64, 100.0, seed=8, drift=0.03, ramp=(0.3, 1.5))
    r = _scan(movie)
    assert len(r.candidates) == 0
    assert float(np.max(r.features["qmodel"])) > 30.0  # the model was needed, and used


def test_wiring_scan_patterns_from_the_command_line(tmp_path, capsys):
    # `reviewer scan --patterns` writes the pattern candidate; `--patterns --workers 2` is one
    # line and exit 2, nothing written
    from reviewer.cli import main

    path = tmp_path / "fringes.npy"
    np.save(path, fringe_movie(400, 64, 5.0, seed=7, drift=0.005, turn_at=210, turn_deg=60.0,
                               disc=(30.0, 34.0, 9.0)))
    out = tmp_path / "c.csv"
    assert main(["scan", str(path), "--patterns", "-o", str(out)]) == 0
    rows = pd.read_csv(out)
    assert list(rows["frame"]) == [210] and list(rows["kind"]) == ["step"]
    capsys.readouterr()
    bad = tmp_path / "bad.csv"
    assert main(["scan", str(path), "--patterns", "--workers", "2", "-o", str(bad)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--patterns" in err[0] and not bad.exists()


def test_frames_smaller_than_a_pattern_tile_scan_without_it():
    movie = np.random.default_rng(9).poisson(20.0, (60, 6, 6)).astype(np.uint16)
    r = _scan(movie)
    assert np.all(r.features["pattern"] == 0) and len(r.candidates) == 0


def test_holes_of_non_finite_pixels_are_no_change_of_pattern():
    # a 20×20 px block of NaN in frames 150-169 of a static lattice: the pattern test holds
    # those bins and adds no candidate to the tile statistics' own, and its score stays low
    movie = fringe_movie(300, 64, 20.0, seed=10).astype(np.float32)
    movie[150:170, 10:30, 20:40] = np.nan
    r = _scan(movie)
    pd.testing.assert_frame_equal(r.candidates, _scan(movie, patterns=False).candidates)
    assert float(r.features["pattern"].max()) < 4.0
