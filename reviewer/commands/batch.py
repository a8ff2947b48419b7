"""`reviewer batch PATH...`: scan every movie found, on a Dask cluster, and tabulate the outcome."""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from reviewer.commands._common import positive_float


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "batch", help="scan many movies (files, frame folders, lists) on a Dask cluster",
        description="Find the movies under PATH... (files `reviewer info` opens, folders of "
                    "frames, or text files listing paths), scan each as `reviewer scan` does -- "
                    "each into its own cache and candidates file -- on Dask workers, and write a "
                    "summary table. Movies already scanned with the same settings are skipped "
                    "(--force rescans). Exit 0 when every movie succeeded, 1 when some failed.")
    p.add_argument("paths", nargs="+", metavar="PATH", help="movies, folders or lists of paths")
    p.add_argument("--recursive", action="store_true", help="look into sub-folders too")
    p.add_argument("-o", "--output", metavar="SUMMARY.csv", default=None,
                   help="the summary (default: batch-<UTC time>.csv in the current folder)")
    p.add_argument("--json", action="store_true", help="write the summary as JSON instead of CSV")
    p.add_argument("--false-alarms", type=positive_float, default=0.05, metavar="N",
                   help="expected false alarms per movie, as for `reviewer scan` (default 0.05)")
    p.add_argument("--sensitivity", type=positive_float, default=1.0,
                   help="deprecated, as for `reviewer scan`")
    p.add_argument("--fps", type=positive_float, default=None,
                   help="frames per second for every movie (overrides stored timing)")
    p.add_argument("--force", action="store_true", help="scan again even where a cached scan exists")
    where = p.add_mutually_exclusive_group()
    where.add_argument("--workers", type=int, default=None, metavar="N",
                       help="local worker processes (default: one per core)")
    where.add_argument("--scheduler", metavar="ADDRESS", default=None,
                       help="a running Dask scheduler, e.g. tcp://node01:8786")
    where.add_argument("--cluster", choices=("slurm", "pbs", "sge"), default=None,
                       help="start workers through this job queue (needs the cluster extra)")
    q = p.add_argument_group("job queue (with --cluster)")
    q.add_argument("--queue", default=None, help="queue or partition name")
    q.add_argument("--cores", type=int, default=1, help="cores per job (default 1)")
    q.add_argument("--memory", default="4GB", help="memory per job (default 4GB)")
    q.add_argument("--walltime", default="01:00:00", help="wall time per job (default 01:00:00)")
    q.add_argument("--jobs", type=int, default=2, help="number of jobs to start (default 2)")
    p.set_defaults(func=run)


def _line(row: dict) -> str:
    if row.get("status") == "failed":
        return f"failed   {row.get('error')}"
    return (f"{row['status']:<8} {row['movie']}: {row['frames']} frames, {row['candidates']} "
            f"candidates, {row['scan_s']:.1f} s on {row.get('worker') or '?'}")


def run(args: argparse.Namespace) -> int:
    from reviewer.batch import engine
    from reviewer.batch.discover import find_movies
    from reviewer.batch.job import scan_path
    from reviewer.batch.summary import counts, write_summary
    from reviewer.detect import DetectSettings
    from reviewer.errors import BadInput
    from reviewer.outputs import guard, movie_files
    from reviewer.progress import Progress

    if args.workers is not None and args.workers < 1:
        raise BadInput(f"--workers {args.workers}: 1 or more")
    movies = find_movies(args.paths, args.recursive)
    if not movies:
        raise BadInput(f"{' '.join(args.paths)}: no movies found"
                       + ("" if args.recursive else " (--recursive looks into sub-folders)"))
    stamp = time.strftime("%Y%m%dT%H%M%SZ", time.gmtime())
    out = Path(args.output) if args.output else Path(f"batch-{stamp}.{'json' if args.json else 'csv'}")
    guard([out], [pair for m in movies for pair in movie_files(given=m)])
    settings = DetectSettings(sensitivity=args.sensitivity,
                               false_alarms=args.false_alarms).to_dict()
    choice = engine.EngineChoice(args.workers, args.scheduler, args.cluster,
                                 {"queue": args.queue, "cores": args.cores, "memory": args.memory,
                                  "walltime": args.walltime, "jobs": args.jobs})
    bar = Progress(len(movies), label="movies")
    tty = bar.tty
    done = [0]

    def on_row(i: int, row: dict) -> None:
        done[0] += 1
        if not tty:
            print(_line(row), file=sys.stderr)
        bar.update(done[0])

    client, cluster = engine.start(choice)
    rows: list = [None] * len(movies)
    interrupted = False
    # fewer movies than workers: long movies are split across the idle ones (batch/parts.py)
    parts = max(1, sum(client.nthreads().values()) // len(movies))
    try:
        engine.run(client, [(str(m), settings, args.force, args.fps, parts) for m in movies],
                   scan_path, on_row, rows)
    except KeyboardInterrupt:
        interrupted = True
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    bar.close()
    rows = [r if r is not None else {"movie": str(m), "status": "cancelled"}
            for r, m in zip(rows, movies, strict=True)]
    write_summary(rows, out, args.json)
    c = counts(rows)
    print(f"{len(rows)} movies: {c['done']} scanned, {c['skipped']} already scanned (skipped), "
          f"{c['failed']} failed" + (f", {c['cancelled']} cancelled" if c["cancelled"] else ""))
    print(f"wrote {out}")
    if interrupted:
        print("reviewer: interrupted; finished movies are kept", file=sys.stderr)
        return 130
    return 1 if c["failed"] else 0
