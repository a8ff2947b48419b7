"""The app on a movie with no scan yet: the background scan runs, then seeds the session; and the
`review` command's bad-input paths (exit 2, one line)."""

from __future__ import annotations

import asyncio

from reviewer.cli import main
from reviewer.tui.app import make_app


def _movie(tmp_path):
    from sample_movies.growth import PRESETS, scaled, write_movie

    path = tmp_path / "small.tif"
    write_movie(path, scaled(PRESETS["sample"], 400, 48, 64), seed=5, fps=400.0)
    return path


def test_scan_runs_in_the_background_and_seeds_the_session(tmp_path):
    from reviewer.detect import load_scan
    from reviewer.paths import cache_dir

    path = _movie(tmp_path)

    async def body():
        app = make_app(path, session_dir=tmp_path / "session")
        assert app.scan is None and not app.session.events
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.press("right")  # frames can be browsed while the scan runs
            await app.workers.wait_for_complete()
            await pilot.pause()
            assert app.frame == 1 and not app.scanning
            stored = load_scan(cache_dir(app.movie.fingerprint) / "scan")
            assert stored is not None
            # the session holds exactly the stored candidates, frame for frame
            assert [e.frame for e in app.session.events] == list(stored.candidates["frame"])
            assert app.scores is not None and len(app.scores) == 400
            await app.action_quit()

    asyncio.run(body())


def test_review_bad_keymap_and_missing_movie_exit_2(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[x]\naccept = \"escape\"\n")
    movie = tmp_path / "none.tif"
    assert main(["review", str(movie), "--keymap", str(bad)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.count("\n") == 0 and str(bad) in err and "reserved" in err
    assert main(["review", str(movie)]) == 2  # not a terminal under pytest: one clear line
    assert len(capsys.readouterr().err.strip().splitlines()) == 1
