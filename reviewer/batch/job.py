"""One movie of a batch, scanned as `reviewer scan` does it: cached features reused unless `force`,
candidates written beside the movie (or in its cache folder). Runs in a Dask worker; returns a small
dict (a row of the summary), never frames, and never raises: a failure is a row with its one-line error.
"""

from __future__ import annotations

import time
from pathlib import Path

KINDS = ("step", "transient", "global")


def _row(path: Path) -> dict:
    return {"movie": str(path), "frames": None, "duration_s": None, "fps": None,
            **{k: None for k in KINDS}, "candidates": None, "scan_s": None, "status": "failed",
            "error": "", "notices": "", "candidates_csv": "", "worker": _worker()}


def _worker() -> str:
    try:
        from distributed import get_worker

        return get_worker().address
    except (ImportError, ValueError):
        return "local"


SPLIT_MIN_PART = 50_000  # frames: a batch splits a movie only into parts at least this long


def scan_path(path: str, settings: dict, force: bool = False, fps: float | None = None,
              parts: int = 1) -> dict:
    """Scan the movie at `path` with DetectSettings.from_dict(settings); with parts > 1 a long
    movie is split into up to that many parts scanned on other workers (batch/parts.py)."""
    from reviewer.errors import BadInput

    p = Path(path)
    row = _row(p)
    start = time.monotonic()
    try:
        row.update(_scan(p, settings, force, fps, parts))
    except BadInput as exc:
        row["error"] = str(exc)
    except MemoryError:
        row["error"] = f"{p}: out of memory"
    except OSError as exc:
        row["error"] = f"{p}: {exc.strerror or exc}"
    except Exception as exc:  # noqa: BLE001 - one bad movie must not stop the batch
        text = str(exc).splitlines()[0][:200] if str(exc) else ""
        row["error"] = f"{p}: {exc.__class__.__name__}: {text}".rstrip(": ")
    row["scan_s"] = round(time.monotonic() - start, 3)
    return row


def _features(movie, settings, folder: Path, fps: float | None, parts: int):
    """compute_features, or the split scan on the cluster's workers when the movie is long enough
    for more than one part of SPLIT_MIN_PART frames."""
    from reviewer.detect import compute_features
    from reviewer.detect.split import plan_parts

    if parts > 1 and len(plan_parts(movie, settings, parts, SPLIT_MIN_PART)) > 1:
        from distributed import worker_client

        from reviewer.batch.parts import split_scan

        with worker_client() as client:  # this task steps aside while the parts run
            return split_scan(client, movie, settings, parts, folder, {"fps": fps},
                              min_part=SPLIT_MIN_PART)
    return compute_features(movie, settings, workdir=folder)


def _scan(p: Path, settings_dict: dict, force: bool, fps: float | None, parts: int) -> dict:
    from reviewer.commands.scan import candidate_rows
    from reviewer.detect import DetectSettings, load_scan, propose, save_scan
    from reviewer.detect.cache import reusable
    from reviewer.detect.stream import ScanResult
    from reviewer.movie import open_movie
    from reviewer.outputs import guard, movie_files
    from reviewer.paths import cache_dir, output_beside
    from reviewer.store.table import write_csv

    settings = DetectSettings.from_dict(settings_dict)
    movie = open_movie(p, fps=fps, show_progress=False)
    try:
        folder = cache_dir(movie.fingerprint) / "scan"
        out = output_beside(p, ".candidates.csv", cache_dir(movie.fingerprint))
        guard([out], movie_files(movie, p))  # as `reviewer scan` checks its output
        cached = None if force else load_scan(folder)
        if reusable(cached, settings, movie.n_frames) and out.exists():
            status, features, meta = "skipped", cached.features, cached.meta
        else:  # features memory-mapped into the cache as they are made, as `reviewer scan` does
            features, meta = _features(movie, settings, folder, fps, parts)
            status = "done"
        candidates = propose(features, settings, movie.timing)
        if status == "done":
            save_scan(ScanResult(features=features, candidates=candidates,
                                 settings=settings.to_dict(), meta=meta), folder)
            write_csv(candidate_rows(candidates), out)
        counts = candidates["kind"].value_counts()
        return {"frames": movie.n_frames, "duration_s": movie.duration_s, "fps": movie.fps,
                **{k: int(counts.get(k, 0)) for k in KINDS}, "candidates": len(candidates),
                "status": status, "candidates_csv": str(out),
                "notices": "; ".join(movie.notices + [f"scanned in {meta['parts']} parts on "
                                                      f"{len(meta['workers'])} workers"]
                                     if meta.get("workers") else movie.notices)}
    finally:
        movie.close()
