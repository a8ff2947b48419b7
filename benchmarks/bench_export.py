"""Export of 100,000 events, and what one journaled action costs.

Prints: seeding, reopening (replay), compaction and export times for N events; the export time next
to pandas.DataFrame.to_csv of the same rows (a reference writer, measured in the same run); and the
time of one decision (journal line written + fsynced) next to the same write without fsync.

    python benchmarks/bench_export.py [--events 100000] [--actions 200] [--dir DIR]
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from reviewer.store import journal as journal_mod
from reviewer.store.export import export_events
from reviewer.store.session import Session


def _candidates(n: int, rng: np.random.Generator) -> pd.DataFrame:
    frames = np.sort(rng.integers(0, 20 * n, n))
    kinds = rng.choice(["step", "transient", "global"], n, p=[0.8, 0.15, 0.05])
    return pd.DataFrame({"frame": frames, "frame_end": pd.array([None] * n, dtype="Int64"),
                         "time_s": frames / 400.0, "kind": kinds, "score": rng.gamma(3, 2, n),
                         "x": rng.uniform(0, 512, n), "y": rng.uniform(0, 512, n)})


def _timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=int, default=100_000)
    ap.add_argument("--actions", type=int, default=200)
    ap.add_argument("--dir", default=None, help="where to put the session (default: a temp folder)")
    args = ap.parse_args()
    if args.dir:
        run(args, Path(args.dir))
    else:
        with tempfile.TemporaryDirectory(prefix="bench-export-") as tmp:
            run(args, Path(tmp))


def run(args: argparse.Namespace, root: Path) -> None:
    rng = np.random.default_rng(7)
    movie = root / "bench.tif"
    movie.write_bytes(b"x")
    meta = {"frames": 20 * args.events, "fps": 400.0, "detector": {"sensitivity": 1.0}}
    s = Session.open(movie, "bench", meta=meta)
    cands = _candidates(args.events, rng)
    _, t_seed = _timed(lambda: s.seed(cands))  # includes the compaction that follows seeding
    ids = [e.event_id for e in s.events]
    pick = rng.choice(len(ids), args.events // 3, replace=False)
    for k, i in enumerate(pick[: args.actions]):
        (s.accept if k % 2 else s.reject)(ids[i])  # warm-up
    t0 = time.perf_counter()
    for k, i in enumerate(pick[args.actions: 2 * args.actions]):
        s.accept(ids[i], label="layer") if k % 2 else s.reject(ids[i])
    per_action = (time.perf_counter() - t0) / args.actions
    real_fsync = journal_mod.os.fsync
    journal_mod.os.fsync = lambda fd: None
    try:
        t0 = time.perf_counter()
        for i in pick[2 * args.actions: 3 * args.actions]:
            s.accept(ids[i])
        per_action_nosync = (time.perf_counter() - t0) / args.actions
    finally:
        journal_mod.os.fsync = real_fsync
    s.set_position(12345)
    s._journal.close()  # crash without compaction: reopen replays the journal
    s._lock.release()
    s, t_open = _timed(lambda: Session.open(movie, "bench", meta=meta))
    _, t_compact = _timed(s.compact)
    out = root / "bench.events.csv"
    _, t_export = _timed(lambda: export_events(s, out))
    rows = pd.DataFrame([e.as_row() for e in s.events])
    _, t_pandas = _timed(lambda: rows.to_csv(root / "pandas.csv", index=False))
    size = out.stat().st_size
    s.close()
    n = args.events
    print(f"events: {n:,}   session folder: {s.folder}")
    print(f"seed (+ first compaction): {t_seed:.2f} s")
    print(f"reopen with {3 * args.actions} journaled actions to replay: {t_open:.2f} s")
    print(f"compaction: {t_compact:.2f} s")
    print(f"export of {n:,} events: {t_export:.2f} s ({size / 2**20:.1f} MiB, "
          f"{n / t_export:,.0f} events/s)")
    print(f"pandas.DataFrame.to_csv of the same rows: {t_pandas:.2f} s  "
          f"(export / pandas = {t_export / t_pandas:.2f})")
    print(f"one decision, journaled + fsynced: {per_action * 1e3:.2f} ms; without fsync "
          f"{per_action_nosync * 1e3:.3f} ms (fsync share {1 - per_action_nosync / per_action:.0%})")
    print(f"file system: {os.statvfs(root).f_bsize} B blocks at {root}")


if __name__ == "__main__":
    main()
