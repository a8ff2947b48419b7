"""Key-to-repaint latency of the review UI in a real 200x60 tmux pane (target: median <= 50 ms).

Opens `reviewer review` on a scanned movie (the bundled sample unless --movie is given) in a private
tmux server. A tmux control-mode client sends each key and then asks tmux for the pane's content every
2 ms until the status line (drawn below the frame, so written after it) shows the change: one sample
is the time from sending the key to that moment, tmux's relaying included. A press that shows no
change within the timeout (5 s) counts as a failure: it enters the median and the 90th percentile at
the timeout value, the failures are counted and printed, and the exit status is 1 when there were
any. Prints median and 90th percentile per kind of key and overall, and the overall median's ratio
to the 50 ms target.

Caches: the movie is scanned once before the UI opens, into REVIEWER_CACHE_DIR (a new folder unless
the variable is set), so the review opens on a warm cache (the scan is reused, as a user's second
look is); which one is printed. Frames are read through the operating system's page cache.

    python benchmarks/bench_keys.py [--movie MOVIE] [--rounds 40]
"""

from __future__ import annotations

import argparse
import os
import queue
import shlex
import shutil
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


def status(sock: str) -> str:
    for line in tmux(sock, "capture-pane", "-p", "-t", "bench").splitlines():
        if line.startswith(" frame ") and "│" in line:
            return line
    return ""


class Probe:
    """One tmux control-mode client (with the pane's output switched off) that sends the keys and
    asks for capture-pane over the same pipe: polling costs one round trip in the tmux server, not a
    new process per look, so the probe takes little CPU from the app on a small machine."""

    def __init__(self, sock: str) -> None:
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
        for line in self.command("capture-pane -p -t bench"):
            if line.startswith(b" frame ") and "│".encode() in line:
                return line
        return b""

    def press(self, key: str, timeout: float = TIMEOUT_S) -> float | None:
        """Milliseconds from sending the key until the status line on screen has changed."""
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
    try:
        tmux(sock, "new-session", "-d", "-s", "bench", "-x", "200", "-y", "60", cmd)
        end = time.monotonic() + 30
        while "pending" not in status(sock) and time.monotonic() < end:
            time.sleep(0.05)
        watcher = Probe(sock)
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
        watcher.close()
    finally:
        subprocess.run(["tmux", "-L", sock, "kill-server"], capture_output=True)
        shutil.rmtree(work, ignore_errors=True)
    everything = [ms for s in results.values() for ms in s]
    print(f"key-to-repaint in a 200x60 tmux pane, {movie}")
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
    return 1 if lost else 0


if __name__ == "__main__":
    sys.exit(main())
