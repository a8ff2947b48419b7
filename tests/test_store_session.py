"""The annotation store: every action, its journal round trip, undo/redo, ids, timing, lock, folders."""

from __future__ import annotations

import errno
import json
import os
import socket
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from reviewer.paths import data_root, session_dir
from reviewer.store import journal as journal_mod
from reviewer.store.journal import StoreWriteError
from reviewer.store.session import Session

FPS = 400.0


def candidates(n: int = 6) -> pd.DataFrame:
    """Invented candidates: steps, one transient (frame_end) and one global event without a place."""
    frames = np.arange(n) * 10 + 5
    kinds = ["step"] * n
    kinds[1] = "transient"
    kinds[-1] = "global"
    ends = pd.array([None] * n, dtype="Int64")
    ends[1] = frames[1] + 3
    xs = np.linspace(10, 60, n)
    xs[-1] = np.nan
    return pd.DataFrame({"frame": frames, "frame_end": ends, "time_s": frames / FPS, "kind": kinds,
                         "score": np.linspace(3, 9, n), "x": xs, "y": xs / 2})


@pytest.fixture
def movie(tmp_path):
    path = tmp_path / "platelets.tif"
    path.write_bytes(b"not read by the store")
    return path


def open_session(movie, **kw) -> Session:
    meta = kw.pop("meta", {"frames": 100, "fps": FPS, "detector": {"sensitivity": 1.0}})
    return Session.open(movie, "fp-test", meta=meta, **kw)


def state(s: Session) -> list[tuple]:
    return [tuple(e.as_row().values()) for e in s.events]


def test_every_action_round_trips_through_the_journal(movie):
    s = open_session(movie)
    assert s.seed(candidates()) == 6
    assert s.seed(candidates()) == 0  # idempotent
    s.accept("d000000")
    s.accept("d000002", label="layer")
    s.reject("d000003")
    s.set_label("d000004", "nucleation")
    m = s.add(77, x=12.5, y=30.0, label="dissolution")
    s.nudge("d000001", +2)
    s.set_note("d000000", 'edge "A", row 3\nsecond line')
    assert s.reject_kind("global") == 1
    s.set_position(64)
    before = state(s)
    # Simulate a crash: no close(), no compaction; a fresh Session must rebuild from the journal alone.
    s._journal.close()
    s._lock.release()
    again = open_session(movie)
    assert state(again) == before
    assert again.position == 64
    assert again.get("d000002").label == "layer" and again.get("d000002").status == "accepted"
    assert again.get("d000003").status == "rejected"
    assert again.get("d000004").status == "accepted"
    assert again.get("d000005").status == "rejected"
    assert again.get(m.event_id).source == "manual" and again.get(m.event_id).kind == "manual"
    assert again.get("d000000").note == 'edge "A", row 3\nsecond line'
    again.close()
    third = open_session(movie)  # and from the snapshot written by close()
    assert state(third) == before and third.position == 64
    # close() wrote the whole state; the journal keeps only what the previous snapshot lacks
    assert json.loads((third.folder / "snapshot.json").read_text())["seq"] == 10
    prev_seq = json.loads((third.folder / "snapshot.json.prev").read_text())["seq"]
    lines = (third.folder / "journal.jsonl").read_text().splitlines()
    assert lines and all(json.loads(line)["seq"] > prev_seq for line in lines)
    third.close()


def test_journal_lines_are_json_with_seq_time_and_op(movie):
    s = open_session(movie)
    s.seed(candidates())
    s.accept("d000000")
    s.undo()
    lines = (s.folder / "journal.jsonl").read_text().splitlines()
    recs = [json.loads(line) for line in lines]
    assert [r["op"] for r in recs] == ["accept", "undo"]
    assert recs[1]["seq"] == recs[0]["seq"] + 1
    for r in recs:  # ISO 8601 UTC; datetime.fromisoformat (Python 3.11+) is the reference parser
        t = datetime.fromisoformat(r["t"])
        assert t.utcoffset().total_seconds() == 0
    s.close()


def test_ids_are_stable_and_never_reused(movie):
    s = open_session(movie)
    s.seed(candidates(3))
    assert [e.event_id for e in s.events] == ["d000000", "d000001", "d000002"]
    a = s.add(50)
    s.undo()  # the manual event goes away ...
    with pytest.raises(KeyError):
        s.get(a.event_id)
    b = s.add(51)  # ... but its id is not handed out again
    assert b.event_id != a.event_id
    s.close()
    s = open_session(movie)
    c = s.add(52)
    assert c.event_id not in (a.event_id, b.event_id)
    s.close()


def test_undo_redo_many_levels_across_reopen(movie):
    s = open_session(movie)
    s.seed(candidates(6))
    for i in range(5):
        s.accept(f"d{i:06d}", label=f"L{i}")
    s.close()
    s = open_session(movie)
    for _ in range(5):
        assert s.undo()
    assert not s.undo()
    assert all(e.status == "candidate" and e.label is None for e in s.events)
    s._journal.close()  # crash after the undos
    s._lock.release()
    s = open_session(movie)
    assert all(e.status == "candidate" for e in s.events)
    assert s.redo() and s.redo()
    s.close()
    s = open_session(movie)
    assert [e.status for e in s.events] == ["accepted"] * 2 + ["candidate"] * 4
    assert s.redo() and s.redo() and s.redo() and not s.redo()
    assert [e.label for e in s.events[:5]] == [f"L{i}" for i in range(5)]
    s.accept("d000005")  # a new action clears the redo stack
    assert s.undo() and s.redo() and not s.redo()
    s.close()


def test_undo_restores_reviewed_at_and_nudge_keeps_it(movie):
    s = open_session(movie)
    s.seed(candidates(3))
    assert s.get("d000000").reviewed_at is None
    s.accept("d000000")
    stamp = s.get("d000000").reviewed_at
    assert datetime.fromisoformat(stamp).utcoffset().total_seconds() == 0
    s.nudge("d000000", 1)
    assert s.get("d000000").reviewed_at == stamp
    s.undo()
    s.undo()
    assert s.get("d000000").reviewed_at is None
    s.close()


def test_nudge_updates_frame_time_and_frame_end_and_stays_in_the_movie(movie):
    s = open_session(movie)
    s.seed(candidates())
    ev = s.nudge("d000001", -3)  # transient at 15..18
    assert (ev.frame, ev.frame_end) == (12, 15)
    assert ev.time_s == pytest.approx(12 / FPS)
    s.nudge("d000000", -100)
    assert s.get("d000000").frame == 0
    s.nudge("d000000", 10_000)
    assert s.get("d000000").frame == 99  # frames=100 in meta
    assert [e.frame for e in s.events] == sorted(e.frame for e in s.events)
    s.close()


def test_time_from_per_frame_times_or_unknown(movie, tmp_path):
    times = np.cumsum(np.full(100, 0.01))
    s = open_session(movie, meta={"frames": 100, "times_s": times})
    s.seed(candidates(3))
    assert s.get("d000001").time_s == pytest.approx(times[15])
    s.close()
    s = open_session(movie, meta={})  # reopening without meta keeps the stored times
    assert s.get("d000001").time_s == pytest.approx(times[15])
    s.close()
    other = tmp_path / "other.tif"
    other.write_bytes(b"x")
    s = Session.open(other, "fp-other", meta={"frames": 100})
    assert s.add(10).time_s is None
    s.close()


def test_no_op_decisions_are_not_journaled(movie):
    s = open_session(movie)
    s.seed(candidates(2))
    s.accept("d000000")
    size = (s.folder / "journal.jsonl").stat().st_size
    s.accept("d000000")
    s.set_position(0)
    assert (s.folder / "journal.jsonl").stat().st_size == size
    s.close()


def test_full_disk_raises_clearly_and_leaves_state_consistent(movie, monkeypatch):
    s = open_session(movie)
    s.seed(candidates(3))
    s.accept("d000000")
    real_write = os.write

    def full(fd, data):  # write half the line, then fail like a full disk does
        real_write(fd, bytes(data[: len(data) // 2]))
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(journal_mod.os, "write", full)
    with pytest.raises(StoreWriteError, match="disk is full"):
        s.reject("d000001")
    assert s.get("d000001").status == "candidate"  # not applied in memory
    monkeypatch.setattr(journal_mod.os, "write", real_write)
    s.reject("d000002")  # space freed: work goes on, the half line was cut off
    s._journal.close()
    s._lock.release()
    s = open_session(movie)
    assert [e.status for e in s.events] == ["accepted", "candidate", "rejected"]
    assert not s.notices
    s.close()


def test_second_session_is_read_only_and_the_lock_is_released(movie):
    from reviewer.store.session import ReadOnlySession

    first = open_session(movie)
    assert first.lock_warning is None and not first.readonly
    first.seed(candidates(2))
    second = open_session(movie)
    assert second.readonly and str(os.getpid()) in second.read_only_why
    assert "read-only" in second.read_only_why
    with pytest.raises(ReadOnlySession):
        second.accept("d000000")
    first.accept("d000001")  # the writer goes on
    second.close()
    assert (first.folder / "lock").exists()  # the second did not take the first one's lock
    first.close()
    assert not (first.folder / "lock").exists()
    third = open_session(movie)
    assert third.lock_warning is None and third.get("d000001").status == "accepted"
    assert third.get("d000000").status == "candidate"
    third.close()


def _dead_pid() -> int:
    import subprocess
    import sys

    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    return int(dead.stdout)


def test_stale_lock_of_a_dead_process_is_taken_over_only_when_asked(movie):
    folder = session_dir(movie, "fp-test")
    stale = json.dumps({"pid": _dead_pid(), "host": socket.gethostname(),
                        "started": "2026-01-01T00:00:00Z"})
    (folder / "lock").write_text(stale)
    s = open_session(movie)
    assert s.readonly and "no longer running" in s.read_only_why
    assert "--reclaim-lock" in s.read_only_why
    s.close()
    assert (folder / "lock").read_text() == stale  # left as it was
    s = open_session(movie, reclaim=True)
    assert s.lock_warning is None and not s.readonly
    assert json.loads((folder / "lock").read_text())["pid"] == os.getpid()
    s.close()


def test_read_only_movie_folder_puts_the_session_in_the_data_folder(movie, monkeypatch):
    # Tests run as root here, where chmod 0o555 does not stop writes and os.access says "writable";
    # so the folder check is made to fail through os.access, as it does for an ordinary user.
    import reviewer.paths as paths

    real = os.access
    ro = movie.parent
    monkeypatch.setattr(paths.os, "access",
                        lambda p, mode: False if str(p).startswith(str(ro)) else real(p, mode))
    s = open_session(movie)
    assert s.folder == data_root() / "sessions" / "fp-test"
    s.seed(candidates(2))
    s.accept("d000000")
    s.close()
    assert not (ro / (movie.name + ".review")).exists()
    s = open_session(movie)
    assert s.get("d000000").status == "accepted"
    s.close()


NOBODY = 65534  # the unprivileged user and group of most Linux systems (common practice, no source)


def _read_only_folder_case(movie) -> None:
    movie.parent.chmod(0o555)
    with pytest.raises(PermissionError):  # the folder really refuses writes to this user
        (movie.parent / "probe").write_text("x")
    s = open_session(movie)
    assert s.folder == data_root() / "sessions" / "fp-test"
    s.seed(candidates(2))
    s.accept("d000000")
    s.close()
    assert not (movie.parent / (movie.name + ".review")).exists()
    s = open_session(movie)
    assert s.get("d000000").status == "accepted"
    s.close()


def _as_nobody(fn, *args) -> None:
    """Run fn(*args) in a forked child that has dropped root for uid/gid 65534; raise its error.

    A fork, not a new interpreter: here the interpreter lives under /root (mode 0700), which an
    unprivileged user cannot execute, so subprocess with preexec_fn=setuid cannot start it. The
    forked child has every module loaded already (a first run as root imported them all). Skips
    only where root cannot change its user (no CAP_SETUID), saying so."""
    import traceback

    r, w = os.pipe()
    pid = os.fork()
    if pid == 0:  # the child: never returns into pytest
        code = 1
        try:
            os.close(r)
            try:
                os.setgroups([])
                os.setgid(NOBODY)
                os.setuid(NOBODY)
            except PermissionError as exc:  # e.g. a container without CAP_SETUID
                os.write(w, f"cannot drop root here ({exc})".encode())
                code = 3
                raise SystemExit from None
            assert os.geteuid() == NOBODY
            fn(*args)
            code = 0
        except SystemExit:
            pass
        except BaseException:
            os.write(w, traceback.format_exc().encode())
        finally:
            os._exit(code)
    os.close(w)
    with os.fdopen(r, "rb") as f:
        message = f.read().decode()
    _, status = os.waitpid(pid, 0)
    code = os.waitstatus_to_exitcode(status)
    if code == 3:
        pytest.skip(f"root cannot become user {NOBODY}: {message}")
    assert code == 0, message


def test_read_only_movie_folder_really_chmodded(tmp_path, monkeypatch):
    """A movie in a folder the user cannot write: the session goes to the data folder. As root
    (which ignores permissions) the check runs in a child process as user nobody."""
    if os.geteuid() != 0:
        movie = tmp_path / "ro" / "platelets.tif"
        movie.parent.mkdir()
        movie.write_bytes(b"not read by the store")
        monkeypatch.setenv("REVIEWER_DATA_DIR", str(tmp_path / "data"))
        try:
            _read_only_folder_case(movie)
        finally:
            movie.parent.chmod(0o755)
        return
    import shutil
    import tempfile

    # pytest's tmp_path sits under a 0700 folder of root's; nobody needs its own folder in /tmp
    top = Path(tempfile.mkdtemp(prefix="reviewer-nobody-", dir="/tmp"))
    try:
        warm = top / "warm" / "platelets.tif"  # a first run as root imports every module needed
        warm.parent.mkdir()
        warm.write_bytes(b"x")
        monkeypatch.setenv("REVIEWER_DATA_DIR", str(top / "warm-data"))
        s = open_session(warm)
        s.seed(candidates(2))
        s.accept("d000000")
        s.close()
        open_session(warm).close()
        movie = top / "ro" / "platelets.tif"
        movie.parent.mkdir()
        movie.write_bytes(b"not read by the store")
        for sub in ("ro", "data", "cache", "config"):
            (top / sub).mkdir(exist_ok=True)
            os.chown(top / sub, NOBODY, NOBODY)
        os.chown(movie, NOBODY, NOBODY)
        os.chmod(top, 0o755)
        for var, sub in (("REVIEWER_DATA_DIR", "data"), ("REVIEWER_CACHE_DIR", "cache"),
                         ("REVIEWER_CONFIG_DIR", "config")):
            monkeypatch.setenv(var, str(top / sub))
        _as_nobody(_read_only_folder_case, movie)
        assert (top / "data" / "sessions" / "fp-test").is_dir()
        assert sorted(os.listdir(top / "ro")) == ["platelets.tif"]
    finally:
        shutil.rmtree(top, ignore_errors=True)


def test_override_folder_and_readonly_open(movie, tmp_path):
    where = tmp_path / "elsewhere"
    s = open_session(movie, override=where)
    assert s.folder == where
    s.seed(candidates(2))
    s.accept("d000001")
    ro = open_session(movie, override=where, readonly=True)  # e.g. export while the UI runs
    assert ro.lock_warning is None and ro.get("d000001").status == "accepted"
    with pytest.raises(RuntimeError):
        ro.accept("d000000")
    ro.close()
    assert (where / "lock").exists()
    s.close()


def test_unusable_session_folder_is_bad_input(movie, tmp_path):
    from reviewer.errors import BadInput

    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    with pytest.raises(BadInput, match="a-file"):
        open_session(movie, override=blocker / "session")


def test_seed_on_a_full_disk_is_rolled_back(movie, monkeypatch):
    s = open_session(movie)
    manual = s.add(3)

    def full(src, dst):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(journal_mod.os, "replace", full)
    with pytest.raises(StoreWriteError, match="disk is full"):
        s.seed(candidates(4))
    assert [e.event_id for e in s.events] == [manual.event_id] and not s.seeded
    monkeypatch.undo()
    assert s.seed(candidates(4)) == 4
    s.close()
    s = open_session(movie)
    assert len(s.events) == 5 and s.seeded
    s.close()


def test_reject_kind_is_one_undoable_action_and_spares_decided_ones(movie):
    s = open_session(movie)
    df = candidates(6)
    df.loc[[0, 2, 4], "kind"] = "global"
    s.seed(df)
    s.accept("d000002")  # a decided global event keeps its decision
    assert s.reject_kind("global") == 3  # d000000, d000004, d000005
    assert [e.status for e in s.events] == ["rejected", "candidate", "accepted", "candidate",
                                            "rejected", "rejected"]
    assert s.undo()
    assert [e.status for e in s.events] == ["candidate", "candidate", "accepted", "candidate",
                                            "candidate", "candidate"]
    assert s.reject_kind("nothing-of-this-kind") == 0
    s.close()


def test_detector_settings_recorded_after_opening_survive_reopen(movie):
    facts = {"frames": 100, "fps": FPS}  # a session opened before the scan: no detector yet
    s = open_session(movie, meta=facts)
    assert s.meta.get("detector") is None
    settings = {"sensitivity": 1.5, "windows": [3, 10, 24]}
    s.update_meta(detector=settings)
    s.close()
    again = open_session(movie, meta=facts)
    assert again.meta["detector"] == settings
    again.close()
