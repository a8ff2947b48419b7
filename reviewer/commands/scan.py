"""`reviewer scan MOVIE`: one headless pass that scores every frame and writes candidate events."""

from __future__ import annotations

import argparse
import sys
import threading
from pathlib import Path

import pandas as pd

from reviewer.commands._common import add_movie_arguments, open_checked, positive_float
from reviewer.errors import BadInput, printable
from reviewer.outputs import guard, movie_files, opened, reason, replacing


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "scan", help="score every frame and write the candidate events (CSV)",
        description="Read the movie once, score every frame for sudden local changes and write the "
                    "candidate events as CSV. The scan is kept in the cache so the review opens "
                    "at once; a second scan with the same settings only re-proposes.")
    add_movie_arguments(p)
    p.add_argument("-o", "--output", metavar="CANDIDATES.csv", default=None,
                   help="where to write the candidates (default: <movie>.candidates.csv beside "
                        "the movie, or in the cache folder when that is not writable)")
    p.add_argument("--false-alarms", type=positive_float, default=0.05, metavar="N",
                   help="expected number of false alarms over the whole movie (default 0.05; "
                        "1 or 10 find weaker events at that many false ones per movie)")
    p.add_argument("--sensitivity", type=positive_float, default=1.0,
                   help="deprecated, prefer --false-alarms: divides the threshold z* set by "
                        "--false-alarms (default 1)")
    p.add_argument("--dim-fronts", action="store_true",
                   help="also read each region through its edges: finds sub-pixel advances of dim "
                        "fronts at very low dose, at about 1.5-2.7x the scan time for frames up "
                        "to 512²")
    p.add_argument("--patterns", action="store_true",
                   help="also test each region for changes of pattern that keep its mean (a lattice "
                        "patch that turns, fringes that shift), on 2x2-binned frames: several "
                        "times the scan time; one process only (not with --workers / --scheduler)")
    p.add_argument("--force", action="store_true", help="scan again even if a cached scan exists")
    split = p.add_mutually_exclusive_group()
    split.add_argument("--workers", type=int, default=None, metavar="N",
                       help="split the movie into parts scanned by N local Dask worker processes "
                            "(same result as one scan; needs the batch extra)")
    split.add_argument("--scheduler", metavar="ADDRESS", default=None,
                       help="split the movie across the workers of a running Dask scheduler, "
                            "e.g. tcp://node01:8786 (they need the movie and the cache folder)")
    p.set_defaults(func=run)


def candidate_rows(candidates) -> list[dict]:
    """Event-table rows (store.table.COLUMNS) for detector candidates."""
    from reviewer.store.events import detector_id

    rows = []
    for i, c in enumerate(candidates.itertuples(index=False)):  # ids as the session gives them
        fe = c.frame_end
        rows.append({
            "event_id": detector_id(i), "frame": int(c.frame), "time_s": _num(c.time_s),
            "frame_end": None if pd.isna(fe) else int(fe),
            "kind": c.kind, "score": float(c.score), "x": _num(c.x), "y": _num(c.y),
            "status": "candidate", "label": "", "note": "", "source": "detector",
            "reviewed_at": "", "cause": _cause(getattr(c, "cause", None)),
        })
    return rows


def _cause(v) -> str | None:
    return v if isinstance(v, str) and v else None  # empty for local kinds (NaN when read back)


def _num(v) -> float | None:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return None
    return None if v != v else v


def _cache_folder(fingerprint: str) -> Path | None:
    """The movie's cache folder, or None (with a notice) when it cannot be made: the scan then runs
    without keeping its results."""
    from reviewer.paths import cache_dir, cache_root

    try:
        return cache_dir(fingerprint)
    except OSError as exc:
        print(f"reviewer: notice: cannot use the cache folder {printable(str(cache_root()))} "
              f"({reason(exc)}); the scan is not kept (set REVIEWER_CACHE_DIR to a writable folder)",
              file=sys.stderr)
        return None


def _split(args, movie, settings, folder, bar):
    """The scan split across Dask workers (reviewer/batch/parts.py), the bar moved on by the parts'
    progress events; a movie too short to split is one part, on one worker."""
    from reviewer.batch import engine
    from reviewer.batch.parts import split_scan

    if folder is None:
        raise BadInput("--workers/--scheduler: the parts are kept in the cache folder, which "
                       "cannot be used here (set REVIEWER_CACHE_DIR to a writable, shared folder)")
    client, cluster = engine.start(engine.EngineChoice(args.workers, args.scheduler))
    try:
        parts = max(1, sum(client.nthreads().values()))
        opening = {"fps": args.fps, **{k: getattr(args, k, None)
                                       for k in ("dataset", "axes", "channel", "z", "series")}}
        return split_scan(client, movie, settings, parts, folder, opening, progress=bar.update)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()


def run(args: argparse.Namespace) -> int:
    from reviewer.detect import (
        DetectSettings,
        ScanCancelled,
        ScanResult,
        compute_features,
        load_scan,
        propose,
        save_scan,
    )
    from reviewer.detect.cache import reusable
    from reviewer.paths import output_beside
    from reviewer.progress import Progress
    from reviewer.store.table import write_csv

    settings = DetectSettings(sensitivity=args.sensitivity, false_alarms=args.false_alarms,
                              fronts=args.dim_fronts, patterns=args.patterns)
    if args.workers is not None and args.workers < 1:
        raise BadInput(f"--workers {args.workers}: 1 or more")
    if args.patterns and (args.workers is not None or args.scheduler is not None):
        raise BadInput("--patterns scans in one process: leave out --workers / --scheduler")
    movie = open_checked(args)
    try:
        cache = _cache_folder(movie.fingerprint)
        folder = cache / "scan" if cache is not None else None
        out = Path(args.output) if args.output else output_beside(
            args.movie, ".candidates.csv", cache or Path(args.movie).resolve().parent)
        guard([out], movie_files(movie, args.movie)
              + ([("the scan cache", folder)] if folder is not None else []))
        cached = None if args.force or folder is None else load_scan(folder)
        if reusable(cached, settings, movie.n_frames):
            features, meta, how = cached.features, cached.meta, "reused the cached scan"
        else:
            bar = Progress(movie.n_frames, label="frames")
            cancel = threading.Event()
            try:
                if args.workers is not None or args.scheduler:
                    features, meta = _split(args, movie, settings, folder, bar)
                else:
                    features, meta = compute_features(movie, settings, progress=bar.update,
                                                      cancel=cancel, workdir=folder)
            except KeyboardInterrupt:
                bar.close()
                print("reviewer: scan interrupted; nothing was written", file=sys.stderr)
                return 130
            except ScanCancelled:
                bar.close("scan cancelled; nothing was written")
                return 130
            except OSError as exc:  # the features are written into the cache as they are made
                bar.close()
                raise BadInput(f"{printable(str(folder))}: cannot keep the scan's features "
                               f"({reason(exc)}); nothing was written (free space, or set "
                               "REVIEWER_CACHE_DIR to another folder)") from exc
            bar.close()
            how = f"scanned {movie.n_frames} frames in {meta.get('seconds', 0):.1f} s" + (
                f" in {meta['parts']} part(s) on {len(meta['workers'])} worker(s)"
                if meta.get("workers") else "")
        candidates = propose(features, settings, movie.timing)
        result = ScanResult(features=features, candidates=candidates,
                            settings=settings.to_dict(), meta=meta)
        if folder is not None:
            try:
                save_scan(result, folder)
            except OSError as exc:
                print(f"reviewer: notice: the scan could not be kept in the cache "
                      f"{printable(str(folder))} ({reason(exc)}); the review will scan again",
                      file=sys.stderr)
        with replacing(out) as (tmp,), opened(tmp, newline="", encoding="utf-8") as f:
            write_csv(candidate_rows(candidates), f)
    finally:
        movie.close()
    for note in meta.get("notices", []):
        print(f"reviewer: {args.movie}: {note}", file=sys.stderr)
    counts = candidates["kind"].value_counts()
    summary = ", ".join(f"{int(counts.get(k, 0))} {k}" for k in ("step", "transient", "global"))
    print(f"{how}; {len(candidates)} candidates ({summary})")
    print(f"wrote {printable(str(out))}")
    return 0
