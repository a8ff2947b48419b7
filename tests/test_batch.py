"""`reviewer batch` on the real engine: an in-process Dask LocalCluster, and a scheduler and two
workers started as separate processes (`dask scheduler`, `dask worker`) as a user would."""

from __future__ import annotations

import dataclasses
import json
import os
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

pytest.importorskip("distributed")

from dask_processes import dask_processes, reviewer  # noqa: E402

from reviewer.batch.discover import find_movies  # noqa: E402
from reviewer.batch.job import scan_path  # noqa: E402
from reviewer.detect import DetectSettings  # noqa: E402
from sample_movies.growth import PRESETS, generate  # noqa: E402


@pytest.fixture
def archive(tmp_path):
    """Four small generated movies, a broken TIFF, and things that are not movies."""
    folder = tmp_path / "campaign"
    (folder / "day2").mkdir(parents=True)
    for i in range(4):
        sc = dataclasses.replace(PRESETS["low_dose"], n_frames=700, height=64, width=64)
        movie, _ = generate(sc, seed=10 + i)
        target = folder / ("day2" if i == 3 else "") / f"run{i}.npy"
        np.save(target, movie.data)
    (folder / "broken.tif").write_bytes(b"II*\0" + b"\0" * 60)
    (folder / "notes.txt.bak").write_text("not a movie")
    (folder / "run0.candidates.csv").write_text("event_id\n")  # ours, never a movie
    return folder


def test_discovery(archive, tmp_path):
    flat = {p.name for p in find_movies([archive])}
    assert flat == {"run0.npy", "run1.npy", "run2.npy", "broken.tif"}
    deep = {p.name for p in find_movies([archive], recursive=True)}
    assert deep == flat | {"run3.npy"}
    frames = tmp_path / "frames"
    frames.mkdir()
    from PIL import Image

    for i in range(3):
        Image.fromarray(np.full((8, 8), i, np.uint8)).save(frames / f"f{i}.png")
    listing = tmp_path / "movies.txt"
    listing.write_text(f"# two movies\n{archive / 'run1.npy'}\nframes\n")
    assert find_movies([listing]) == [archive / "run1.npy", tmp_path / "frames"]


def test_local_cluster_matches_single_process_scan(archive, tmp_path):
    from distributed import Client, LocalCluster

    from reviewer.batch import engine

    movies = find_movies([archive], recursive=True)
    settings = DetectSettings().to_dict()
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        rows = [None] * len(movies)
        engine.run(client, [(str(m), settings, False, None) for m in movies], scan_path,
                   lambda i, r: None, rows)
    by_name = {Path(r["movie"]).name: r for r in rows}
    assert by_name["broken.tif"]["status"] == "failed"
    assert "broken.tif" in by_name["broken.tif"]["error"]
    for name in ("run0.npy", "run1.npy", "run2.npy", "run3.npy"):
        row = by_name[name]
        assert row["status"] == "done" and row["frames"] == 700
        batch = pd.read_csv(row["candidates_csv"])
        single = tmp_path / f"{name}.single.csv"
        r = reviewer("scan", next(m for m in movies if m.name == name), "-o", single, "--force")
        assert r.returncode == 0, r.stderr
        pd.testing.assert_frame_equal(batch, pd.read_csv(single))


def test_scheduler_and_worker_processes(archive, tmp_path):
    env = dict(os.environ)
    with dask_processes(tmp_path) as address:
        summary = tmp_path / "summary.csv"
        r = reviewer("batch", archive, "--recursive", "--scheduler", address, "-o", summary,
                     env=env)
        assert r.returncode == 1, r.stderr  # one movie failed
        table = pd.read_csv(summary)
        assert sorted(table["status"]) == ["done"] * 4 + ["failed"]
        failed = table[table["status"] == "failed"].iloc[0]
        assert failed["movie"].endswith("broken.tif") and isinstance(failed["error"], str)
        assert table["worker"].nunique() >= 1
        for row in table[table["status"] == "done"].itertuples():
            single = tmp_path / (Path(row.movie).name + ".single.csv")
            s = reviewer("scan", row.movie, "-o", single, "--force", env=env)
            assert s.returncode == 0, s.stderr
            pd.testing.assert_frame_equal(pd.read_csv(row.candidates_csv), pd.read_csv(single))
        again = reviewer("batch", archive, "--recursive", "--scheduler", address, "-o", summary,
                         env=env)
        assert again.returncode == 1
        assert sorted(pd.read_csv(summary)["status"]) == ["failed"] + ["skipped"] * 4
        forced = reviewer("batch", archive, "--recursive", "--scheduler", address, "-o", summary,
                          "--force", "--json", env=env)
        rows = json.loads(summary.read_text())
        assert forced.returncode == 1 and sorted(r["status"] for r in rows) == ["done"] * 4 + [
            "failed"]


def test_bad_arguments_are_one_line(archive, tmp_path):
    for args in (["batch", tmp_path / "empty-nothing"], ["batch", archive, "--workers", "0"],
                 ["batch", archive, "-o", archive / "run0.npy"],
                 ["batch", archive, "--scheduler", "tcp://127.0.0.1:1"]):
        if args[1] == tmp_path / "empty-nothing":
            (tmp_path / "empty-nothing").mkdir()
        r = reviewer(*args, timeout=120)
        assert r.returncode == 2, (args, r.stderr)
        assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr


def test_workers_command_line(archive, tmp_path):
    """`reviewer batch --workers 2` as a user runs it: a local cluster of two worker processes."""
    summary = tmp_path / "local.csv"
    r = reviewer("batch", archive, "--recursive", "--workers", "2", "-o", summary)
    assert r.returncode == 1, r.stderr  # one movie failed
    assert "5 movies: 4 scanned, 0 already scanned (skipped), 1 failed" in r.stdout
    table = pd.read_csv(summary)
    assert sorted(table["status"]) == ["done"] * 4 + ["failed"]
    failed = table[table["status"] == "failed"].iloc[0]
    assert failed["movie"].endswith("broken.tif") and "broken.tif" in failed["error"]
    for row in table[table["status"] == "done"].itertuples():
        single = tmp_path / (Path(row.movie).name + ".single.csv")
        s = reviewer("scan", row.movie, "-o", single, "--force")
        assert s.returncode == 0, s.stderr
        pd.testing.assert_frame_equal(pd.read_csv(row.candidates_csv), pd.read_csv(single))
    again = reviewer("batch", archive, "--recursive", "--workers", "2", "-o", summary)
    assert again.returncode == 1 and "0 scanned, 4 already scanned (skipped), 1 failed" in \
        again.stdout
    assert sorted(pd.read_csv(summary)["status"]) == ["failed"] + ["skipped"] * 4
    forced = reviewer("batch", archive, "--recursive", "--workers", "2", "-o", summary, "--force")
    assert forced.returncode == 1 and "4 scanned, 0 already scanned" in forced.stdout
