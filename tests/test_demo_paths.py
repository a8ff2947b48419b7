"""The demo's session and exports live in the user data folder, never in the cache (safe to delete)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import tifffile

from reviewer.cli import main
from reviewer.movie import open_movie
from reviewer.paths import cache_root, data_root, in_cache, output_beside, session_dir
from reviewer.store.session import Session
from sample_movies.growth import sample_path


@pytest.fixture
def cached_movie():
    """A small movie where the demo sample lives (inside the cache folder)."""
    path = sample_path()
    path.parent.mkdir(parents=True, exist_ok=True)
    tifffile.imwrite(path, np.random.default_rng(0).integers(0, 200, (40, 12, 16), np.uint8))
    assert in_cache(path) and not in_cache(data_root())
    return path


def _decide(path):
    movie = open_movie(path, fps=400.0)
    with Session.open(movie.path, movie.fingerprint, meta={"frames": 40, "fps": 400.0}) as s:
        s.seed(pd.DataFrame({"frame": [5, 20], "kind": ["step", "global"]}))
        s.accept("d000000")
        folder = s.folder
    movie.close()
    return folder, movie.fingerprint


def test_session_and_export_of_a_cached_movie_go_to_the_data_folder(cached_movie, capsys):
    folder, fp = _decide(cached_movie)
    assert folder == data_root() / "sessions" / fp and not in_cache(folder)
    assert not (cached_movie.parent / (cached_movie.name + ".review")).exists()
    assert main(["export", str(cached_movie), "--fps", "400"]) == 0, capsys.readouterr().err
    out = folder / "nio-platelets-2024.events.csv"
    assert out.is_file() and out.with_suffix(".json").is_file()
    assert not list(cache_root().rglob("*.events.*"))
    assert pd.read_csv(out).set_index("event_id").loc["d000000", "status"] == "accepted"
    # the review UI's `e` writes where `reviewer export` does
    from reviewer.tui.app import make_app

    app = make_app(cached_movie, fps=400.0, run_scan=False)
    try:
        assert app.session.folder == folder and app.export_path() == out
    finally:
        app.close_session()


def test_a_movie_outside_the_cache_keeps_its_session_beside_it(tmp_path):
    movie = tmp_path / "run.tif"
    movie.write_bytes(b"x")
    assert session_dir(movie, "fp") == tmp_path / "run.tif.review"
    assert output_beside(movie, ".events.csv", tmp_path / "s") == tmp_path / "run.events.csv"


def test_an_older_demo_session_in_the_cache_is_moved_out_once(cached_movie):
    movie = open_movie(cached_movie, fps=400.0)
    old = cached_movie.parent / (cached_movie.name + ".review")
    with Session.open(movie.path, movie.fingerprint, override=old) as s:  # as earlier versions did
        s.seed(pd.DataFrame({"frame": [5], "kind": ["step"]}))
        s.reject("d000000")
    with Session.open(movie.path, movie.fingerprint, readonly=True) as s:  # a reader moves nothing
        assert s.folder == old and s.get("d000000").status == "rejected"
    with Session.open(movie.path, movie.fingerprint) as s:
        assert s.folder == data_root() / "sessions" / movie.fingerprint
        assert s.get("d000000").status == "rejected"
    assert not old.exists()
    movie.close()


def test_a_locked_older_session_is_not_moved(cached_movie):
    old = cached_movie.parent / (cached_movie.name + ".review")
    old.mkdir()
    (old / "lock").write_text("{}")
    assert session_dir(cached_movie, "fp") == old and (old / "lock").exists()
