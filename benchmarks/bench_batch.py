"""`reviewer batch` on Dask: speed-up from 1 to 2 workers, one long movie whole vs split, the
engine's per-movie overhead, peak memory per worker.

    python benchmarks/bench_batch.py [--frames 100000] [--long 1000000] [--size 32] [--rounds 3]

Writes, into a temporary folder (--dir), 4 movies of --frames frames and one of --long frames
(uint8 .npy, Poisson counts ~40 over a fixed texture, a local step every 5000 frames) and 20 tiny
ones (200 frames). Starts two local Dask clusters (1 and 2 worker processes, one thread each) and
then, --rounds times, side by side in one run:
  raw      the 4 movies read once through the movie layer (open_movie + block reads), this process;
  1 / 2    the 4 movies scanned by reviewer.batch (job.scan_path through engine.run) on 1 and on 2
           workers;
  whole / split   the long movie on the 2-worker cluster, as one task (parts=1) and split over
           both workers (parts=2, batch/parts.py);
  direct / engine the 20 tiny movies scanned in this process one after another, and through the
           engine on 1 worker: (engine − direct) / 20 is the engine's overhead per movie.
Every timed scan has a fresh cache folder (REVIEWER_CACHE_DIR set on the workers before it) and
force=True: nothing is reused. The files are in the page cache for every pass (written just before).
Peak memory: each worker's RssAnon (anonymous pages: the memory-mapped movie and features are
file pages and do not count) sampled every 20 ms from /proc, minus its value before the run.
Prints the medians, the ratios and the load (`os.getloadavg`) before and after.

Measured 2026-12-03 on a 2-core machine shared with six other sessions (defaults, medians of 3;
load average before → after each run):
  run  load       raw    1 worker  2 workers  speed-up | long whole  split  speed-up | overhead
  A    5.0 → 6.9  0.33 s  4.83 s   2.91 s     1.66x    | 16.24 s     9.81 s  1.65x    |  9 ms
  B    4.6 → 7.2  0.75 s  8.82 s   7.04 s     1.25x    | 24.42 s    18.65 s  1.31x    |  5 ms
  C    3.2 → 7.3  0.85 s  11.04 s  6.55 s     1.69x    | 22.13 s    17.91 s  1.24x    | 83 ms
  D    0.4 → 1.7  0.30 s  4.89 s   2.32 s     2.11x    | 11.86 s     5.94 s  2.00x    |  1 ms
(D: the machine otherwise idle.)
One scan uses ~1.1 cores (its read-ahead thread), so 2 workers on 2 cores can give at most ~1.8x;
the other sessions' load takes the rest (B: the raw read itself was 2.3x slower than in A). Peak
RssAnon per worker: +7..12 MiB scanning the 4 movies; the long movie +72..74 MiB whole, and split
+25..81 MiB on each worker (the one stitching computes the whole-movie features, the one running
the job proposes the candidates: the same per-frame temporaries as the end of one scan).
"""

from __future__ import annotations

import argparse
import logging
import os
import statistics
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

from reviewer.batch import engine
from reviewer.batch.job import scan_path
from reviewer.detect import DetectSettings
from reviewer.movie import open_movie

POOL = 8192  # frames of Poisson noise drawn once per movie and cycled (drawing 10^9 is slow)


def write_movie(path: Path, n: int, size: int, seed: int) -> None:
    rng = np.random.default_rng(seed)
    texture = 40.0 * (1 + 0.12 * rng.standard_normal((size, size))).clip(0.5, None)
    pool = np.minimum(rng.poisson(np.broadcast_to(texture, (min(n, POOL), size, size))), 255)
    pool = pool.astype(np.uint8)
    out = np.lib.format.open_memmap(path, mode="w+", dtype=np.uint8, shape=(n, size, size))
    p = size // 4
    for a in range(0, n, len(pool)):
        b = min(n, a + len(pool))
        block = np.roll(pool, int(rng.integers(len(pool))), axis=0)[: b - a]
        on = ((np.arange(a, b) // 5000) % 2).astype(bool)  # a local step every 5000 frames
        block[on, p: 2 * p, p: 2 * p] = np.minimum(block[on, p: 2 * p, p: 2 * p] * 1.2, 255)
        out[a:b] = block
    out.flush()
    del out


def warm(client) -> None:
    """Imports done on every worker before anything is timed."""
    def imports() -> None:
        import reviewer.batch.job  # noqa: F401
        import reviewer.batch.parts  # noqa: F401
        import reviewer.detect.split  # noqa: F401
        import reviewer.store.table  # noqa: F401

    client.run(imports)


def raw_read(paths: list[Path]) -> float:
    t0 = time.perf_counter()
    total = 0
    for p in paths:
        with open_movie(p, show_progress=False) as m:
            for _, block in m.iter_blocks(64, reuse=True):
                total += int(block.sum(dtype=np.uint64))
    return time.perf_counter() - t0


def rss_anon_kb(pid: int) -> int:
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("RssAnon:"):
                return int(line.split()[1])
    except OSError:
        pass
    return 0


class Peaks:
    """Peak RssAnon of the given processes above their value at start, sampled by a thread."""

    def __init__(self, pids: list[int]) -> None:
        self.pids = pids
        self.base = {p: rss_anon_kb(p) for p in pids}
        self.peak = dict(self.base)
        self.stop = threading.Event()
        self.th = threading.Thread(target=self._poll, daemon=True)

    def _poll(self) -> None:
        while not self.stop.is_set():
            for p in self.pids:
                self.peak[p] = max(self.peak[p], rss_anon_kb(p))
            time.sleep(0.02)

    def __enter__(self) -> Peaks:
        self.th.start()
        return self

    def __exit__(self, *exc) -> None:
        self.stop.set()
        self.th.join()

    def mib(self) -> list[tuple[float, float]]:
        """(peak above start, peak) per process, MiB."""
        return [((self.peak[p] - self.base[p]) / 1024, self.peak[p] / 1024) for p in self.pids]


def fresh_cache(client, root: Path) -> None:
    folder = tempfile.mkdtemp(dir=root, prefix="cache-")
    os.environ["REVIEWER_CACHE_DIR"] = folder
    client.run(os.environ.__setitem__, "REVIEWER_CACHE_DIR", folder)


def on_engine(client, paths: list[Path], parts: int, root: Path, pids) -> tuple[float, list]:
    settings = DetectSettings().to_dict()
    fresh_cache(client, root)
    rows: list = [None] * len(paths)
    with Peaks(pids) as peaks:
        t0 = time.perf_counter()
        engine.run(client, [(str(p), settings, True, None, parts) for p in paths], scan_path,
                   lambda i, r: None, rows)
        dt = time.perf_counter() - t0
    bad = [r for r in rows if r["status"] != "done"]
    if bad:
        raise SystemExit(f"scan failed: {bad[0]['error']}")
    return dt, peaks.mib()


def direct(paths: list[Path], root: Path) -> float:
    settings = DetectSettings().to_dict()
    os.environ["REVIEWER_CACHE_DIR"] = tempfile.mkdtemp(dir=root, prefix="cache-")
    t0 = time.perf_counter()
    for p in paths:
        row = scan_path(str(p), settings, True, None)
        if row["status"] != "done":
            raise SystemExit(row["error"])
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--frames", type=int, default=100_000, help="frames of each of the 4 movies")
    ap.add_argument("--long", type=int, default=1_000_000, help="frames of the long movie")
    ap.add_argument("--size", type=int, default=32, help="frame side, px")
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--dir", default=None, help="where the movies go (default: a temporary folder)")
    a = ap.parse_args()
    import distributed

    root = Path(tempfile.mkdtemp(dir=a.dir, prefix="bench-batch-"))
    print(f"load before: {os.getloadavg()}; {os.cpu_count()} cores; folder {root}")
    t0 = time.perf_counter()
    four = [root / f"movie{i}.npy" for i in range(4)]
    for i, p in enumerate(four):
        write_movie(p, a.frames, a.size, seed=i)
    long = root / "long.npy"
    write_movie(long, a.long, a.size, seed=9)
    tiny = [root / f"tiny{i:02d}.npy" for i in range(20)]
    for i, p in enumerate(tiny):
        write_movie(p, 200, a.size, seed=100 + i)
    print(f"wrote 4 x {a.frames} + {a.long} + 20 x 200 frames of {a.size}^2 uint8 in "
          f"{time.perf_counter() - t0:.0f} s")
    clusters, clients, pids = {}, {}, {}
    for n in (1, 2):
        t0 = time.perf_counter()
        clusters[n] = distributed.LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                               dashboard_address=None,
                                               silence_logs=logging.ERROR)
        clients[n] = distributed.Client(clusters[n])
        logging.getLogger("distributed").setLevel(logging.ERROR)
        pids[n] = list(clients[n].run(os.getpid).values())
        warm(clients[n])
        print(f"cluster of {n} worker(s) started in {time.perf_counter() - t0:.1f} s")
    times: dict[str, list[float]] = {k: [] for k in
                                     ("raw", "1", "2", "whole", "split", "direct", "engine")}
    mem: dict[str, list] = {"1": [], "2": [], "whole": [], "split": []}
    on_engine(clients[2], tiny[:4], 1, root, pids[2])  # untimed: the first scan on each worker
    on_engine(clients[1], tiny[:2], 1, root, pids[1])
    for r in range(a.rounds):
        times["raw"].append(raw_read(four))
        for n in (1, 2):
            dt, m = on_engine(clients[n], four, 1, root, pids[n])
            times[str(n)].append(dt)
            mem[str(n)].append(m)
        for key, parts in (("whole", 1), ("split", 2)):
            dt, m = on_engine(clients[2], [long], parts, root, pids[2])
            times[key].append(dt)
            mem[key].append(m)
        times["direct"].append(direct(tiny, root))
        times["engine"].append(on_engine(clients[1], tiny, 1, root, pids[1])[0])
        print(f"round {r + 1}: " + ", ".join(f"{k} {v[-1]:.2f} s" for k, v in times.items()))
    med = {k: statistics.median(v) for k, v in times.items()}
    print(f"\nmedians of {a.rounds} rounds (seconds): " +
          ", ".join(f"{k} {v:.2f}" for k, v in med.items()))
    print(f"4 movies x {a.frames} frames: 1 worker {med['1']:.2f} s, 2 workers {med['2']:.2f} s: "
          f"speed-up {med['1'] / med['2']:.2f}x; raw read of the same files {med['raw']:.2f} s "
          f"(1 worker {med['1'] / med['raw']:.1f}x raw, 2 workers {med['2'] / med['raw']:.1f}x "
          "raw)")
    print(f"long movie {a.long} frames: whole {med['whole']:.2f} s, split over 2 workers "
          f"{med['split']:.2f} s: speed-up {med['whole'] / med['split']:.2f}x "
          f"({a.long / med['whole']:,.0f} and {a.long / med['split']:,.0f} frames/s)")
    print(f"engine overhead per movie: {(med['engine'] - med['direct']) / len(tiny) * 1e3:.0f} ms "
          f"(20 tiny movies: direct {med['direct']:.2f} s, on the engine {med['engine']:.2f} s)")
    for key, runs in mem.items():
        worst = [max(run[w][0] for run in runs) for w in range(len(runs[0]))]
        total = [max(run[w][1] for run in runs) for w in range(len(runs[0]))]
        print(f"peak RssAnon per worker, {key}: " + ", ".join(
            f"+{d:.0f} MiB (peak {t:.0f} MiB)" for d, t in zip(worst, total, strict=True)))
    for n in (1, 2):
        clients[n].close()
        clusters[n].close()
    print(f"load after: {os.getloadavg()}")


if __name__ == "__main__":
    main()
