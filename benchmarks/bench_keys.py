"""Key-to-repaint latency of the review UI in a real 200x60 tmux pane (target: median <= 50 ms).

Opens `reviewer review` on a scanned movie (the bundled sample unless --movie is given) in a private
tmux server. A tmux control-mode client sends each key and then asks tmux for the status line's row
every 2 ms until the status line (drawn below the frame, so written after it) shows the change: one
sample is the time from sending the key to that moment, tmux's relaying included.

The probe looks at the status line's row only (`capture-pane -S ROW -E ROW`, about 0.2 ms of the
tmux server's time), found by one look at the whole pane before the key is sent and again whenever
the row no longer holds the status line. Capturing the whole 200x60 pane costs the tmux server about
9 ms a look, during which it reads nothing the app writes: polling that every 2 ms kept tmux busy most
of the time and timed its own polling (`--poll pane` measures that way, for comparison). A press that shows no
change within the timeout (5 s) counts as a failure: it enters the median and the 90th percentile at
the timeout value, the failures are counted and printed, and the exit status is 1 when there were
any. Prints median and 90th percentile per kind of key and overall, and the overall median's ratio
to the 50 ms target.

Caches: the movie is scanned once before the UI opens, into REVIEWER_CACHE_DIR (a new folder unless
the variable is set), so the review opens on a warm cache (the scan is reused, as a user's second
look is); which one is printed. Frames are read through the operating system's page cache.

    python benchmarks/bench_keys.py [--movie MOVIE] [--rounds 40] [--poll row|pane]
"""

from __future__ import annotations

import argparse
import contextlib
import os
import queue
import shlex
import shutil
import signal
import subprocess
import sys
import tempfile
import threading
import time
import uuid

import numpy as np

TARGET_MS = 50.0
TIMEOUT_S = 5.0  # a press with no repaint by then is a failure, counted at this value
ROUNDS = {"frame step (right/left)": ["right", "left"], "jump (n/p)": ["n", "p"],
          "decision + undo (a/u)": ["a", "u"], "view (t)": ["t"]}


def tmux(sock: str, *args: str) -> str:
    return subprocess.run(["tmux", "-L", sock, "-f", "/dev/null", *args], capture_output=True,
                          text=True, timeout=10).stdout


def gone(pid: int | None, wait_s: float) -> bool:
    """True when the process has exited (or there is none) within wait_s."""
    end = time.monotonic() + wait_s
    while pid is not None:
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return True
        if time.monotonic() > end:
            return False
        time.sleep(0.05)
    return True


def reap(pid: int | None, wait_s: float = 5.0) -> bool:
    """After the tmux server is gone: True when the review process has exited within wait_s;
    else it is killed (SIGKILL, so that it takes no CPU from the next run) and False."""
    if gone(pid, wait_s):
        return True
    with contextlib.suppress(ProcessLookupError):
        os.kill(pid, signal.SIGKILL)
    return False


def is_status(line: str | bytes) -> bool:
    if isinstance(line, bytes):
        line = line.decode(errors="replace")
    return line.startswith(" frame ") and "│" in line


def status(sock: str) -> str:
    for line in tmux(sock, "capture-pane", "-p", "-t", "bench").splitlines():
        if is_status(line):
            return line
    return ""


class Probe:
    """One tmux control-mode client (with the pane's output switched off) that sends the keys and
    asks for capture-pane over the same pipe: polling costs one round trip in the tmux server, not a
    new process per look. It captures only the status line's row (``poll="row"``); ``poll="pane"``
    captures the whole pane on every look, as the probe first did (about 9 ms of the tmux server a
    look at 200x60)."""

    def __init__(self, sock: str, poll: str = "row") -> None:
        if poll not in ("row", "pane"):
            raise ValueError(f"poll must be 'row' or 'pane', got {poll!r}")
        self.poll = poll
        self.row: int | None = None  # the status line's row, once seen
        self.proc = subprocess.Popen(["tmux", "-L", sock, "-f", "/dev/null", "-C", "attach", "-t",
                                      "bench", "-f", "no-output"], stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, bufsize=0)
        self.replies: queue.Queue[list[bytes]] = queue.Queue()
        threading.Thread(target=self._read, daemon=True).start()
        # attaching answers with an empty block of its own: read up to our marker, so that each
        # later command gets its own reply (not the one before)
        self.proc.stdin.write(b"display-message -p ready\n")
        while not any(line.startswith(b"ready") for line in self.replies.get(timeout=10)):
            pass

    def _read(self) -> None:
        block: list[bytes] | None = None
        for line in self.proc.stdout:
            if line.startswith(b"%begin"):
                block = []
            elif line.startswith((b"%end", b"%error")) and block is not None:
                self.replies.put(block)
                block = None
            elif block is not None:
                block.append(line)

    def command(self, text: str) -> list[bytes]:
        self.proc.stdin.write(text.encode() + b"\n")
        return self.replies.get(timeout=10)

    def status(self) -> bytes:
        """The status line as on screen now (b"" when the pane shows none)."""
        if self.poll == "row" and self.row is not None:
            got = self.command(f"capture-pane -p -t bench -S {self.row} -E {self.row}")
            if got and is_status(got[0]):
                return got[0]
        for i, line in enumerate(self.command("capture-pane -p -t bench")):
            if is_status(line):
                self.row = i
                return line
        self.row = None
        return b""

    def press(self, key: str, timeout: float = TIMEOUT_S) -> float | None:
        """Milliseconds from sending the key until the status line on screen has changed."""
        self.row = None  # found again (by one look at the whole pane) before the key is sent
        before = self.status()
        t0 = time.perf_counter()
        self.command(f"send-keys -t bench {key}")
        while time.perf_counter() - t0 < timeout:
            if self.status() != before:
                return (time.perf_counter() - t0) * 1e3
            time.sleep(0.002)
        return None

    def close(self) -> None:
        self.proc.terminate()


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--movie", help="a movie to review (default: the bundled sample, scanned)")
    ap.add_argument("--rounds", type=int, default=40, help="presses per kind of key")
    ap.add_argument("--python", default=f"{sys.executable} -m reviewer",
                    help="command that runs reviewer (default: %(default)s)")
    ap.add_argument("--poll", choices=("row", "pane"), default="row",
                    help="what the probe captures on each look: the status line's row (default) or "
                         "the whole pane (the first probe's way, ~9 ms of tmux's time a look)")
    args = ap.parse_args(argv)
    if shutil.which("tmux") is None:
        print("tmux is not installed")
        return 1
    work = tempfile.mkdtemp(prefix="bench-keys-")
    cache_given = "REVIEWER_CACHE_DIR" in os.environ
    env = {"REVIEWER_CACHE_DIR": os.environ.get("REVIEWER_CACHE_DIR", f"{work}/cache"),
           "REVIEWER_DATA_DIR": f"{work}/data", "REVIEWER_CONFIG_DIR": f"{work}/config"}
    os.environ.update(env)
    runner = shlex.split(args.python)
    if args.movie:
        movie = args.movie
    else:
        from sample_movies.growth import ensure_sample

        movie = str(ensure_sample())
    subprocess.run([*runner, "scan", movie], check=True, capture_output=True)
    sock = f"bench-keys-{uuid.uuid4().hex[:8]}"
    cmd = " ".join(["exec", "env", *(f"{k}={shlex.quote(v)}" for k, v in env.items()),
                    *map(shlex.quote, runner), "review", "--session", f"{work}/session",
                    shlex.quote(movie)])
    results: dict[str, list[float]] = {}
    failures: dict[str, int] = {}
    pid = None
    try:
        tmux(sock, "new-session", "-d", "-s", "bench", "-x", "200", "-y", "60", cmd)
        pid = int(tmux(sock, "display-message", "-p", "-t", "bench", "#{pane_pid}").strip())
        end = time.monotonic() + 30
        while "pending" not in status(sock) and time.monotonic() < end:
            time.sleep(0.05)
        watcher = Probe(sock, args.poll)
        watcher.press("n")
        for kind, keys in ROUNDS.items():
            samples = []
            failures[kind] = 0
            for i in range(args.rounds):
                ms = watcher.press(keys[i % len(keys)])
                if ms is None:  # no repaint within the timeout: a failure, at the timeout value
                    failures[kind] += 1
                    ms = TIMEOUT_S * 1e3
                samples.append(ms)
            results[kind] = samples
        watcher.press("q")
        gone(pid, 10.0)  # the terminal stays until the review has quit (it saves on the way out)
        watcher.close()
    finally:
        subprocess.run(["tmux", "-L", sock, "kill-server"], capture_output=True)
        exited = reap(pid)
        shutil.rmtree(work, ignore_errors=True)
    everything = [ms for s in results.values() for ms in s]
    print(f"key-to-repaint in a 200x60 tmux pane, {movie}; the probe captures "
          f"{'the status row' if args.poll == 'row' else 'the whole pane'} on each look")
    print(f"reviewer cache: {'given by REVIEWER_CACHE_DIR' if cache_given else 'a new folder'}, "
          "filled by the scan just before: the review opens warm (scan reused)")
    print(f"presses with no repaint within {TIMEOUT_S:g} s are failures, counted in the median and "
          f"p90 at {TIMEOUT_S * 1e3:.0f} ms")
    for kind, s in results.items():
        if s:
            print(f"  {kind:<26} n={len(s):3d}  median {np.median(s):6.1f} ms  "
                  f"p90 {np.percentile(s, 90):6.1f} ms  failures {failures[kind]}")
    if not everything:
        print("no key was pressed")
        return 1
    med = float(np.median(everything))
    lost = sum(failures.values())
    print(f"  {'all keys':<26} n={len(everything):3d}  median {med:6.1f} ms  "
          f"p90 {np.percentile(everything, 90):6.1f} ms  failures {lost}")
    print(f"median / target ({TARGET_MS:g} ms) = {med / TARGET_MS:.2f}")
    if not exited:
        print("the review had not exited 10 s after q, nor 5 s after its terminal closed: killed")
    return 1 if lost or not exited else 0


if __name__ == "__main__":
    sys.exit(main())
