"""One writer per session, and readers that only ever see states the session really had.

- Two real `reviewer review` processes on one movie in tmux: the first holds the session, the second
  opens read-only with a banner; each types three decisions; after both quit, `reviewer export` holds
  every decision of the first and none of the second, whose keys each said so on one screen line.
- A real writer process hammering decisions with frequent compactions while 1,000 reads through the
  code `reviewer export` uses run beside it: every read equals the state the writer logged for that seq.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import shlex
import shutil
import subprocess
import sys
import textwrap
import time
import uuid

import pytest

from reviewer.store.session import Session

REVIEWER = [sys.executable, "-m", "reviewer"]
tmux_needed = pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is not installed")


def _tmux(sock: str, *args: str) -> str:
    return subprocess.run(["tmux", "-L", sock, "-f", "/dev/null", *args], capture_output=True,
                          text=True, timeout=10).stdout


def _screen(sock: str, target: str) -> list[str]:
    return _tmux(sock, "capture-pane", "-p", "-t", target).splitlines()


def _status(sock: str, target: str) -> str:
    return next((ln for ln in _screen(sock, target) if ln.startswith(" frame ") and "│" in ln), "")


def _wait(pred, what: str, timeout: float = 20.0):
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        value = pred()
        if value:
            return value
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


def _start(sock: str, name: str, movie, env: dict) -> None:
    cmd = " ".join(["exec", "env", *(f"{k}={shlex.quote(v)}" for k, v in env.items()),
                    *map(shlex.quote, REVIEWER), "review", shlex.quote(str(movie))])
    _tmux(sock, "new-session", "-d", "-s", name, "-x", "120", "-y", "40", cmd)
    _wait(lambda: "pending" in _status(sock, name), f"the first paint of {name}")


def _key(sock: str, target: str, key: str, changed) -> list[str]:
    """Send a key and wait until the screen shows its effect (changed(screen) is true)."""
    _tmux(sock, "send-keys", "-t", target, key)
    return _wait(lambda: (lambda s: s if changed(s) else None)(_screen(sock, target)),
                 f"the effect of {key!r} in {target}", timeout=10)


@tmux_needed
def test_two_uis_on_one_movie_only_the_writer_decides(tmp_path):
    from sample_movies.growth import PRESETS, scaled, write_movie

    env = {k: os.environ[k] for k in ("REVIEWER_CACHE_DIR", "REVIEWER_DATA_DIR",
                                      "REVIEWER_CONFIG_DIR")}
    full_env = {**os.environ, **env}
    movie = tmp_path / "platelets.tif"
    write_movie(movie, scaled(PRESETS["sample"], 3000, 48, 64), seed=5, fps=400.0)
    subprocess.run([*REVIEWER, "scan", str(movie)], check=True, env=full_env,
                   capture_output=True, timeout=120)
    sock = f"reviewer-two-{uuid.uuid4().hex[:8]}"
    try:
        _start(sock, "writer", movie, env)
        _start(sock, "reader", movie, env)
        screen = _screen(sock, "reader")
        banner = " ".join(screen[:4])
        assert "READ-ONLY" in banner and "pid " in banner, screen[:4]
        assert "READ-ONLY" not in " ".join(_screen(sock, "writer"))

        refusals = []
        for who, decide in (("writer", "a"), ("reader", "a"), ("writer", "r"), ("reader", "r"),
                            ("writer", "a"), ("reader", "1")):
            before = _status(sock, who)
            _key(sock, who, "N", lambda s, b=before: next(
                (ln for ln in s if ln.startswith(" frame ")), "") != b)
            if who == "writer":
                word = "rejected" if decide == "r" else "accepted"
                _key(sock, who, decide, lambda s, w=word: w in next(
                    (ln for ln in s if ln.startswith(" frame ")), ""))
            else:
                what = {"a": "accept", "r": "reject", "1": "label 1"}[decide]
                start = f"read-only: {what} not applied"
                screen = _key(sock, who, decide, lambda s, t=start: any(
                    ln.strip().startswith(t) for ln in s))
                line = next(ln.strip() for ln in screen if ln.strip().startswith(start))
                refusals.append(line)
                assert "pid " in line  # one line says so, and who holds the session
                assert "candidate" in _status(sock, who)
        assert len(refusals) == 3
        for who in ("reader", "writer"):
            _tmux(sock, "send-keys", "-t", who, "q")
            _wait(lambda w=who: w not in _tmux(sock, "list-sessions", "-F", "#{session_name}"),
                  f"{who} to quit", timeout=15)
    finally:
        subprocess.run(["tmux", "-L", sock, "kill-server"], capture_output=True, timeout=10)

    out = tmp_path / "events.csv"
    subprocess.run([*REVIEWER, "export", str(movie), "-o", str(out)], check=True, env=full_env,
                   capture_output=True, timeout=60)
    with open(out, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    decided = [r for r in rows if r["status"] != "candidate"]
    assert sorted(r["status"] for r in decided) == ["accepted", "accepted", "rejected"]
    assert not any(r["label"] for r in decided)  # the reader's label key did nothing
    assert not (tmp_path / "platelets.tif.review" / "lock").exists()


WRITER = textwrap.dedent("""
    import hashlib, json, sys
    from pathlib import Path
    import numpy as np, pandas as pd
    from reviewer.store.session import Session

    folder, stop = Path(sys.argv[1]), Path(sys.argv[2])
    s = Session.open(folder / "m.tif", "fp-race", override=folder / "session",
                     meta={"frames": 10000, "fps": 400.0})
    n = 40
    s.seed(pd.DataFrame({"frame": np.arange(n) * 7 + 3, "kind": ["step"] * n,
                         "score": np.full(n, 5.0)}))

    def digest():
        rows = [list(e.as_row().values()) for e in s.events]
        return hashlib.sha256(json.dumps(rows, default=str).encode()).hexdigest()

    log = {s._seq: digest()}
    print("ready", flush=True)
    i = 0
    while not stop.exists() and i < 20000:
        eid = f"d{i % n:06d}"
        if i % 5 == 4:
            s.undo()
        elif i % 2:
            s.accept(eid, label=f"L{i % 3}")
        else:
            s.reject(eid)
        log[s._seq] = digest()
        print(s._seq, flush=True)  # only after the action returned: it is on disk
        if i % 3 == 2:
            s.compact()  # snapshot rewrites, far more often than a UI does them
        i += 1
    s.close()
    (folder / "log.json").write_text(json.dumps(log))
""")


def _digest(s: Session) -> str:
    rows = [list(e.as_row().values()) for e in s.events]
    return hashlib.sha256(json.dumps(rows, default=str).encode()).hexdigest()


def test_reads_racing_a_compacting_writer_see_only_states_it_had(tmp_path):
    """Each read must be a state the writer had (its content matches the writer's log for its seq)
    and not older than the last action the writer had finished when the read began."""
    import threading

    stop = tmp_path / "stop"
    proc = subprocess.Popen([sys.executable, "-c", WRITER, str(tmp_path), str(stop)],
                            stdout=subprocess.PIPE, text=True)
    latest = [0]

    def follow() -> None:
        for line in proc.stdout:
            latest[0] = int(line)

    seen: list[tuple[int, int, str]] = []
    try:
        assert proc.stdout.readline().strip() == "ready"
        thread = threading.Thread(target=follow, daemon=True)
        thread.start()
        for _ in range(1000):  # the read `reviewer export` makes (commands/export.py)
            floor = latest[0]
            s = Session.open(tmp_path / "m.tif", "fp-race", override=tmp_path / "session",
                             readonly=True)
            seen.append((floor, s._seq, _digest(s)))
            s.close()
    finally:
        stop.touch()
        proc.wait(timeout=60)
        thread.join(timeout=10)
        proc.stdout.close()
    assert proc.returncode == 0
    log = {int(k): v for k, v in json.loads((tmp_path / "log.json").read_text()).items()}
    assert len({seq for _, seq, _ in seen}) > 50  # the reads really were spread over a moving session
    mixed = [seq for _, seq, d in seen if log.get(seq) != d]
    stale = [(floor, seq) for floor, seq, _ in seen if seq < floor]
    assert not mixed, f"{len(mixed)} of {len(seen)} reads saw a state the session never had"
    assert not stale, f"{len(stale)} of {len(seen)} reads missed actions already saved: {stale[:5]}"
