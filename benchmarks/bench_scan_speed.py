"""Scan speed against a raw read of the same file, and peak anonymous memory.

    python benchmarks/bench_scan_speed.py [--frames 50000] [--size 128] [--dir /tmp]

Writes a .npy movie (uint16 Poisson counts with a few steps), then alternates, in one process,
--rounds (5) rounds of (a) a raw memory-mapped pass summing every frame (64-frame blocks), (b) a full scan
(open_movie + scan_movie) and (c) the movie layer's block reads alone (the scan's floor). Prints
each time, the median ratio scan/raw (warm cache: the raw pass runs first) and the peak anonymous
memory during the scans. Memory: /proc/self/status RssAnon
sampled every 10 ms by a thread (anonymous pages only: the memory-mapped file's page cache is
RssFile and does not count); VmHWM is printed too but includes file-backed pages.

Caches: the scan runs in-process (open_movie + scan_movie), which neither reads nor writes the
reviewer cache, so every round computes every frame (fresh); the operating system's page cache is
warm for all three passes (the raw pass runs first). Both are printed with the results.
"""

from __future__ import annotations

import argparse
import statistics
import threading
import time
from pathlib import Path

import numpy as np

from reviewer.detect import DetectSettings, scan_movie
from reviewer.movie import open_movie


def status_kb(key: str) -> int:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return int(line.split()[1])
    return 0


class AnonPeak:
    def __init__(self) -> None:
        self.peak = 0
        self.stop = threading.Event()
        self.thread = threading.Thread(target=self._run, daemon=True)

    def _run(self) -> None:
        while not self.stop.is_set():
            self.peak = max(self.peak, status_kb("RssAnon"))
            time.sleep(0.01)

    def __enter__(self):
        self.thread.start()
        return self

    def __exit__(self, *exc) -> None:
        self.stop.set()
        self.thread.join()


def write(path: Path, n: int, size: int) -> None:
    rng = np.random.default_rng(0)
    out = np.lib.format.open_memmap(path, mode="w+", dtype=np.uint16, shape=(n, size, size))
    lam = np.full((size, size), 40.0)
    for s in range(0, n, 1024):
        if s and s % 8192 == 0:  # a new dark row every 8192 frames
            r = size // 2 + s // 8192
            lam[r % size, size // 4: 3 * size // 4] *= 0.55
        k = min(1024, n - s)
        out[s: s + k] = rng.poisson(lam, size=(k, size, size))
    out.flush()
    del out


def raw_pass(path: Path) -> float:
    m = np.load(path, mmap_mode="r")
    t0 = time.perf_counter()
    sums = np.empty(len(m), np.uint64)
    for s in range(0, len(m), 64):
        sums[s: s + 64] = m[s: s + 64].sum(axis=(1, 2), dtype=np.uint64)
    return time.perf_counter() - t0


def movie_read_pass(path: Path) -> float:
    """The floor the scan cannot go below: reading every block through the movie layer (the same
    open_movie + iter_blocks the scan uses), doing nothing with it."""
    t0 = time.perf_counter()
    movie = open_movie(path, fps=400.0)
    for _ in movie.iter_blocks(DetectSettings().read_block):
        pass
    movie.close()
    return time.perf_counter() - t0


def scan_pass(path: Path) -> tuple[float, int]:
    t0 = time.perf_counter()
    movie = open_movie(path, fps=400.0)
    res = scan_movie(movie, DetectSettings())
    movie.close()
    return time.perf_counter() - t0, len(res.candidates)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--frames", type=int, default=50000)
    ap.add_argument("--size", type=int, default=128)
    ap.add_argument("--dir", type=Path, default=Path("/tmp"))
    ap.add_argument("--rounds", type=int, default=5)
    a = ap.parse_args()
    path = a.dir / f"bench_scan_{a.frames}x{a.size}.npy"
    if not path.is_file():
        write(path, a.frames, a.size)
    print(f"movie: {path} ({path.stat().st_size / 1e9:.2f} GB, {a.frames} frames {a.size}x{a.size})")
    raw_pass(path)  # warm the page cache
    print("reviewer cache: not used (scan_movie in-process computes every frame, every round: "
          "fresh); OS page cache: warm (the file was read once before the rounds)")
    ratios, floors = [], []
    base_anon = status_kb("RssAnon")
    with AnonPeak() as mem:
        for r in range(a.rounds):
            t_raw = raw_pass(path)
            t_scan, n_cand = scan_pass(path)
            t_read = movie_read_pass(path)
            ratios.append(t_scan / t_raw)
            floors.append(t_read / t_raw)
            print(f"round {r + 1}: raw {t_raw:.2f} s ({a.frames / t_raw:,.0f} frames/s)  "
                  f"scan {t_scan:.2f} s ({a.frames / t_scan:,.0f} frames/s)  ratio {t_scan / t_raw:.2f}"
                  f"  candidates {n_cand}  (movie-layer read alone {t_read / t_raw:.2f}x raw)")
    print(f"median scan/raw ratio: {statistics.median(ratios):.2f}  (target <= 3; reading the "
          f"blocks through the movie layer alone: {statistics.median(floors):.2f})")
    print(f"peak anonymous memory (RssAnon, sampled): {mem.peak / 1024:.0f} MB "
          f"(process baseline before the runs {base_anon / 1024:.0f} MB; target <= 300 MB)")
    print(f"VmHWM (includes file-backed mapped pages): {status_kb('VmHWM') / 1024:.0f} MB")


if __name__ == "__main__":
    main()
