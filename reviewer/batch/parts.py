"""One long movie split across Dask workers (reviewer/detect/split.py): a task measures the noise
model on the first frames, one task per part scans its frames into the movie's cache folder (on the
shared path), a last task stitches them into the folder's new features, where compute_features
would have left them; the caller proposes the candidates once and saves the scan as after a whole
scan. Frames never travel, nor do features through the scheduler: it sees paths, the plan, the
model (a few numbers), one small dict per part, progress counts and the stitched scan's meta."""

from __future__ import annotations

import resource
import shutil
import sys
import threading
import time
import uuid
from collections.abc import Callable
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput


def _open(path: str, opening: dict, fingerprint: str):
    """The movie as the client opened it (`opening`: open_movie's keywords: fps, dataset, ...)."""
    from reviewer.movie import open_movie

    movie = open_movie(Path(path), show_progress=False, **opening)
    if fingerprint and movie.fingerprint != fingerprint:
        movie.close()
        raise BadInput(f"{path}: the movie a worker sees is not the one given (another file at "
                       "that path on this node?)")
    return movie


def _peak_mb() -> float:
    """This process's peak resident memory (MiB; ru_maxrss is KiB on Linux, bytes on macOS)."""
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return round(peak / (1 << 20) if sys.platform == "darwin" else peak / 1024, 1)


def model_task(path: str, settings: dict, opening: dict, fingerprint: str) -> dict:
    from reviewer.detect import DetectSettings
    from reviewer.detect.split import estimate_model

    movie = _open(path, opening, fingerprint)
    try:
        return estimate_model(movie, DetectSettings.from_dict(settings))
    finally:
        movie.close()


def _reporter(topic: str | None, index: int) -> Callable[[int], None] | None:
    """Progress as events on `topic` (the part's frames read so far, at most twice a second):
    a few bytes through the scheduler to the client's progress bar."""
    if not topic:
        return None
    from distributed import get_worker

    worker, state = get_worker(), {"frames": 0, "at": 0.0}

    def report(frames: int) -> None:
        state["frames"] += frames
        now = time.monotonic()
        if now - state["at"] >= 0.5:
            state["at"] = now
            worker.log_event(topic, {"part": index, "frames": state["frames"]})

    return report


def part_task(path: str, settings: dict, opening: dict, fingerprint: str, part: dict,
              model: dict | None, folder: str, topic: str | None = None) -> dict:
    from reviewer.detect import DetectSettings
    from reviewer.detect.split import PARTS, Part, scan_part

    p = Part(**part)
    movie = _open(path, opening, fingerprint)
    try:
        out = scan_part(movie, DetectSettings.from_dict(settings), p, model,
                        Path(folder) / PARTS / str(p.index), progress=_reporter(topic, p.index))
    finally:
        movie.close()
    return out | {"peak_mb": _peak_mb(), "worker": _worker()}


def stitch_task(path: str, settings: dict, opening: dict, fingerprint: str, parts: list[dict],
                results: list[dict], folder: str, seconds: float) -> dict:
    """Stitch the parts into the scan folder's NEW_FEATURES (as compute_features(workdir=folder)
    leaves them, for save_scan to move into place); returns the meta (the features stay on disk)."""
    from reviewer.detect import DetectSettings
    from reviewer.detect.split import PARTS, Part, stitch

    movie = _open(path, opening, fingerprint)
    try:
        _, meta = stitch(movie, DetectSettings.from_dict(settings), [Part(**p) for p in parts],
                         results, folder, seconds)
    finally:
        movie.close()
    shutil.rmtree(Path(folder) / PARTS, ignore_errors=True)
    return meta


def _worker() -> str:
    from reviewer.batch.job import _worker as name

    return name()


def split_scan(client, movie, settings, parts: int, folder: Path, opening: dict | None = None,
               min_part: int | None = None,
               progress: Callable[[int], None] | None = None) -> tuple[dict, dict]:
    """Scan `movie` (opened here for its header only; `opening` the keywords it was opened with)
    in up to `parts` parts on the client's workers, into the scan folder `folder`; returns
    (features, meta) as compute_features does, the features memory-mapped from the cache.
    `progress` gets the number of frames scanned so far."""
    from distributed import as_completed

    from reviewer.detect.split import MIN_PART, plan_parts
    from reviewer.detect.stream import NEW_FEATURES

    t0 = time.perf_counter()
    plan = plan_parts(movie, settings, parts, min_part or MIN_PART)
    common = (str(Path(movie.path).resolve()), settings.to_dict(), dict(opening or {}),
              movie.fingerprint)
    # the model first (a few numbers), then the parts, one per worker in turn: parts depending
    # on a model future would all be placed on the worker that holds it
    model = client.submit(model_task, *common, pure=False).result() if len(plan) > 1 else None
    workers = list(client.scheduler_info()["workers"]) or [None]
    seen = [0] * len(plan)
    lock = threading.Lock()

    def moved(index: int, frames: int) -> None:
        with lock:
            seen[index] = max(seen[index], min(frames, plan[index].stop - plan[index].start))
            progress(sum(seen))

    topic = None
    if progress is not None:
        topic = f"reviewer-scan-progress-{uuid.uuid4().hex}"
        client.subscribe_topic(topic, lambda event: moved(event[1]["part"], event[1]["frames"]))
    futures = [client.submit(part_task, *common, p.to_dict(), model, str(folder), topic,
                             pure=False, workers=workers[i % len(workers)],
                             allow_other_workers=True)
               for i, p in enumerate(plan)]
    results = []
    try:
        for fut in as_completed(futures):
            results.append(fut.result())
            if progress is not None:
                moved(results[-1]["index"], 1 << 62)
        meta = client.submit(stitch_task, *common, [p.to_dict() for p in plan], results,
                             str(folder), round(time.perf_counter() - t0, 3), pure=False).result()
    except BaseException:
        client.cancel([f for f in futures if not f.done()])
        from reviewer.detect.split import PARTS

        shutil.rmtree(Path(folder) / PARTS, ignore_errors=True)  # the scan kept stays as it was
        raise
    finally:
        if topic is not None:
            client.unsubscribe_topic(topic)
    files = sorted((Path(folder) / NEW_FEATURES).glob("*.npy"))
    features = {p.stem: np.load(p, mmap_mode="r+") for p in files}
    if "score" not in features:
        raise BadInput(f"{folder}: the stitched features are not in the cache folder (is it on "
                       "a path the workers share?)")
    features = {"score": features.pop("score"), **features}
    meta |= {"seconds": round(time.perf_counter() - t0, 3),
             "workers": sorted({r["worker"] for r in results}),
             "peak_mb": max(r["peak_mb"] for r in results)}
    return features, meta
