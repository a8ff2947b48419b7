"""Damaged and unwritable sessions: a cut snapshot is recovered from the previous one plus the journal
and moved aside (never overwritten); a `<movie>.review/` that cannot be written opens read-only and says
how to go on, checked as the unprivileged user 'nobody' when the suite runs as root; `reviewer export`
(a reader) makes no session folder."""

from __future__ import annotations

import asyncio
import csv
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from reviewer.store.session import Session

REVIEWER = [sys.executable, "-m", "reviewer"]
NOBODY = 65534  # the conventional uid/gid of 'nobody' on Linux (common practice, no source)


def _movie(folder: Path) -> tuple[Path, str]:
    from reviewer.movie import open_movie

    path = folder / "platelets.npy"
    rng = np.random.default_rng(3)
    np.save(path, rng.integers(900, 1100, size=(200, 16, 20), dtype=np.uint16))
    with open_movie(path, fps=100.0) as m:
        return path, m.fingerprint


def _candidates(n: int) -> pd.DataFrame:
    frames = np.arange(n) * 15 + 4
    return pd.DataFrame({"frame": frames, "kind": ["step"] * n, "score": np.full(n, 6.0),
                         "x": np.full(n, 5.0), "y": np.full(n, 6.0)})


def _nine_decisions(path: Path, fp: str, folder: Path | None = None) -> Session:
    s = Session.open(path, fp, override=folder, meta={"frames": 200, "fps": 100.0})
    s.seed(_candidates(12))
    for i in range(9):
        if i % 3 == 2:
            s.reject(f"d{i:06d}")
        else:
            s.accept(f"d{i:06d}", label="layer" if i % 2 else None)
    return s


def _export(movie: Path, out: Path, *extra: str) -> tuple[list[dict], str]:
    done = subprocess.run([*REVIEWER, "export", str(movie), "-o", str(out), *extra],
                          capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stderr
    with open(out, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f)), done.stderr


def test_snapshot_cut_by_40_bytes_loses_no_decision(tmp_path):
    movie, fp = _movie(tmp_path)
    _nine_decisions(movie, fp).close()
    folder = tmp_path / "platelets.npy.review"
    snap = folder / "snapshot.json"
    data = snap.read_bytes()
    snap.write_bytes(data[:-40])  # damaged: the last 40 bytes are gone
    cut = snap.read_bytes()

    rows, err = _export(movie, tmp_path / "events.csv")
    assert sum(r["status"] != "candidate" for r in rows) == 9
    assert sum(r["status"] == "rejected" for r in rows) == 3
    assert "snapshot.json: cannot be read" in err and "previous snapshot" in err
    assert snap.read_bytes() == cut  # the reader changed nothing

    # the UI (a writer) recovers the same, moves the damaged file aside and says so
    from reviewer.tui.app import make_app

    app = make_app(movie, fps=100.0, run_scan=False)
    assert sum(e.status != "candidate" for e in app.session.events) == 9
    notes = " ".join(app.session.notices)
    assert "moved aside" in notes
    aside = list(folder.glob("snapshot.json.damaged-*"))
    assert len(aside) == 1 and aside[0].read_bytes() == cut  # kept as it was, never overwritten
    json.loads(snap.read_bytes())  # a good snapshot again

    async def shown():
        async with app.run_test(size=(120, 40)) as pilot:
            await pilot.pause()
            texts = [n.message for n in app._notifications]
            await app.action_quit()
            return texts

    assert any("moved aside" in t for t in asyncio.run(shown()))
    again = Session.open(movie, fp)
    assert sum(e.status != "candidate" for e in again.events) == 9 and not again.notices
    again.close()


def test_both_snapshots_damaged_say_so_and_keep_both(tmp_path):
    movie, fp = _movie(tmp_path)
    _nine_decisions(movie, fp).close()
    folder = tmp_path / "platelets.npy.review"
    for name in ("snapshot.json", "snapshot.json.prev"):
        (folder / name).write_bytes(b'{"seq": 3, "events": [[')
    s = Session.open(movie, fp)
    notes = " ".join(s.notices)
    assert "snapshot.json: cannot be read" in notes and "snapshot.json.prev: cannot be read" in notes
    assert len(list(folder.glob("snapshot.json.damaged-*"))) == 1
    assert len(list(folder.glob("snapshot.json.prev.damaged-*"))) == 1
    s.close()


def test_export_makes_no_session_folder(tmp_path):
    movie, _ = _movie(tmp_path)
    rows, err = _export(movie, tmp_path / "events.csv")
    assert rows == []
    assert not (tmp_path / "platelets.npy.review").exists()
    assert not any(Path(os.environ["REVIEWER_DATA_DIR"]).rglob("*.json"))


# ---- an unwritable <movie>.review/, as an unprivileged user -------------------------------------

def _as_nobody(fn):
    """Run fn() in a forked child that has become 'nobody' (when we are root; else as ourselves, whom
    permissions already bind); returns what it returned (JSON).

    A fork, not an exec: the interpreter of the test run may live where 'nobody' cannot read, so the
    child uses the modules the parent already imported."""
    r, w = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child
        os.close(r)
        code = 0
        try:
            if os.geteuid() == 0:
                os.setgroups([])
                os.setgid(NOBODY)
                os.setuid(NOBODY)
            out = {"ok": fn()}
        except BaseException as exc:  # noqa: BLE001 - reported to the parent
            out, code = {"error": f"{type(exc).__name__}: {exc}"}, 1
        os.write(w, json.dumps(out, default=str).encode())
        os._exit(code)
    os.close(w)
    with os.fdopen(r, "rb") as f:
        data = f.read()
    os.waitpid(pid, 0)
    got = json.loads(data or b'{"error": "no answer"}')
    if "error" in got:
        raise AssertionError(got["error"])
    return got["ok"]


def test_unwritable_session_folder_opens_read_only_for_nobody(monkeypatch):
    from reviewer.commands import export as export_cmd  # noqa: F401 - imported before the fork
    from reviewer.store import replay  # noqa: F401
    from reviewer.tui import app as app_mod  # noqa: F401

    top = Path(tempfile.mkdtemp(prefix="reviewer-nobody-"))
    try:
        top.chmod(0o755)
        movie, fp = _movie(top)
        movie.chmod(0o644)
        _nine_decisions(movie, fp).close()
        folder = top / "platelets.npy.review"
        # root's and 0o755: readable, not writable by 'nobody'; an ordinary user's own: 0o555
        folder.chmod(0o755 if os.geteuid() == 0 else 0o555)
        for f in folder.iterdir():
            f.chmod(0o644)
        data = top / "nobody-data"
        data.mkdir(mode=0o777)
        data.chmod(0o777)
        out = top / "out"
        out.mkdir()
        out.chmod(0o777)
        monkeypatch.setenv("REVIEWER_DATA_DIR", str(data))
        before = sorted(p.name for p in folder.iterdir())

        def review_open():
            s = Session.open(movie, fp, meta={"frames": 200, "fps": 100.0})
            got = {"readonly": s.readonly, "why": s.read_only_why, "folder": str(s.folder),
                   "decided": sum(e.status != "candidate" for e in s.events)}
            try:
                s.accept("d000011")
            except RuntimeError as exc:
                got["refused"] = str(exc)
            s.close()
            from reviewer.cli import main

            got["export"] = main(["export", str(movie), "-o", str(out / "e.csv")])
            return got

        got = _as_nobody(review_open)
        assert got["readonly"] and got["folder"] == str(folder)  # never a blank session elsewhere
        assert got["decided"] == 9
        assert "cannot be written" in got["why"] and "--session DIR" in got["why"]
        assert "read-only" in got["refused"]
        assert got["export"] == 0
        with open(out / "e.csv", newline="", encoding="utf-8") as f:
            assert sum(r["status"] != "candidate" for r in csv.DictReader(f)) == 9
        assert sorted(p.name for p in folder.iterdir()) == before  # nothing written there
        assert not any(data.iterdir())  # and no session started in the data folder
    finally:
        subprocess.run(["chmod", "-R", "u+w", str(top)], check=False)
        subprocess.run(["rm", "-rf", str(top)], check=False)


def test_folder_turned_read_only_while_deciding_keeps_every_decision():
    from reviewer.store.journal import StoreWriteError

    top = Path(tempfile.mkdtemp(prefix="reviewer-nobody-"))
    try:
        top.chmod(0o777)
        folder = top / "session"

        def work():
            s = Session.open(top / "m.npy", "fp-ro", override=folder,
                             meta={"frames": 200, "fps": 100.0})
            s.seed(_candidates(5))
            s.accept("d000000")
            folder.chmod(0o555)  # the user (or a mount) makes the folder read-only meanwhile
            s.reject("d000001")  # the journal is already open: still saved
            try:
                s.close()
            except StoreWriteError as exc:
                return str(exc)
            return "closed without an error"

        said = _as_nobody(work)
        assert "snapshot.json" in said and "Permission denied" in said
        folder.chmod(0o755)
        s = Session.open(top / "m.npy", "fp-ro", override=folder)
        assert not s.readonly  # the lock was freed although it could not be removed
        assert [e.status for e in s.events][:2] == ["accepted", "rejected"]
        s.close()
    finally:
        subprocess.run(["chmod", "-R", "u+w", str(top)], check=False)
        subprocess.run(["rm", "-rf", str(top)], check=False)
