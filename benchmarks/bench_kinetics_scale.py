"""`reviewer kinetics` on long event tables: wall time and peak memory of the real command.

Writes a table of N accepted events (Poisson times at 400 frames/s, places spread over a 4096 x 4096
field in a few hundred clusters) with its JSON sidecar, then runs `reviewer kinetics` as a subprocess
(plain, `--by region`, `--plot`) and reports each run's wall time and the child's peak resident memory
(getrusage of the finished child). Next to it, in the same run, the time pandas.read_csv takes to
read the same file (a reference reader), so the numbers are ratios to reading the table.

    python benchmarks/bench_kinetics_scale.py [--events 1000000] [--repeats 3] [--dir DIR]

Targets (issue 14): 10^6 events in under 10 s and under 1 GB.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

FPS = 400.0


def write_table(folder: Path, n: int, seed: int = 1) -> Path:
    rng = np.random.default_rng(seed)
    frames = np.cumsum(1 + rng.poisson(20, n))
    centres = rng.uniform(0, 4096, (300, 2))
    which = rng.integers(0, len(centres), n)
    xy = centres[which] + rng.normal(0, 6, (n, 2))
    df = pd.DataFrame({
        "event_id": [f"e{i:07d}" for i in range(n)], "frame": frames, "time_s": frames / FPS,
        "frame_end": "", "kind": "step", "score": np.round(rng.gamma(3, 2, n), 3),
        "x": np.round(xy[:, 0], 2), "y": np.round(xy[:, 1], 2), "status": "accepted",
        "label": "layer", "note": "", "source": "detector", "reviewed_at": "2025-01-01T00:00:00Z"})
    path = folder / "events.csv"
    df.to_csv(path, index=False, lineterminator="\r\n")
    n_frames = int(frames[-1]) + 100
    (folder / "events.json").write_text(json.dumps(
        {"movie": {"frames": n_frames, "fps": FPS, "duration_s": n_frames / FPS,
                   "width": 4096, "height": 4096}}))
    return path


def run_child(argv: list[str]) -> tuple[float, float, int]:
    """(seconds, peak RSS in MiB, exit code) of one `reviewer` run in a fresh process."""
    code = ("import resource, sys, time\n"
            "from reviewer.cli import main\n"
            "t0 = time.perf_counter(); rc = main(sys.argv[1:]); dt = time.perf_counter() - t0\n"
            "peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024\n"
            "sys.stderr.write(f'@@ {dt} {peak} {rc}\\n')\n")
    done = subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True)
    line = [ln for ln in done.stderr.splitlines() if ln.startswith("@@ ")]
    if not line:
        raise SystemExit(f"run failed: {done.stderr.strip()[-2000:]}")
    dt, peak, rc = line[-1].split()[1:]
    return float(dt), float(peak), int(rc)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=int, default=1_000_000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--dir", default=None)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory(prefix="bench-kinetics-", dir=args.dir) as tmp:
        folder = Path(tmp)
        path = write_table(folder, args.events)
        size = os.path.getsize(path) / 2**20
        print(f"{args.events} events, table {size:.0f} MiB")
        reads = []
        for _ in range(args.repeats):
            t0 = time.perf_counter()
            pd.read_csv(path)
            reads.append(time.perf_counter() - t0)
        read_s = statistics.median(reads)
        print(f"pandas.read_csv of the table (reference): median {read_s:.2f} s")
        cases = {"plain --json": ["--json"], "--by region --json": ["--by", "region", "--json"],
                 "--plot": ["--plot", str(folder / "k.png")]}
        for name, extra in cases.items():
            times, peaks = [], []
            for _ in range(args.repeats):
                dt, peak, rc = run_child(["kinetics", str(path), *extra])
                if rc != 0:
                    raise SystemExit(f"{name}: exit {rc}")
                times.append(dt)
                peaks.append(peak)
            t, p = statistics.median(times), max(peaks)
            print(f"{name:20s} median {t:6.2f} s ({t / read_s:4.1f}x read_csv), "
                  f"peak RSS {p:6.0f} MiB  [{'ok' if t < 10 and p < 1024 else 'OVER TARGET'}]")


if __name__ == "__main__":
    main()
