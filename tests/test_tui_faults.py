"""The review app under faults: a full disk or a folder turned read-only while deciding, an unwritable
folder at quit, frames that cannot be decoded. Each ends with one line on screen, the action not
applied, and the app still running; a real process with a file-size limit (RLIMIT_FSIZE, as a full
disk answers: EFBIG) in tmux shows the same and goes on once the limit is lifted."""

from __future__ import annotations

import asyncio
import csv
import errno
import functools
import os
import shlex
import shutil
import subprocess
import sys
import time
import uuid

import numpy as np
import pandas as pd
import pytest

from reviewer.errors import BadInput
from reviewer.movie.base import ArrayMovie, Timing
from reviewer.store import journal as journal_mod
from reviewer.store.session import Session
from reviewer.tui.app import ReviewApp
from reviewer.tui.keymap import load_keymap
from reviewer.tui.labels import load_labels

FPS = 100.0
FRAMES = [20, 50, 80]
SIZE = (120, 40)


def sync(fn):
    @functools.wraps(fn)
    def run(*args, **kwargs):
        return asyncio.run(fn(*args, **kwargs))
    return run


class DamagedMovie(ArrayMovie):
    """An in-memory movie whose frames 100..109 cannot be decoded (as a damaged page would)."""

    def frame(self, i: int) -> np.ndarray:
        if 100 <= i < 110:
            raise BadInput(f"{self.path}: frame {i} cannot be decoded (damaged page)")
        return super().frame(i)


def _app(tmp_path, movie_cls=ArrayMovie) -> ReviewApp:
    rng = np.random.default_rng(5)
    data = rng.integers(900, 1100, size=(300, 24, 32), dtype=np.uint16)
    movie = movie_cls(data, tmp_path / "movie.npy", timing=Timing(fps=FPS, source="test"),
                      fingerprint="fault-test")
    s = Session.open(movie.path, movie.fingerprint, override=tmp_path / "session",
                     meta={"frames": movie.n_frames, "fps": FPS})
    s.seed(pd.DataFrame({"frame": FRAMES, "kind": ["step"] * 3, "score": [9.0, 8.0, 7.0],
                         "x": [5.0, 10.0, 15.0], "y": [4.0, 8.0, 12.0]}))
    return ReviewApp(movie, s, keymap=load_keymap(None), labels=load_labels(), run_scan=False)


def _fail_journal_writes(monkeypatch, code: int) -> None:
    """The journal's own os.write fails as the kernel would; other writes are left alone."""
    real = os.write

    def write(fd, data):
        if fd in {s._journal.fd for s in _open_sessions if s._journal is not None}:
            raise OSError(code, os.strerror(code))
        return real(fd, data)

    monkeypatch.setattr(journal_mod.os, "write", write)


_open_sessions: list[Session] = []


@pytest.mark.parametrize("code", [errno.ENOSPC, errno.EROFS])
@sync
async def test_write_error_is_one_line_not_applied_and_retry_works(tmp_path, monkeypatch, code):
    app = _app(tmp_path)
    _open_sessions[:] = [app.session]
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("n")
        assert app.current_id == "d000000"
        with monkeypatch.context() as m:
            _fail_journal_writes(m, code)
            await pilot.press("a")
            await pilot.pause()
            assert app.session.get("d000000").status == "candidate"  # not applied
            alert = app.alert_text
            assert alert.startswith("accept NOT applied")
            assert ("disk is full" if code == errno.ENOSPC else "read-only") in alert
            assert "\n" not in alert and app.query_one("#alert").display
            assert app.is_running
            await pilot.press("m")  # another action, same answer, still running
            assert app.session.counts()["accepted"] == 0
        await pilot.press("a")  # space freed: the same key now works
        await pilot.pause()
        assert app.session.get("d000000").status == "accepted"
        assert not app.alert_text
        await app.action_quit()
    assert app.quit_note is None
    again = Session.open(tmp_path / "movie.npy", "fault-test", override=tmp_path / "session")
    assert [e.status for e in again.events] == ["accepted", "candidate", "candidate"]
    assert not again.notices
    again.close()


@sync
async def test_quit_with_an_unwritable_folder_explains_what_was_kept(tmp_path, monkeypatch):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await pilot.press("n", "a", "n", "r")
        real_open = open

        def refuse(path, *args, **kwargs):  # the folder turned read-only: new files refused
            if str(path).endswith(".tmp"):
                raise PermissionError(errno.EACCES, "Permission denied", str(path))
            return real_open(path, *args, **kwargs)

        monkeypatch.setattr(journal_mod, "open", refuse, raising=False)
        await app.action_quit()
    note = app.quit_note
    assert note and "journal.jsonl" in note and "replayed on the next open" in note
    assert "Permission denied" in note
    monkeypatch.undo()
    again = Session.open(tmp_path / "movie.npy", "fault-test", override=tmp_path / "session")
    assert [e.status for e in again.events] == ["accepted", "rejected", "candidate"]
    again.close()


@sync
async def test_undecodable_frame_is_a_marked_placeholder(tmp_path):
    app = _app(tmp_path, DamagedMovie)
    shown: list[str] = []
    notify = app.notify
    app.notify = lambda message, **kw: (shown.append(message), notify(message, **kw))[1]
    async with app.run_test(size=SIZE) as pilot:
        app.go(104)
        await pilot.pause()
        assert "frame 104 cannot be decoded" in (app.frameview.unreadable or "")
        lines = [app.frameview.render_line(y).text for y in range(app.frameview.size.height)]
        assert any("UNREADABLE" in ln for ln in lines)
        assert any("frame 104 cannot be read" in t for t in shown)
        app.go(97)  # the next frames are damaged: the change view falls back to this frame
        app.action_change_view()
        await pilot.pause()
        assert app.frameview.unreadable is None
        await pilot.press("right")
        assert app.frame == 98 and app.is_running
        await app.action_quit()


# ---- a real process whose files may not grow (RLIMIT_FSIZE), in tmux ----------------------------

def _tmux(sock: str, *args: str) -> str:
    return subprocess.run(["tmux", "-L", sock, "-f", "/dev/null", *args], capture_output=True,
                          text=True, timeout=10).stdout


def _wait(pred, what: str, timeout: float = 20.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if value := pred():
            return value
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


@pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed")
@pytest.mark.skipif(not hasattr(__import__("resource"), "prlimit"), reason="needs prlimit (Linux)")
def test_full_disk_in_a_real_terminal(tmp_path):
    import resource

    from sample_movies.growth import PRESETS, scaled, write_movie

    env = {k: os.environ[k] for k in ("REVIEWER_CACHE_DIR", "REVIEWER_DATA_DIR",
                                      "REVIEWER_CONFIG_DIR")}
    movie = tmp_path / "platelets.tif"
    write_movie(movie, scaled(PRESETS["sample"], 2000, 48, 64), seed=3, fps=400.0)
    subprocess.run([sys.executable, "-m", "reviewer", "scan", str(movie)], check=True,
                   env={**os.environ, **env}, capture_output=True, timeout=120)
    sock = f"reviewer-full-{uuid.uuid4().hex[:8]}"
    cmd = " ".join(["exec", "env", *(f"{k}={shlex.quote(v)}" for k, v in env.items()),
                    shlex.quote(sys.executable), "-m", "reviewer", "review", shlex.quote(str(movie))])

    def screen() -> list[str]:
        return _tmux(sock, "capture-pane", "-p", "-t", "ui").splitlines()

    def status() -> str:
        return next((ln for ln in screen() if ln.startswith(" frame ")), "")

    try:
        _tmux(sock, "new-session", "-d", "-s", "ui", "-x", "120", "-y", "40", cmd)
        _wait(lambda: "pending" in status(), "the first paint")
        pid = int(_tmux(sock, "list-panes", "-t", "ui", "-F", "#{pane_pid}").split()[0])
        journal = tmp_path / "platelets.tif.review" / "journal.jsonl"
        size = journal.stat().st_size
        # Python ignores SIGXFSZ, so a write past the limit fails with EFBIG, as a full disk would
        resource.prlimit(pid, resource.RLIMIT_FSIZE, (size, resource.RLIM_INFINITY))
        _tmux(sock, "send-keys", "-t", "ui", "N")
        _wait(lambda: "candidate" in status(), "the jump")
        _tmux(sock, "send-keys", "-t", "ui", "a")
        line = _wait(lambda: next((ln.strip() for ln in screen()
                                   if ln.strip().startswith("accept NOT applied")), None),
                     "the error line")
        assert "disk is full" in line
        assert "candidate" in status()  # not applied, still running
        resource.prlimit(pid, resource.RLIMIT_FSIZE, (resource.RLIM_INFINITY,) * 2)  # space freed
        _tmux(sock, "send-keys", "-t", "ui", "a")
        _wait(lambda: "accepted" in status(), "the retried decision")
        _tmux(sock, "send-keys", "-t", "ui", "q")
        _wait(lambda: "ui" not in _tmux(sock, "list-sessions", "-F", "#{session_name}"),
              "the app to quit", timeout=15)
    finally:
        subprocess.run(["tmux", "-L", sock, "kill-server"], capture_output=True, timeout=10)
    out = tmp_path / "events.csv"
    subprocess.run([sys.executable, "-m", "reviewer", "export", str(movie), "-o", str(out)],
                   check=True, env={**os.environ, **env}, capture_output=True, timeout=60)
    with open(out, newline="", encoding="utf-8") as f:
        assert sum(r["status"] == "accepted" for r in csv.DictReader(f)) == 1
