"""Crash safety of the store: SIGKILL mid-journal, torn and damaged lines, compaction crash windows,
and SIGTERM saving through install_signal_savers."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap

import numpy as np
import pandas as pd
import pytest

from reviewer.store import journal as journal_mod
from reviewer.store.journal import StoreWriteError
from reviewer.store.session import Session


def _candidates(n: int) -> pd.DataFrame:
    frames = np.arange(n) * 3 + 1
    return pd.DataFrame({"frame": frames, "frame_end": pd.array([None] * n, dtype="Int64"),
                         "time_s": frames / 400.0, "kind": ["step"] * n,
                         "score": np.full(n, 5.0), "x": np.full(n, 8.0), "y": np.full(n, 9.0)})


def _open(folder, **kw) -> Session:
    return Session.open(folder / "m.tif", "fp-crash", override=folder / "session",
                        meta={"frames": 100_000, "fps": 400.0}, **kw)


def _crash(s: Session) -> None:
    """Drop a session the way a killed process would: no compaction, nothing flushed beyond fsync."""
    s._journal.close()
    s._lock.release()


CHILD = textwrap.dedent("""
    import sys
    from pathlib import Path
    import numpy as np, pandas as pd
    from reviewer.store.session import Session
    folder = Path(sys.argv[1])
    s = Session.open(folder / "m.tif", "fp-crash", override=folder / "session",
                     meta={"frames": 100000, "fps": 400.0})
    n = 5000
    s.seed(pd.DataFrame({"frame": np.arange(n) * 3 + 1, "kind": ["step"] * n,
                         "score": np.full(n, 5.0)}))
    for i in range(n):
        if i % 2:
            s.accept(f"d{i:06d}", label="layer")
        else:
            s.reject(f"d{i:06d}")
        print(i, flush=True)   # only after the call returned: the action is fsynced
""")


def test_sigkill_mid_run_keeps_every_fsynced_action(tmp_path):
    proc = subprocess.Popen([sys.executable, "-c", CHILD, str(tmp_path)], stdout=subprocess.PIPE,
                            text=True)
    done = -1
    try:
        for line in proc.stdout:
            done = int(line)
            if done >= 40:
                break
    finally:
        proc.send_signal(signal.SIGKILL)  # while it keeps deciding, possibly mid-write
        proc.wait(timeout=30)
        proc.stdout.close()
    assert done >= 40 and proc.returncode == -signal.SIGKILL
    s = _open(tmp_path)  # the dead process's lock is stale: read-only until the user reclaims it
    assert s.readonly and "--reclaim-lock" in s.read_only_why
    assert sum(e.status != "candidate" for e in s.events) >= done + 1  # readable meanwhile
    s.close()
    s = _open(tmp_path, reclaim=True)
    assert s.lock_warning is None and not s.readonly
    decided = [e for e in s.events if e.status != "candidate"]
    assert len(decided) >= done + 1  # every action reported as done survived
    for e in decided:  # ... and each is the right decision
        i = int(e.event_id[1:])
        assert (e.status, e.label) == (("accepted", "layer") if i % 2 else ("rejected", None))
    assert {int(e.event_id[1:]) for e in decided} == set(range(len(decided)))
    s.close()


def test_torn_last_line_is_ignored_with_a_notice(tmp_path):
    s = _open(tmp_path)
    s.seed(_candidates(4))
    s.accept("d000000")
    s.accept("d000001")
    _crash(s)
    path = tmp_path / "session" / "journal.jsonl"
    with open(path, "ab") as f:  # a crash mid-write: half of a record, no newline
        f.write(b'{"seq":99,"t":"2026-01-01T00:00:00Z","op":"accept","chan')
    s = _open(tmp_path)
    assert [e.status for e in s.events] == ["accepted", "accepted", "candidate", "candidate"]
    assert any("incomplete" in n for n in s.notices)
    s.reject("d000003")  # the next line must not glue onto the torn one
    _crash(s)
    s = _open(tmp_path)
    assert not s.notices
    assert s.get("d000003").status == "rejected"
    s.close()


def test_damaged_middle_line_is_skipped_and_later_lines_kept(tmp_path):
    s = _open(tmp_path)
    s.seed(_candidates(4))
    s.set_position(5)
    s.accept("d000001")
    s.set_position(9)
    _crash(s)
    path = tmp_path / "session" / "journal.jsonl"
    lines = path.read_bytes().splitlines(keepends=True)
    lines[1] = b'{"seq": 3, "op": garbage\n'
    path.write_bytes(b"".join(lines))
    s = _open(tmp_path)
    assert any("line 2 is damaged" in n for n in s.notices)
    assert s.get("d000001").status == "candidate" and s.position == 9
    s.close()


def _decide(s: Session) -> None:
    s.seed(_candidates(5))
    s.accept("d000000")
    s.add(60, label="nucleation")
    s.reject("d000002")
    s.set_note("d000003", "x")


def _snapshot_of(s: Session) -> tuple:
    return [tuple(e.as_row().values()) for e in s.events], s.position, len(s._undo)


def test_crash_before_the_snapshot_rename_loses_nothing(tmp_path, monkeypatch):
    s = _open(tmp_path)
    _decide(s)
    want = _snapshot_of(s)

    def boom(src, dst):
        raise OSError(5, "simulated crash before rename")

    monkeypatch.setattr(journal_mod.os, "replace", boom)
    with pytest.raises(StoreWriteError):
        s.compact()
    monkeypatch.undo()
    assert _snapshot_of(s) == want
    _crash(s)
    s = _open(tmp_path)
    assert _snapshot_of(s) == want
    s.close()


def test_crash_after_rename_before_truncate_replays_nothing_twice(tmp_path, monkeypatch):
    s = _open(tmp_path)
    _decide(s)
    want = _snapshot_of(s)

    def boom(self, seq):
        raise OSError(5, "simulated crash before the journal is cut")

    monkeypatch.setattr(journal_mod.Journal, "keep_after", boom)
    with pytest.raises(OSError):
        s.compact()
    monkeypatch.undo()
    _crash(s)
    journal = (tmp_path / "session" / "journal.jsonl").read_text()
    assert journal.count("\n") == 4  # the snapshot and the full journal are both on disk
    s = _open(tmp_path)
    assert _snapshot_of(s) == want
    for _ in range(4):  # exactly four undoable actions, not eight
        assert s.undo()
    assert not s.undo()
    s.close()


def test_leftover_partial_snapshot_temp_is_ignored(tmp_path):
    s = _open(tmp_path)
    _decide(s)
    want = _snapshot_of(s)
    s.close()
    (tmp_path / "session" / "snapshot.json.tmp").write_text('{"seq": 1000, "events": [[')
    s = _open(tmp_path)
    assert _snapshot_of(s) == want
    s.accept("d000004")
    s.close()
    assert json.loads((tmp_path / "session" / "snapshot.json").read_text())["seq"] > 0


SIGTERM_CHILD = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    import pandas as pd
    from reviewer.store.session import Session
    from reviewer.store.signals import install_signal_savers
    folder = Path(sys.argv[1])
    s = Session.open(folder / "m.tif", "fp-crash", override=folder / "session",
                     meta={"frames": 1000, "fps": 400.0})
    s.seed(pd.DataFrame({"frame": [1, 2, 3], "kind": ["step"] * 3}))
    install_signal_savers(s)
    s.accept("d000001", label="layer")
    s.set_position(2)
    print("ready", flush=True)
    time.sleep(60)
""")


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGHUP])
def test_sigterm_and_sighup_save_and_exit(tmp_path, sig):
    proc = subprocess.Popen([sys.executable, "-c", SIGTERM_CHILD, str(tmp_path)],
                            stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "ready"
    proc.send_signal(sig)
    assert proc.wait(timeout=30) == 128 + sig
    proc.stdout.close()
    folder = tmp_path / "session"
    assert not (folder / "lock").exists()  # closed: lock released
    assert json.loads((folder / "snapshot.json").read_text())["seq"] == 3  # compacted on the signal
    s = _open(tmp_path)
    assert s.get("d000001").label == "layer" and s.position == 2
    s.close()


def test_signal_during_an_action_waits_for_it(tmp_path):
    from reviewer.store.signals import install_signal_savers

    s = _open(tmp_path)
    s.seed(_candidates(3))
    got = []
    restore = install_signal_savers(s, on_exit=got.append)
    try:
        s._busy += 1  # as if the signal landed inside accept()
        os.kill(os.getpid(), signal.SIGTERM)
        assert got == [] and not s._closed
        s._busy -= 1
        s.accept("d000000")  # the action finishes, then the saver runs
        assert got == [signal.SIGTERM] and s._closed
    finally:
        restore()
    s = _open(tmp_path)
    assert s.get("d000000").status == "accepted"
    s.close()
