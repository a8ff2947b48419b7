"""One movie scanned in parts (reviewer/detect/split.py) against the whole scan: events just before,
at and just after a join and in the context the parts share, found at the same frame with the same
kind; every per-frame feature equal within split.SCORE_TOLERANCE. Then the same through the real
engine: `reviewer scan --workers 2` (a local Dask cluster of processes) and `reviewer batch`
splitting a long movie over idle workers."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from dask_processes import dask_processes, reviewer

from reviewer.detect import DetectSettings, compute_features, propose
from reviewer.detect.split import SCORE_TOLERANCE, plan_parts, scan_in_parts
from reviewer.movie.base import ArrayMovie

N, SIDE = 4300, 48  # two parts of at least MIN_JOIN frames: one join (where plan_parts puts it)
MIN_JOIN = 2048


def _movie(n: int, step_at: int | None, seed: int, blank_at: int | None = None) -> np.ndarray:
    """Shot-noise frames (about 40 counts per pixel over a fixed texture) with one local step: an
    8x8 px patch 20 % brighter from frame `step_at` on; `blank_at`: one frame with the beam off."""
    rng = np.random.default_rng(seed)
    texture = 40.0 * (1 + 0.12 * rng.standard_normal((SIDE, SIDE))).clip(0.5, None)
    out = np.empty((n, SIDE, SIDE), np.uint16)
    for a in range(0, n, 512):
        b = min(n, a + 512)
        lam = np.broadcast_to(texture, (b - a, SIDE, SIDE)).copy()
        if step_at is not None and step_at < b:
            lam[max(step_at - a, 0):, 20:28, 12:20] *= 1.2
        if blank_at is not None and a <= blank_at < b:
            lam[blank_at - a] *= 0.004
        out[a:b] = rng.poisson(lam)
    return out


def _join(s: DetectSettings) -> tuple[int, int]:
    parts = plan_parts(ArrayMovie(np.zeros((N, SIDE, SIDE), np.uint16)), s, 2, MIN_JOIN)
    assert len(parts) == 2
    return parts[1].start, parts[1].start - parts[1].read_from  # the join, the context


def _same(whole: dict, split: dict) -> None:
    assert list(whole) == list(split)
    for name in whole:
        a, b = np.asarray(whole[name], np.float64), np.asarray(split[name], np.float64)
        assert a.shape == b.shape, name
        np.testing.assert_allclose(b, a, rtol=0, atol=SCORE_TOLERANCE, equal_nan=True,
                                   err_msg=name)


def _scans(data: np.ndarray, s: DetectSettings):
    movie = ArrayMovie(data)
    fw, _ = compute_features(movie, s)
    fs, meta = scan_in_parts(movie, s, 2, min_part=MIN_JOIN)
    assert meta["parts"] == 2
    return fw, fs


@pytest.mark.parametrize("where", ["overlap_start", "-5", "-1", "at", "+1", "+5", "overlap_end"])
def test_event_near_the_join_found_at_the_same_frame(where):
    s = DetectSettings()
    join, ctx = _join(s)
    offset = {"overlap_start": -ctx + 2, "at": 0, "overlap_end": ctx - 2}.get(where)
    at = join + (int(where) if offset is None else offset)
    fw, fs = _scans(_movie(N, at, seed=len(where)), s)
    _same(fw, fs)
    for name in ("score", "pulse", "zw", "blank"):  # no blanked frame near the join: exact
        assert np.array_equal(fw[name], fs[name]), name
    cw, cs = propose(fw, s), propose(fs, s)
    steps = cw[(cw["kind"] == "step") & ((cw["frame"] - at).abs() <= 1)]
    assert len(steps) == 1, cw  # the whole scan finds the step where it is
    near = cs[(cs["frame"] - steps["frame"].iloc[0]).abs() <= 1]
    assert list(near["kind"]) == ["step"]
    pd.testing.assert_frame_equal(cw, cs)  # and the split scan the same candidates


def test_blanked_frame_just_after_a_part_starts():
    """The one approximation (the blank test's reference after a join): a beam-off frame right
    where the second part starts reading is still held, and nothing else changes."""
    s = DetectSettings()
    join, ctx = _join(s)
    fw, fs = _scans(_movie(N, join + 300, seed=7, blank_at=join - ctx + 1), s)
    assert fs["blank"][join - ctx + 1] == 1 and fw["blank"][join - ctx + 1] == 1
    _same(fw, fs)
    pd.testing.assert_frame_equal(propose(fw, s), propose(fs, s))


@pytest.mark.parametrize("s", [DetectSettings(read_block=24, chunk=200),
                               DetectSettings(read_block=7, windows=(3, 10), outer=1)],
                         ids=["blocks-24-chunk-200", "blocks-7-trend-windows"])
def test_three_parts_with_other_blocks_and_windows(s):
    """Blocks that do not divide the chunks, and the trend-free statistic: still the same."""
    movie = ArrayMovie(_movie(9000, 4160, seed=1, blank_at=4100))
    fw, _ = compute_features(movie, s)
    fs, meta = scan_in_parts(movie, s, 3, min_part=MIN_JOIN)
    assert meta["parts"] == 3
    _same(fw, fs)
    pd.testing.assert_frame_equal(propose(fw, s), propose(fs, s))


def test_short_movie_is_one_part():
    movie = ArrayMovie(np.zeros((3000, SIDE, SIDE), np.uint16))
    assert len(plan_parts(movie, DetectSettings(), 4)) == 1


@pytest.mark.parametrize("where", ["-3", "+3", "+200"])
def test_the_edge_statistic_split_at_its_template_boundaries(where):
    """With --dim-fronts a part's buffer starts where the whole scan's does, and it reads the two
    epochs before for their templates: the same features and candidates, a blanked frame and an
    event near the second join included."""
    s = DetectSettings(fronts=True)
    parts = plan_parts(ArrayMovie(np.zeros((9000, SIDE, SIDE), np.uint16)), s, 3, MIN_JOIN)
    assert len(parts) == 3 and all(p.first_read < p.read_from for p in parts[1:])
    at = parts[2].start + int(where)
    movie = ArrayMovie(_movie(9000, at, seed=4, blank_at=parts[1].start + 40))
    fw, _ = compute_features(movie, s)
    fs, meta = scan_in_parts(movie, s, 3, min_part=MIN_JOIN)
    assert meta["parts"] == 3
    _same(fw, fs)
    for name in ("score", "pulse", "zw", "blank"):
        assert np.array_equal(fw[name], fs[name]), name
    cw = propose(fw, s)
    assert ((cw["kind"] == "step") & ((cw["frame"] - at).abs() <= 1)).any(), cw
    pd.testing.assert_frame_equal(cw, propose(fs, s))


def test_scan_workers_matches_the_whole_scan(tmp_path):
    pytest.importorskip("distributed")
    path = tmp_path / "long.npy"
    np.save(path, _movie(9000, 4150, seed=3))
    whole, split = tmp_path / "whole.csv", tmp_path / "split.csv"
    r = reviewer("scan", path, "-o", whole, "--force")
    assert r.returncode == 0, r.stderr
    r = reviewer("scan", path, "-o", split, "--force", "--workers", "2")
    assert r.returncode == 0, r.stderr
    assert "in 2 part(s)" in r.stdout
    got = pd.read_csv(split)
    assert ((got["kind"] == "step") & ((got["frame"] - 4150).abs() <= 1)).any()  # 2 before the join
    pd.testing.assert_frame_equal(pd.read_csv(whole), got)
    again = reviewer("scan", path, "-o", split, "--workers", "2")  # the cached scan is reused
    assert again.returncode == 0 and "reused the cached scan" in again.stdout


def test_batch_splits_a_long_movie_over_idle_workers(tmp_path, monkeypatch):
    pytest.importorskip("distributed")
    from distributed import Client, LocalCluster

    from reviewer.batch import engine, job

    monkeypatch.setattr(job, "SPLIT_MIN_PART", 4096)  # a test-sized "long" movie
    path = tmp_path / "long.npy"
    np.save(path, _movie(9000, 4150, seed=4))
    settings = DetectSettings().to_dict()
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        rows = [None]
        engine.run(client, [(str(path), settings, True, None, 2)], job.scan_path,
                   lambda i, r: None, rows)
    assert rows[0]["status"] == "done", rows[0]["error"]
    assert "scanned in 2 parts" in rows[0]["notices"]
    from reviewer.detect import load_scan
    from reviewer.movie import open_movie
    from reviewer.paths import cache_dir

    with open_movie(path, show_progress=False) as movie:
        assert load_scan(cache_dir(movie.fingerprint) / "scan").meta["parts"] == 2
    single = tmp_path / "single.csv"
    r = reviewer("scan", path, "-o", single, "--force")
    assert r.returncode == 0, r.stderr
    pd.testing.assert_frame_equal(pd.read_csv(rows[0]["candidates_csv"]), pd.read_csv(single))


def test_bad_split_arguments_are_one_line(tmp_path):
    path = tmp_path / "m.npy"
    np.save(path, _movie(300, None, seed=2))
    for args in (["--workers", "0"], ["--scheduler", "tcp://127.0.0.1:1"],
                 ["--workers", "2", "--scheduler", "tcp://127.0.0.1:1"]):
        r = reviewer("scan", path, *args, timeout=120)
        assert r.returncode == 2, (args, r.stderr)
        assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr


@pytest.mark.heavy
def test_scan_on_scheduler_and_worker_processes(tmp_path):
    """`reviewer scan --scheduler` against `dask scheduler` and two `dask worker` processes (heavy:
    the same split as --workers, on the engine test_batch.py already runs as processes)."""
    path = tmp_path / "long.npy"
    np.save(path, _movie(9000, 4154, seed=6))
    with dask_processes(tmp_path) as address:
        whole, split = tmp_path / "whole.csv", tmp_path / "split.csv"
        r = reviewer("scan", path, "-o", whole, "--force")
        assert r.returncode == 0, r.stderr
        r = reviewer("scan", path, "-o", split, "--force", "--scheduler", address)
        assert r.returncode == 0, r.stderr
        assert "in 2 part(s)" in r.stdout
        got = pd.read_csv(split)
        assert ((got["kind"] == "step") & ((got["frame"] - 4154).abs() <= 1)).any()
        pd.testing.assert_frame_equal(pd.read_csv(whole), got)
