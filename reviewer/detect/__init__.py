"""Scoring and events: one streaming pass over a movie scores every frame and proposes candidates.

    result = scan_movie(movie, DetectSettings(false_alarms=0.05), progress=cb, cancel=event)
    result.features["score"]   # float32 per frame, a calibrated z (see DetectSettings for the threshold)
    result.candidates          # frame, frame_end, time_s, kind, score, x, y, cause
    save_scan(result, folder); load_scan(folder); propose(features, settings, timing)
"""

from __future__ import annotations

from collections.abc import Callable

from reviewer.detect.cache import load_scan, save_scan
from reviewer.detect.candidates import CANDIDATE_COLUMNS, propose
from reviewer.detect.settings import DetectSettings
from reviewer.detect.stream import ScanCancelled, ScanResult, compute_features


def scan_movie(movie, settings: DetectSettings | None = None,
               progress: Callable[[int], None] | None = None, cancel=None,
               workdir=None) -> ScanResult:
    """Read `movie` once and return its features and candidate events (raises ScanCancelled when
    `cancel` (a threading.Event) is set, BadInput on an unusable movie). With `workdir` (the
    folder save_scan will be given) the features are written to disk as they are made."""
    s = settings or DetectSettings()
    features, meta = compute_features(movie, s, progress=progress, cancel=cancel,
                                      workdir=workdir)
    candidates = propose(features, s, movie.timing)
    return ScanResult(features=features, candidates=candidates, settings=s.to_dict(), meta=meta)


__all__ = ["CANDIDATE_COLUMNS", "DetectSettings", "ScanCancelled", "ScanResult", "compute_features",
           "load_scan", "propose", "save_scan", "scan_movie"]
