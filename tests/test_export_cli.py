"""`reviewer export MOVIE`: default output place, status filter, --fps, --session, read-only folders."""

from __future__ import annotations

import os
import shutil

import numpy as np
import pandas as pd
import pytest

from reviewer.cli import main
from reviewer.store.session import Session

try:
    from reviewer.movie import open_movie
except ImportError:  # the movie layer's opener is not there yet
    open_movie = None

needs_open_movie = pytest.mark.skipif(open_movie is None, reason="reviewer.movie.open_movie missing")


@pytest.fixture
def reviewed(tmp_path):
    """An invented 300-frame movie (.npy) with a review session: 2 accepted, 1 rejected, 1 pending."""
    path = tmp_path / "platelets.npy"
    np.save(path, np.zeros((300, 4, 5), np.uint16))
    movie = open_movie(path, fps=400.0)
    s = Session.open(movie.path, movie.fingerprint,
                     meta={"frames": movie.n_frames, "fps": 400.0})
    s.seed(pd.DataFrame({"frame": [10, 50, 90], "kind": ["step", "step", "global"]}))
    s.accept("d000000", label="layer")
    s.reject("d000002")
    s.add(200, label="nucleation")
    s.close()
    movie.close()
    return path


@needs_open_movie
def test_default_output_beside_the_movie(reviewed, capsys):
    assert main(["export", str(reviewed), "--fps", "400"]) == 0
    out = reviewed.parent / "platelets.events.csv"
    assert str(out) in capsys.readouterr().out
    df = pd.read_csv(out)  # pandas.read_csv as the reference RFC 4180 reader
    assert sorted(df["status"]) == ["accepted", "accepted", "candidate", "rejected"]
    assert df.loc[df.event_id == "m000001", "time_s"].item() == pytest.approx(0.5)  # 200 / 400
    assert (reviewed.parent / "platelets.events.json").exists()


@needs_open_movie
def test_status_filter_output_and_fps_override(reviewed, tmp_path, capsys):
    out = tmp_path / "only.csv"
    rc = main(["export", str(reviewed), "-o", str(out), "--status", "accepted", "--fps", "100"])
    assert rc == 0
    df = pd.read_csv(out)
    assert sorted(df["event_id"]) == ["d000000", "m000001"]
    assert df.loc[df.event_id == "m000001", "time_s"].item() == pytest.approx(2.0)  # 200 / 100


@needs_open_movie
def test_bad_status_exits_2_with_one_line(reviewed, capsys):
    assert main(["export", str(reviewed), "--status", "accepted,perhaps"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "perhaps" in err[0]


@needs_open_movie
def test_read_only_movie_folder_writes_into_the_session_folder(reviewed, monkeypatch, capsys):
    # Root ignores chmod here, so the folder is made to look read-only through os.access.
    real = os.access
    ro = str(reviewed.parent)
    import reviewer.paths as paths

    def fake(p, mode):
        return False if str(p).startswith(ro) else real(p, mode)


    monkeypatch.setattr(paths.os, "access", fake)
    # a movie folder read-only from the start: no <movie>.review/ there (an existing one that cannot
    # be written opens read-only instead, tests/test_store_safety.py)
    shutil.rmtree(reviewed.parent / "platelets.npy.review")
    s = Session.open(reviewed, open_movie(reviewed).fingerprint)  # session now in the data folder
    assert s.folder != reviewed.parent / "platelets.npy.review"
    s.add(7, label="layer")
    folder = s.folder
    s.close()
    assert main(["export", str(reviewed), "--fps", "400"]) == 0
    out = folder / "platelets.events.csv"
    assert str(out) in capsys.readouterr().out
    assert list(pd.read_csv(out)["event_id"]) == ["m000001"]  # the session in the data folder


@needs_open_movie
def test_explicit_session_folder(reviewed, tmp_path):
    other = tmp_path / "my-session"
    s = Session.open(reviewed, open_movie(reviewed).fingerprint, override=other)
    s.add(5, label="layer")
    s.close()
    out = tmp_path / "o.csv"
    assert main(["export", str(reviewed), "--session", str(other), "-o", str(out)]) == 0
    assert list(pd.read_csv(out)["event_id"]) == ["m000001"]


def test_default_output_falls_back_to_the_session_folder(tmp_path, monkeypatch):
    import reviewer.paths as paths
    from reviewer.paths import output_beside

    movie = tmp_path / "run 7.ome.tif"
    movie.write_bytes(b"x")
    session = tmp_path / "sess"
    assert output_beside(movie, ".events.csv", session) == tmp_path / "run 7.events.csv"
    monkeypatch.setattr(paths.os, "access", lambda p, mode: False)
    assert output_beside(movie, ".events.csv", session) == session / "run 7.events.csv"


@needs_open_movie
def test_scanned_but_never_reviewed_movie_exports_the_candidates(tmp_path, capsys):
    from reviewer.detect import ScanResult, save_scan
    from reviewer.paths import cache_dir

    path = tmp_path / "fresh.npy"
    np.save(path, np.zeros((100, 4, 5), np.uint16))
    movie = open_movie(path, fps=400.0)
    cands = pd.DataFrame({"frame": [12, 40], "frame_end": pd.array([None, 44], dtype="Int64"),
                          "time_s": [0.03, 0.1], "kind": ["step", "transient"],
                          "score": [6.0, 7.5], "x": [1.0, 2.0], "y": [3.0, 1.0]})
    save_scan(ScanResult(features={"score": np.zeros(100, np.float32)}, candidates=cands,
                         settings={"sensitivity": 2.0}), cache_dir(movie.fingerprint) / "scan")
    movie.close()
    out = tmp_path / "fresh.csv"
    assert main(["export", str(path), "--fps", "400", "-o", str(out)]) == 0
    df = pd.read_csv(out)
    assert list(df["event_id"]) == ["d000000", "d000001"]
    assert set(df["status"]) == {"candidate"}
    assert df["frame_end"].iloc[1] == 44
    import json

    assert json.loads(out.with_suffix(".json").read_text())["detector"] == {"sensitivity": 2.0}
    assert not (tmp_path / "fresh.npy.review" / "journal.jsonl").exists()  # export wrote nothing


KILLED_CHILD = """
import os, sys, time
from reviewer.movie import open_movie
from reviewer.store.session import Session
m = open_movie(sys.argv[1], fps=400.0)
s = Session.open(m.path, m.fingerprint)
s.accept("d000001", label="coalescence")
print("done", flush=True)
time.sleep(60)
"""


@needs_open_movie
def test_export_shows_the_decision_of_a_session_killed_with_sigkill(reviewed, tmp_path):
    import subprocess
    import sys

    child = subprocess.Popen([sys.executable, "-c", KILLED_CHILD, str(reviewed)],
                             stdout=subprocess.PIPE, text=True)
    assert child.stdout.readline().strip() == "done"
    child.kill()  # SIGKILL: no compaction, the lock stays behind
    child.wait(timeout=30)
    child.stdout.close()
    assert (reviewed.parent / "platelets.npy.review" / "lock").exists()
    out = tmp_path / "after-kill.csv"
    run = subprocess.run([sys.executable, "-m", "reviewer", "export", str(reviewed), "--fps", "400",
                          "-o", str(out)], capture_output=True, text=True, timeout=60)
    assert run.returncode == 0, run.stderr
    df = pd.read_csv(out).set_index("event_id")
    assert df.loc["d000001", "status"] == "accepted" and df.loc["d000001", "label"] == "coalescence"
    assert (df["status"] == "accepted").sum() == 3 and (df["status"] == "rejected").sum() == 1
