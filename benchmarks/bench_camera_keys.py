"""Key-to-repaint latency on camera-size movies (2048², 4096² uint16) in a real 200x60 tmux pane.

Targets: median <= 50 ms for a one-frame step, <= 150 ms in the what-changed view.

Per size (SIDE:FRAMES) a uint16 .npy movie is written once into a temporary folder (a textured scene
with Gaussian-approximated shot noise, a dark patch appearing halfway), scanned once into a fresh
REVIEWER_CACHE_DIR (so the review opens warm and no background scan competes), and reviewed in a
private tmux server. The presses use the control-mode probe of benchmarks/bench_keys.py (key sent,
then the status line's row asked for every 2 ms until it changed) and, since the status line alone
can change before a slow frame pane, the press ends only when the frame pane's cells (characters and
colours, from `capture-pane -e`) differ from before too: first a few sampled rows of the frame
(a row with colours costs the tmux server ~1.3 ms to capture), and only when none of them changed
all of the top 50 rows (~55 ms of tmux's time, during which it reads nothing the app writes: the
first version captured those 50 rows on every press and timed that too). In this order:
- "step": `right` pressed --rounds times in the frame view, each onto a frame never shown before;
- "change step": `t` into the what-changed view, then `right` --rounds times (each step slides the
  before / after windows onto a frame never read before);
- "view (t)": at --rounds/4 new places `t` three times (what changed, average, frame), then `right`.
Between presses the probe waits --pause seconds (a reviewer looks at a frame before the next key;
0 presses back to back). Presses with no repaint within 30 s count as failures at 30 s.
Peak memory: the review process's VmHWM and RssAnon from /proc just before it quits (the frames are
read from the page cache, which is not counted).

    python benchmarks/bench_camera_keys.py [--sizes 256:200,2048:200,4096:120] [--rounds 30] [--pause 0.3]
"""

from __future__ import annotations

import argparse
import os
import shlex
import shutil
import subprocess
import sys
import tempfile
import time
import uuid
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_keys import Probe, gone, reap, status, tmux  # noqa: E402

TIMEOUT_S = 30.0  # the main branch took seconds per step of the change view at 4096²
TARGETS_MS = {"step": 50.0, "change step": 150.0, "view (t)": 150.0}
DOSE = 400.0


def write(path: Path, n: int, side: int) -> None:
    """A uint16 movie: scene + noise from a small pool of noise frames, shifted per frame."""
    rng = np.random.default_rng(side)
    yy, xx = np.mgrid[:side, :side].astype(np.float32)
    scene = DOSE * (1.0 + 0.15 * np.sin(xx / 7.0) * np.cos(yy / 11.0))
    after = scene.copy()
    p = max(8, side // 16)
    after[side // 3: side // 3 + p, side // 3: side // 3 + p] *= 0.6
    pool = [rng.standard_normal((side, side), dtype=np.float32) for _ in range(3)]
    tmp = path.with_suffix(".tmp.npy")
    out = np.lib.format.open_memmap(tmp, mode="w+", dtype=np.uint16, shape=(n, side, side))
    for t in range(n):
        lam = after if t >= n // 2 else scene
        noise = np.roll(pool[t % 3], (t * 7) % side, axis=t % 2)
        out[t] = np.clip(np.rint(lam + np.sqrt(lam) * noise), 0, 65535)
    out.flush()
    del out
    os.replace(tmp, path)


FRAME_ROWS = 50  # the top rows of the 200x60 pane, where the frame view is
SAMPLED_ROWS = (12, 25, 37)  # inside the frame view's image at 200x60 (square movies fill its height)


def frame_cells(probe: Probe, rows: int = FRAME_ROWS) -> list[bytes]:
    """The top rows of the pane with their colours (the frame view's part; compared as bytes)."""
    return probe.command(f"capture-pane -e -p -t bench -E {rows - 1}")


def sampled_cells(probe: Probe) -> list[list[bytes]]:
    """A few rows of the frame view with their colours, one capture each."""
    return [probe.command(f"capture-pane -e -p -t bench -S {r} -E {r}") for r in SAMPLED_ROWS]


def press_until_drawn(probe: Probe, key: str) -> float | None:
    """Milliseconds from sending the key until the status line and the frame pane both changed.
    The status line's row is polled (cheap, text only); the coloured frame rows, costly for the
    tmux server to capture, are looked at only once the status line has changed: the sampled rows,
    and all of them only when no sampled row changed."""
    probe.row = None
    before = probe.status()
    sampled = sampled_cells(probe)
    cells = frame_cells(probe)
    t0 = time.perf_counter()
    probe.command(f"send-keys -t bench {key}")
    status_seen = False
    while time.perf_counter() - t0 < TIMEOUT_S:
        status_seen = status_seen or probe.status() != before
        if status_seen:
            if sampled_cells(probe) != sampled or frame_cells(probe) != cells:
                return (time.perf_counter() - t0) * 1e3
            time.sleep(0.005)
        time.sleep(0.002)
    return None


def memory_kb(pid: int) -> dict[str, int]:
    got = {}
    with open(f"/proc/{pid}/status") as fh:
        for line in fh:
            key, _, value = line.partition(":")
            if key in ("VmHWM", "RssAnon"):
                got[key] = int(value.split()[0])
    return got


def run_size(side: int, n: int, args, work: Path,
             runner: list[str]) -> tuple[dict[str, list[float]], dict, int]:
    movie = work / f"movie_{side}.npy"
    if not movie.exists():
        t0 = time.perf_counter()
        write(movie, n, side)
        print(f"  wrote {movie.name} ({n} x {side}² uint16) in {time.perf_counter() - t0:.0f} s",
              flush=True)
    env = {"REVIEWER_CACHE_DIR": tempfile.mkdtemp(dir=work, prefix="cache-"),
           "REVIEWER_DATA_DIR": str(work / "data"), "REVIEWER_CONFIG_DIR": str(work / "config")}
    t0 = time.perf_counter()
    subprocess.run([*runner, "scan", str(movie)], check=True, capture_output=True,
                   env={**os.environ, **env})
    print(f"  scanned in {time.perf_counter() - t0:.0f} s", flush=True)
    sock = f"bench-camera-{uuid.uuid4().hex[:8]}"
    extra = shlex.split(args.review_args)
    cmd = " ".join(["exec", "env", *(f"{k}={shlex.quote(v)}" for k, v in env.items()),
                    *map(shlex.quote, runner), "review", "--session",
                    shlex.quote(str(work / f"session-{uuid.uuid4().hex[:6]}")),
                    *map(shlex.quote, extra), shlex.quote(str(movie))])
    results: dict[str, list[float]] = {k: [] for k in TARGETS_MS}
    failures = 0
    mem: dict = {}
    pid = None
    try:
        tmux(sock, "new-session", "-d", "-s", "bench", "-x", "200", "-y", "60", cmd)
        end = time.monotonic() + 60
        while "pending" not in status(sock) and time.monotonic() < end:
            time.sleep(0.05)
        pid = int(tmux(sock, "display-message", "-p", "-t", "bench", "#{pane_pid}").strip())
        probe = Probe(sock)
        time.sleep(1.0)

        def press(kind: str | None, key: str) -> None:
            nonlocal failures
            time.sleep(args.pause)
            ms = press_until_drawn(probe, key)
            if ms is None:
                failures += 1
                ms = TIMEOUT_S * 1e3
            if kind is not None:
                results[kind].append(ms)

        for _ in range(args.rounds):
            press("step", "right")
        press(None, "t")
        for _ in range(args.rounds):
            press("change step", "right")
        press(None, "t")
        press(None, "t")  # back to the frame view
        for _ in range(max(1, args.rounds // 4)):
            for _ in range(3):
                press("view (t)", "t")
            press(None, "right")
        mem = memory_kb(pid)
        probe.press("q")
        gone(pid, 10.0)  # the terminal stays until the review has quit (it saves on the way out)
        probe.close()
    finally:
        subprocess.run(["tmux", "-L", sock, "kill-server"], capture_output=True)
        if not reap(pid):
            print("  the review had not exited 10 s after q, nor 5 s after its terminal closed: killed")
            failures += 1
    return results, mem, failures


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", default="256:200,2048:200,4096:120",
                    help="SIDE:FRAMES,... (default %(default)s; the small one shows the cost of a "
                         "repaint itself)")
    ap.add_argument("--rounds", type=int, default=30, help="presses per kind (default %(default)s)")
    ap.add_argument("--pause", type=float, default=0.3,
                    help="seconds between presses (default %(default)s)")
    ap.add_argument("--dir", default=None, help="folder for the movies (default: a new temporary one, "
                                                "removed at the end)")
    ap.add_argument("--review-args", default="", help="extra options for `reviewer review`")
    ap.add_argument("--run", action="append", metavar="LABEL=COMMAND",
                    help="a command that runs reviewer, measured side by side with the others (may "
                         f"be repeated; default: this tree, {sys.executable} -m reviewer)")
    args = ap.parse_args(argv)
    if shutil.which("tmux") is None:
        print("tmux is not installed")
        return 1
    keep = args.dir is not None
    work = Path(args.dir) if keep else Path(tempfile.mkdtemp(prefix="bench-camera-"))
    work.mkdir(parents=True, exist_ok=True)
    runs = [r.partition("=")[::2] for r in args.run] if args.run else [
        ("this tree", f"{sys.executable} -m reviewer")]
    lost = 0
    rows = []
    try:
        for spec in args.sizes.split(","):
            side, n = (int(v) for v in spec.split(":"))
            print(f"{side}² x {n} frames", flush=True)
            for label, command in runs:
                results, mem, failures = run_size(side, n, args, work, shlex.split(command))
                lost += failures
                rows.append((side, label, results, mem))
    finally:
        if not keep:
            shutil.rmtree(work, ignore_errors=True)
    print(f"key-to-repaint in a 200x60 tmux pane, {args.pause:g} s between presses, "
          f"{args.rounds} presses per kind; failures (no repaint in {TIMEOUT_S:g} s): {lost}")
    print(f"{'size':>6}  {'run':<12} {'kind':<12} {'median ms':>10} {'p90 ms':>8} {'target':>7} "
          f"{'ratio':>6}")
    for side, label, results, mem in rows:
        for kind, s in results.items():
            med = float(np.median(s))
            print(f"{side:>5}²  {label:<12} {kind:<12} {med:10.1f} {np.percentile(s, 90):8.1f} "
                  f"{TARGETS_MS[kind]:7.0f} {med / TARGETS_MS[kind]:6.2f}")
        print(f"{side:>5}²  {label:<12} peak memory: VmHWM {mem.get('VmHWM', 0) / 1024:.0f} MB, "
              f"RssAnon {mem.get('RssAnon', 0) / 1024:.0f} MB")
    return 1 if lost else 0


if __name__ == "__main__":
    sys.exit(main())
