"""Scan time against a raw read of the same file, and peak memory, across frame sizes.

    python benchmarks/bench_scan_sizes.py [--sizes 128:20000,512:1000,2048:300,4096:100]
                                          [--rounds 3] [--dir /tmp/reviewer_bench_sizes]
                                          [--scan-args='--dim-fronts'] [--patterns]

Per size (SIDE:FRAMES) a uint16 .npy movie is written once (Gaussian-approximated shot noise at
20 counts/px on a textured scene, one dark patch appearing halfway). Then, alternating, --rounds
rounds of
- raw read: a memory-mapped pass summing every frame, 64 frames (at most 32 MiB) at a time (the
  same definition as benchmarks/bench_scan_speed.py); a plain readinto of the file's bytes is timed
  too and printed beside it;
- scan: `reviewer scan MOVIE --force -o CSV` run through reviewer.cli.main in a fresh subprocess
  with a fresh, empty REVIEWER_CACHE_DIR, timed inside the child around main() (interpreter start
  and library imports excluded; everything from opening the file to the written CSV and cache,
  including the one-off noise calibration, included).
The child samples its own /proc/self/status RssAnon every 5 ms (anonymous memory: the movie's
memory-mapped pages are file-backed and do not count) and reports VmHWM too.
With --patterns each round also times `reviewer scan --patterns` (the same way, right after the
plain scan) and prints its row beside the plain one.
Prints, per size: frames, raw-read s, readinto s, scan s, ratio scan/raw (median of rounds), the
scan's CPU time (all its threads) over the raw read (what the ratio would be on one free core: on a
shared machine the wall-time ratio moves with the other load), the peak anonymous MB (max of
rounds) and that each timed scan started from an empty cache.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

DOSE = 20.0


def write(path: Path, n: int, side: int) -> None:
    rng = np.random.default_rng(side)
    yy, xx = np.mgrid[:side, :side].astype(np.float32)
    scene = DOSE * (1.0 + 0.15 * np.sin(xx / 7.0) * np.cos(yy / 11.0)).astype(np.float32)
    tmp = path.with_suffix(".tmp.npy")
    out = np.lib.format.open_memmap(tmp, mode="w+", dtype=np.uint16, shape=(n, side, side))
    p = max(8, side // 16)
    after = scene.copy()
    after[side // 3: side // 3 + p, side // 3: side // 3 + p] *= 0.6
    per = max(1, (1 << 24) // (side * side))  # frames generated at a time
    for t in range(0, n, per):
        k = min(per, n - t)
        lam = np.where((np.arange(t, t + k) >= n // 2)[:, None, None], after, scene)
        noise = rng.standard_normal((k, side, side), dtype=np.float32)
        out[t: t + k] = np.clip(np.rint(lam + np.sqrt(lam) * noise), 0, 65535)
    out.flush()
    del out
    os.replace(tmp, path)


def raw_pass(path: Path) -> float:
    m = np.load(path, mmap_mode="r")
    per = max(1, min(64, (32 << 20) // (m[0].nbytes or 1)))
    t0 = time.perf_counter()
    sums = np.empty(len(m), np.uint64)
    for s in range(0, len(m), per):
        sums[s: s + per] = m[s: s + per].sum(axis=(1, 2), dtype=np.uint64)
    return time.perf_counter() - t0


def readinto_pass(path: Path) -> float:
    buf = bytearray(32 << 20)
    view = memoryview(buf)
    t0 = time.perf_counter()
    with open(path, "rb", buffering=0) as f:
        while f.readinto(view):
            pass
    return time.perf_counter() - t0


def status_kb(key: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1])
    return 0


def child(movie: str, out_csv: str, *extra: str) -> None:
    """Runs in the fresh subprocess: one `reviewer scan`, timed, with sampled RssAnon. The modules
    the command imports lazily (the movie readers among them) are imported before the clock starts
    (interpreter start-up and imports are not part of the scan; with PYTHONDONTWRITEBYTECODE set
    they are compiled on every start)."""
    import pandas  # noqa: F401
    import pandas.io.formats.csvs  # noqa: F401
    import scipy.special  # noqa: F401
    import tifffile  # noqa: F401

    import reviewer.commands.scan  # noqa: F401
    import reviewer.detect  # noqa: F401
    import reviewer.movie  # noqa: F401
    import reviewer.paths  # noqa: F401
    import reviewer.progress  # noqa: F401
    import reviewer.store.events  # noqa: F401
    import reviewer.store.table  # noqa: F401
    from reviewer.cli import main

    cache = Path(os.environ["REVIEWER_CACHE_DIR"])
    fresh = not any(cache.iterdir()) if cache.is_dir() else True
    peak = [status_kb("RssAnon")]
    base = peak[0]
    stop = threading.Event()

    def sample() -> None:
        while not stop.is_set():
            peak[0] = max(peak[0], status_kb("RssAnon"))
            time.sleep(0.005)

    th = threading.Thread(target=sample, daemon=True)
    th.start()
    t0, c0 = time.perf_counter(), time.process_time()
    code = main(["scan", movie, "--force", "-o", out_csv, *extra])
    seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    stop.set()
    th.join()
    peak[0] = max(peak[0], status_kb("RssAnon"))
    print(json.dumps({"code": code, "seconds": seconds, "cpu": cpu, "anon_mb": peak[0] / 1024,
                      "base_mb": base / 1024, "hwm_mb": status_kb("VmHWM") / 1024,
                      "fresh": fresh}))


def scan_once(path: Path, extra: list[str]) -> dict:
    with tempfile.TemporaryDirectory(prefix="bench_sizes_cache_") as cache:
        env = dict(os.environ, REVIEWER_CACHE_DIR=cache)
        csv = str(Path(cache) / "out.candidates.csv")
        r = subprocess.run([sys.executable, __file__, "--child", str(path), csv,
                            f"--scan-args={' '.join(extra)}"], env=env,
                           capture_output=True, text=True, check=False)
        lines = [ln for ln in r.stdout.splitlines() if ln.startswith("{")]
        if r.returncode or not lines:
            raise SystemExit(f"scan of {path} failed:\n{r.stderr[-2000:]}")
        return json.loads(lines[-1])


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="128:20000,512:1000,2048:300,4096:100")
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--dir", type=Path, default=Path("/tmp/reviewer_bench_sizes"))
    ap.add_argument("--scan-args", default="", metavar="ARGS",
                    help="more arguments for reviewer scan, e.g. --scan-args=--dim-fronts")
    ap.add_argument("--patterns", action="store_true", help="also time scan --patterns")
    ap.add_argument("--child", nargs=2, default=None, help=argparse.SUPPRESS)
    a = ap.parse_args()
    extra = a.scan_args.split()
    if a.child:
        child(*a.child, *extra)
        return
    a.dir.mkdir(parents=True, exist_ok=True)
    rows = []
    for spec in a.sizes.split(","):
        side, n = (int(v) for v in spec.split(":"))
        path = a.dir / f"sizes_{side}x{n}.npy"
        if not path.is_file():
            write(path, n, side)
        raw_pass(path)  # warm the page cache
        variants = [extra, [*extra, "--patterns"]] if a.patterns else [extra]
        raws, reads = [], []
        runs: list[list[dict]] = [[] for _ in variants]
        for _ in range(a.rounds):
            raws.append(raw_pass(path))
            reads.append(readinto_pass(path))
            for v, got in zip(variants, runs, strict=True):
                got.append(scan_once(path, v))
        for v, got in zip(variants, runs, strict=True):
            scans = [r["seconds"] for r in got]
            cpus = [r["cpu"] for r in got]
            row = dict(side=side, frames=n, gb=path.stat().st_size / 1e9, options=" ".join(v),
                       raw_s=statistics.median(raws), readinto_s=statistics.median(reads),
                       scan_s=statistics.median(scans),
                       ratio=statistics.median(s / r for s, r in zip(scans, raws, strict=True)),
                       cpu_ratio=statistics.median(c / r for c, r in zip(cpus, raws,
                                                                           strict=True)),
                       ratio_readinto=statistics.median(s / r for s, r in zip(scans, reads,
                                                                               strict=True)),
                       peak_anon_mb=max(r["anon_mb"] for r in got),
                       vmhwm_mb=max(r["hwm_mb"] for r in got),
                       fresh_cache=all(r["fresh"] for r in got))
            rows.append(row)
            print(f"{side}x{side} x {n} frames ({row['gb']:.2f} GB) {row['options'] or 'scan'}: "
                  f"raw {row['raw_s']:.2f} s, readinto {row['readinto_s']:.2f} s, "
                  f"scan {row['scan_s']:.2f} s, ratio {row['ratio']:.2f} (to readinto "
                  f"{row['ratio_readinto']:.2f}; CPU time {row['cpu_ratio']:.2f}), "
                  f"peak anon {row['peak_anon_mb']:.0f} MB (VmHWM {row['vmhwm_mb']:.0f} MB), "
                  f"fresh cache {row['fresh_cache']}", flush=True)
    print("targets: ratio <= 3 at 128, 512, 2048; peak anonymous memory <= 500 MB at every size")


if __name__ == "__main__":
    main()
