"""Pilot tests of the review app's key flows, on a tiny invented movie with hand-placed candidates.

Expected results are written out by hand from the key presses (which event, which status, which frame),
never computed by the app's own code.
"""

from __future__ import annotations

import asyncio
import csv
import functools
import os

import numpy as np
import pandas as pd
import pytest

from reviewer.movie.base import ArrayMovie, Timing
from reviewer.store.session import Session
from reviewer.tui.app import ReviewApp
from reviewer.tui.keymap import load_keymap
from reviewer.tui.labels import load_labels
from reviewer.tui.screens import PAIRS, ConfirmScreen, HelpScreen, TooSmallScreen, pair_keys

N_FRAMES = 300
FPS = 100.0
FRAMES = [20, 50, 80, 120, 160]  # candidate frames, seeded in this order -> ids d000000..d000004
KINDS = ["step", "step", "transient", "global", "step"]
SIZE = (120, 40)


def sync(fn):
    """Run an async test body with asyncio (no async plugin in the test extra)."""
    @functools.wraps(fn)
    def run(*args, **kwargs):
        return asyncio.run(fn(*args, **kwargs))
    return run


def _movie(tmp_path) -> ArrayMovie:
    rng = np.random.default_rng(7)
    data = rng.integers(900, 1100, size=(N_FRAMES, 24, 32), dtype=np.uint16)
    return ArrayMovie(data, tmp_path / "movie.npy", timing=Timing(fps=FPS, source="test"),
                      fingerprint="pilot-test")


def _candidates() -> pd.DataFrame:
    return pd.DataFrame({"frame": FRAMES, "frame_end": [pd.NA, pd.NA, 84, pd.NA, pd.NA],
                         "time_s": [f / FPS for f in FRAMES], "kind": KINDS,
                         "score": [9.0, 8.0, 7.0, 20.0, 6.0], "x": [5.0, 10.0, 15.0, np.nan, 20.0],
                         "y": [4.0, 8.0, 12.0, np.nan, 16.0]})


def _session(tmp_path, movie) -> Session:
    s = Session.open(movie.path, movie.fingerprint, override=tmp_path / "session",
                     meta={"frames": movie.n_frames, "fps": FPS})
    s.seed(_candidates())
    return s


def _app(tmp_path, keymap=None, advance=False) -> ReviewApp:
    movie = _movie(tmp_path)
    return ReviewApp(movie, _session(tmp_path, movie), keymap=load_keymap(keymap),
                     labels=load_labels(), advance=advance, run_scan=False)


def _status(app) -> dict[str, str]:
    return {e.event_id: e.status for e in app.session.events}


async def _press(pilot, keys: str) -> None:
    await pilot.press(*keys.split())


@sync
async def test_accept_reject_and_label_apply_to_the_event_jumped_to(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n a n r n 2")
        assert _status(app) == {"d000000": "accepted", "d000001": "rejected",
                                "d000002": "accepted", "d000003": "candidate",
                                "d000004": "candidate"}
        assert app.session.get("d000002").label == "nucleation"  # label 2 of data/labels.toml
        assert app.frame == 80  # a decision does not move the cursor
        assert "d000002" in app.status.plain and "accepted" in app.status.plain
        await app.action_quit()


@sync
async def test_next_previous_and_pending_navigation(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n n a p")  # accept the event at 50, back to 20
        assert app.frame == 20
        await _press(pilot, "N")  # pending after 20 skips the accepted one at 50
        assert (app.frame, app.current_id) == (80, "d000002")
        await _press(pilot, "P P")  # pending before 80: 20; before 20: none (stays)
        assert app.frame == 20
        await _press(pilot, "right shift+right pagedown")  # +1, +10, +1 % of 300 = 3
        assert app.frame == 34
        await app.action_quit()


@sync
async def test_advance_after_decision(tmp_path):
    app = _app(tmp_path, advance=True)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n a")
        assert app.session.get("d000000").status == "accepted"
        assert (app.frame, app.current_id) == (50, "d000001")
        await app.action_quit()


@sync
async def test_mark_nudge_undo_redo(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "shift+right right m")  # a manual event at frame 11
        manual = [e for e in app.session.events if e.source == "manual"]
        assert [(e.frame, e.status, e.kind) for e in manual] == [(11, "accepted", "manual")]
        assert app.current_id == manual[0].event_id
        await _press(pilot, "n full_stop full_stop comma")  # candidate at 20 -> 21
        assert app.session.get("d000000").frame == 21 and app.frame == 21
        await _press(pilot, "a u")
        assert app.session.get("d000000").status == "candidate"
        await _press(pilot, "u u u")  # undo the three nudges
        assert app.session.get("d000000").frame == 20
        await _press(pilot, "U ctrl+r U U")  # redo key and its second key: nudges, then accept
        ev = app.session.get("d000000")
        assert (ev.frame, ev.status) == (21, "accepted")
        await app.action_quit()


@sync
async def test_reject_global_asks_first(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "G")
        assert isinstance(app.screen, ConfirmScreen)
        await _press(pilot, "a escape")  # keys of the review do nothing in a dialog
        assert _status(app)["d000003"] == "candidate"
        assert _status(app)["d000000"] == "candidate"
        await _press(pilot, "G y")
        assert _status(app) == {"d000000": "candidate", "d000001": "candidate",
                                "d000002": "candidate", "d000003": "rejected",
                                "d000004": "candidate"}
        await app.action_quit()


@sync
async def test_export_writes_the_event_table(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n 1 n r e")
        path = app.export_path()
        await app.action_quit()
    with open(path, newline="", encoding="utf-8") as f:
        rows = {r["event_id"]: r for r in csv.DictReader(f)}
    assert len(rows) == 5
    assert (rows["d000000"]["status"], rows["d000000"]["label"]) == ("accepted", "layer")
    assert rows["d000001"]["status"] == "rejected"
    assert float(rows["d000001"]["time_s"]) == pytest.approx(0.5)  # frame 50 at 100 frames/s
    assert path.with_suffix(".json").is_file()


@sync
async def test_quit_and_reopen_restores_decisions_and_position(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n n a right right q")
    assert app.return_code == 0
    movie = _movie(tmp_path)
    again = ReviewApp(movie, _session(tmp_path, movie), keymap=load_keymap(),
                      labels=load_labels(), run_scan=False)
    async with again.run_test(size=SIZE) as pilot:
        assert again.frame == 52
        assert again.session.get("d000001").status == "accepted"
        assert again.current_id == "d000001"  # the event nearest the restored position
        await _press(pilot, "r")
        assert again.session.get("d000001").status == "rejected"
        await again.action_quit()


@sync
async def test_go_to_frame_and_time(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "g 1 2 3 enter")
        assert app.frame == 123
        await _press(pilot, "g 0 full_stop 5 s enter")  # 0.5 s at 100 frames/s
        assert (app.frame, app.current_id) == (50, "d000001")
        await app.action_quit()


@sync
async def test_one_handed_keymap_and_user_override(tmp_path, monkeypatch):
    config = tmp_path / "config"
    config.mkdir()
    monkeypatch.setenv("REVIEWER_CONFIG_DIR", str(config))
    (config / "keymap.toml").write_text('[decide]\naccept = ["y"]\n')
    app = _app(tmp_path, keymap="one-handed")
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "f f y n")  # f = next (one-handed); y = accept (user); n = nothing
        assert app.frame == 50
        assert _status(app)["d000001"] == "accepted"
        assert sum(s == "accepted" for s in _status(app).values()) == 1
        await app.action_quit()


@sync
async def test_help_screen_lists_every_binding(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "question_mark")
        assert isinstance(app.screen, HelpScreen)
        text = app.screen.text.plain
        by_id = app.keymap.by_id()
        second = {other: first for first, (other, _) in PAIRS.items()}
        for spec in app.keymap.specs:
            shown = (pair_keys(spec.display, by_id[PAIRS[spec.id][0]].display) if spec.id in PAIRS
                     else pair_keys(by_id[second[spec.id]].display, spec.display)
                     if spec.id in second else spec.display)  # a pair shares one row
            line = next((ln for ln in text.splitlines() if ln.strip().startswith(shown)
                         or (spec.id.startswith("label_") and ln.strip().startswith("1…9"))),
                        None)
            assert line is not None, spec.id
        assert "3 coalescence" in text  # label 3 of data/labels.toml
        await _press(pilot, "escape")
        assert not isinstance(app.screen, HelpScreen)
        await app.action_quit()


@sync
async def test_terminal_too_small_shows_a_message_until_resized(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=(70, 20)) as pilot:
        await pilot.pause()
        assert isinstance(app.screen, TooSmallScreen)
        await _press(pilot, "n a")
        assert _status(app)["d000000"] == "candidate"
        await pilot.resize_terminal(100, 30)
        await pilot.pause()
        assert not isinstance(app.screen, TooSmallScreen)
        await app.action_quit()


@sync
async def test_kinetics_panel_and_playback(tmp_path):
    from reviewer.tui.kinetics_panel import KineticsScreen

    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n a n a n a k")  # accept the events at frames 20, 50, 80
        assert isinstance(app.screen, KineticsScreen)
        await app.screen.workers.wait_for_complete()
        await pilot.pause()
        text = str(app.screen.query_one("#kinetics-text").render())
        # 3 events at 0.2, 0.5, 0.8 s: 2 intervals over a 0.6 s span -> rate 2 / 0.6 = 3.333 /s
        assert "3 accepted events over 0.6 s" in text and "3.333 /s" in text
        await _press(pilot, "escape space")
        await pilot.pause(0.4)  # about 12 frames/s: a few frames go by
        await _press(pilot, "space")
        assert app.frame > 80 and not app.playing
        await app.action_quit()


@sync
async def test_second_session_on_the_same_movie_is_read_only_with_a_banner(tmp_path):
    first = _app(tmp_path)  # holds the session lock while it is open
    movie = _movie(tmp_path)
    second = ReviewApp(movie, _session(tmp_path, movie), keymap=load_keymap(),
                       labels=load_labels(), run_scan=False)
    assert second.session.readonly
    async with second.run_test(size=SIZE) as pilot:
        await pilot.pause()
        banner = str(second.query_one("#banner").render())
        assert "READ-ONLY" in banner and f"pid {os.getpid()}" in banner
        await _press(pilot, "n a")
        assert _status(second)["d000000"] == "candidate"  # not applied
        assert second.alert_text.startswith("read-only: accept not applied")
        assert str(os.getpid()) in second.alert_text
        await second.action_quit()
    first.session.accept("d000000")  # the writer was never disturbed
    first.session.close()
    again = Session.open(movie.path, movie.fingerprint, override=tmp_path / "session")
    assert not again.readonly and again.get("d000000").status == "accepted"
    again.close()
