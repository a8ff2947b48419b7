"""End to end in a real terminal: `reviewer review` in a 200x60 tmux pane on a scanned 8,000-frame movie,
keys typed with send-keys (waiting for each repaint), then `reviewer export` read back as CSV; a second
session's decision survives SIGKILL. Skipped when tmux is not installed."""

from __future__ import annotations

import csv
import os
import shlex
import shutil
import signal
import subprocess
import sys
import time
import uuid

import pytest

pytestmark = pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed")

KEYS = ["n", "a", "n", "r", "n", "2", "n", "a", "q"]
REVIEWER = [sys.executable, "-m", "reviewer"]


def _tmux(sock: str, *args: str) -> str:
    out = subprocess.run(["tmux", "-L", sock, "-f", "/dev/null", *args], capture_output=True,
                         text=True, timeout=10)
    return out.stdout


def _status(sock: str, target: str) -> str:
    """The status line of the app (the line with 'frame N/M'), or '' before the first paint."""
    lines = _tmux(sock, "capture-pane", "-p", "-t", target).splitlines()
    return next((ln for ln in lines if ln.startswith(" frame ") and "│" in ln), "")


def _wait(pred, what: str, timeout: float = 20.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        value = pred()
        if value:
            return value
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


def _open(sock: str, name: str, movie, env: dict, *options: str, size=(200, 60)) -> str:
    # tmux started without a terminal puts COLUMNS/LINES in the pane's environment, and Textual
    # would then keep that size for good: unset them so the app follows resizes
    cmd = " ".join(["exec", "env", "-u", "COLUMNS", "-u", "LINES",
                    *(f"{k}={shlex.quote(v)}" for k, v in env.items()),
                    *map(shlex.quote, REVIEWER), "review", shlex.quote(str(movie)), *options])
    verb = ["new-session", "-d", "-s", name, "-x", str(size[0]), "-y", str(size[1])]
    _tmux(sock, *verb, cmd)
    _wait(lambda: "pending" in _status(sock, name), "the first paint")
    return name


def _type(sock: str, target: str, key: str) -> None:
    before = _status(sock, target)
    _tmux(sock, "send-keys", "-t", target, key)
    _wait(lambda: _status(sock, target) != before, f"a repaint after {key!r}", timeout=10)


def _export(movie, env: dict, out) -> list[dict]:
    subprocess.run([*REVIEWER, "export", str(movie), "-o", str(out)], check=True, env=env,
                   capture_output=True, timeout=60)
    with open(out, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


def _check_against_truth(rows: list[dict], reviewed: list[int], movie) -> None:
    """What the user was shown is what happened: the detector's candidates in the export, matched
    one-to-one within ±2 frames to the generator's truth (written beside the movie)."""
    from truth_matching import match_events

    with open(movie.with_name(movie.name + ".truth.csv"), newline="", encoding="utf-8") as f:
        truth = [int(r["frame"]) for r in csv.DictReader(f)]
    found = [int(r["frame"]) for r in rows if r["source"] == "detector"]
    pairs = match_events(truth, found)
    # measured when written: 84 true events, 78 candidates, all 78 matched (recall 0.93)
    assert len(pairs) >= 0.85 * len(truth), (len(pairs), len(truth))
    assert len(pairs) >= 0.95 * len(found), (len(pairs), len(found))
    # every candidate the keys went through was a real event
    assert len(match_events(truth, reviewed)) == len(reviewed), reviewed


def _scanned(tmp_path, name: str, frames: int, seed: int):
    """A scaled-down demo sample written to tmp_path/name and scanned: (movie, env for the app,
    the whole environment for the commands)."""
    from sample_movies.growth import PRESETS, scaled, write_movie

    env = {k: os.environ[k] for k in ("REVIEWER_CACHE_DIR", "REVIEWER_DATA_DIR",
                                      "REVIEWER_CONFIG_DIR")}
    full_env = {**os.environ, **env}
    movie = tmp_path / name
    write_movie(movie, scaled(PRESETS["sample"], frames, 48, 64), seed=seed, fps=400.0)
    subprocess.run([*REVIEWER, "scan", str(movie)], check=True, env=full_env,
                   capture_output=True, timeout=120)
    return movie, env, full_env


def test_review_in_tmux_then_export(tmp_path):
    movie, env, full_env = _scanned(tmp_path, "platelets.tif", 8000, 3)

    sock = f"reviewer-e2e-{uuid.uuid4().hex[:8]}"
    try:
        first = _open(sock, "one", movie, env)
        for key in KEYS[:-1]:
            _type(sock, first, key)
        _tmux(sock, "send-keys", "-t", first, "q")
        _wait(lambda: first not in _tmux(sock, "list-sessions", "-F", "#{session_name}"),
              "the app to quit", timeout=15)

        rows = _export(movie, full_env, tmp_path / "one.csv")
        accepted = [r for r in rows if r["status"] == "accepted"]
        rejected = [r for r in rows if r["status"] == "rejected"]
        assert len(accepted) == 3 and len(rejected) == 1
        assert [r["label"] for r in accepted if r["label"]] == ["nucleation"]  # label 2 of labels.toml
        reviewed = sorted(int(r["frame"]) for r in accepted + rejected)
        _check_against_truth(rows, reviewed, movie)

        second = _open(sock, "two", movie, env)
        _type(sock, second, "N")
        _type(sock, second, "a")
        pid = int(_tmux(sock, "list-panes", "-t", second, "-F", "#{pane_pid}").split()[0])
        os.kill(pid, signal.SIGKILL)

        rows = _export(movie, full_env, tmp_path / "two.csv")
        accepted = [r for r in rows if r["status"] == "accepted"]
        assert len(accepted) == 4
        assert sum(r["status"] == "rejected" for r in rows) == 1
        assert max(int(r["frame"]) for r in accepted) > max(reviewed)  # the new one is further on

        # SIGTERM (as a system shutdown sends; SIGHUP comes from a dropped SSH link, same path):
        # the app saves, releases its lock and exits by itself.
        third = _open(sock, "three", movie, env, "--reclaim-lock")  # the killed one left its lock
        _type(sock, third, "N")
        _type(sock, third, "r")
        pid = int(_tmux(sock, "list-panes", "-t", third, "-F", "#{pane_pid}").split()[0])
        os.kill(pid, signal.SIGTERM)
        _wait(lambda: third not in _tmux(sock, "list-sessions", "-F", "#{session_name}"),
              "the app to exit on SIGTERM", timeout=15)
        folder = tmp_path / "platelets.tif.review"  # the session folder beside the movie
        assert (folder / "journal.jsonl").exists()
        assert not (folder / "lock").exists(), "the lock was not released on SIGTERM"
        rows = _export(movie, full_env, tmp_path / "three.csv")
        assert sum(r["status"] == "rejected" for r in rows) == 2
    finally:
        subprocess.run(["tmux", "-L", sock, "kill-server"], capture_output=True, timeout=10)


def _screen(sock: str, target: str) -> str:
    return _tmux(sock, "capture-pane", "-p", "-t", target)


def _far_frame(frames: list[int], n_frames: int, gap: int = 50) -> int:
    """A frame at least `gap` frames from every event."""
    for f in range(gap, n_frames - gap):
        if all(abs(f - e) >= gap for e in frames):
            return f
    raise AssertionError("no frame far from every event")


def test_decision_keys_away_from_events_change_nothing_in_tmux(tmp_path):
    """On the demo's sample (scaled down): go to a frame >= 50 frames from any event, press a, r, 2,
    q; the export shows every status unchanged and the screen said why each time."""
    movie, env, full_env = _scanned(tmp_path, "sample.tif", 2000, 5)
    before = _export(movie, full_env, tmp_path / "before.csv")
    assert before and all(r["status"] == "candidate" for r in before)
    spans = [int(r["frame"]) for r in before] + [int(r["frame_end"]) for r in before
                                                  if r["frame_end"]]
    far = _far_frame(spans, 2000)

    sock = f"reviewer-e2e-{uuid.uuid4().hex[:8]}"
    try:
        win = _open(sock, "far", movie, env, size=(80, 24))
        lines = _screen(sock, win).splitlines()
        keybar = lines[-1]
        assert "?  help" in keybar and "q  quit" in keybar, keybar
        assert lines[0].index("\u2595" if "\u2595" in lines[0] else "\u258f") >= 40, lines[0]
        assert _status(sock, win).startswith(" frame "), lines
        _tmux(sock, "send-keys", "-t", win, "g")
        _wait(lambda: "Go to a frame" in _screen(sock, win), "the go-to prompt")
        _tmux(sock, "send-keys", "-t", win, str(far), "Enter")
        _wait(lambda: f" frame {far}/" in _status(sock, win), f"frame {far}")
        said = []
        for key, what in (("a", "accept"), ("r", "reject"), ("2", "label 2")):
            _tmux(sock, "send-keys", "-t", win, key)
            want = f"no event at frame {far} — {what}:"
            line = _wait(lambda w=want: next((ln for ln in _screen(sock, win).splitlines()
                                              if w in ln), ""),
                         f"the reason after {key!r}")
            said.append(line.strip())
        _tmux(sock, "resize-window", "-t", win, "-x", "70", "-y", "20")
        _wait(lambda: "the review needs at least 80×24" in _screen(sock, win),
              "the message: " + _screen(sock, win))
        _tmux(sock, "resize-window", "-t", win, "-x", "80", "-y", "24")
        _wait(lambda: f" frame {far}/" in _status(sock, win), "the screen back")
        assert "needs at least" not in _screen(sock, win)
        _tmux(sock, "send-keys", "-t", win, "q")
        _wait(lambda: win not in _tmux(sock, "list-sessions", "-F", "#{session_name}"),
              "the app to quit", timeout=15)
    finally:
        subprocess.run(["tmux", "-L", sock, "kill-server"], capture_output=True, timeout=10)
    assert all("nothing changed" in s and "m marks one" in s for s in said), said
    after = _export(movie, full_env, tmp_path / "after.csv")
    assert [(r["event_id"], r["status"], r["label"]) for r in after] == \
        [(r["event_id"], r["status"], r["label"]) for r in before]


def test_a_note_typed_in_tmux_is_in_the_export_and_quit_says_where(tmp_path):
    """At 80x24: jump to the first event, w, type a note, enter, e, q. The note is in the CSV that
    `e` wrote and in a later `reviewer export`; after the screen closes the terminal shows where the
    session and that export are; Ctrl-C in a second session quits the same way (no hint)."""
    movie, env, full_env = _scanned(tmp_path, "noted.tif", 1000, 9)
    sock = f"reviewer-e2e-{uuid.uuid4().hex[:8]}"

    def quit_and_read(win: str, key: str) -> str:
        _tmux(sock, "send-keys", "-t", win, key)
        _wait(lambda: _tmux(sock, "display", "-p", "-t", win, "#{pane_dead}").strip() == "1",
              "the app to quit", timeout=15)
        # -J joins the lines the terminal wrapped, so a long path reads as one
        return _tmux(sock, "capture-pane", "-p", "-J", "-S", "-", "-t", win)

    try:
        win = _open(sock, "note", movie, env, size=(80, 24))
        _tmux(sock, "set-option", "-w", "-t", win, "remain-on-exit", "on")
        _type(sock, win, "n")
        eid = _status(sock, win).split("│")[2].split()[0]  # the event in view, e.g. d000000
        _tmux(sock, "send-keys", "-t", win, "w")
        _wait(lambda: f"Note on {eid}" in _screen(sock, win), "the note editor")
        _tmux(sock, "send-keys", "-t", win, "-l", "thin edge, left")
        _tmux(sock, "send-keys", "-t", win, "Enter")
        _wait(lambda: f"note on {eid}: thin edge, left" in _screen(sock, win), "the note said")
        _tmux(sock, "send-keys", "-t", win, "e")
        _wait(lambda: "exported " in _screen(sock, win), "the export said")
        said = quit_and_read(win, "q")
        folder = tmp_path / "noted.tif.review"
        written = tmp_path / "noted.events.csv"
        assert f"reviewer: decisions saved in {folder}; last export: {written}" in said, said

        again = _open(sock, "again", movie, env, size=(80, 24))
        _tmux(sock, "set-option", "-w", "-t", again, "remain-on-exit", "on")
        said = quit_and_read(again, "C-c")
        assert f"reviewer: decisions saved in {folder}" in said and "Press" not in said, said
    finally:
        subprocess.run(["tmux", "-L", sock, "kill-server"], capture_output=True, timeout=10)
    with open(written, newline="", encoding="utf-8") as f:
        rows = {r["event_id"]: r for r in csv.DictReader(f)}
    assert rows[eid]["note"] == "thin edge, left"
    assert sum(bool(r["note"]) for r in rows.values()) == 1
    later = {r["event_id"]: r for r in _export(movie, full_env, tmp_path / "later.csv")}
    assert later[eid]["note"] == "thin edge, left"
