"""Saving and loading a scan: features/<name>.npy + candidates.csv + scan.json in one folder.

Files are written to temporary names and renamed, scan.json last, so a folder holds either a whole
scan or none (load_scan returns None for a missing, partial or unreadable one, and for one written
by another version of the detector: DETECTOR_VERSION). Features are loaded memory-mapped; a scan
run with `workdir=folder` has written them into folder/features.new as it went, and save_scan only
moves that folder into place.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import numpy as np
import pandas as pd

from reviewer.detect.candidates import CANDIDATE_COLUMNS
from reviewer.detect.stream import NEW_FEATURES, ScanResult

FORMAT = 3  # 3: one memory-mappable .npy per feature (2: features.npz)
# The detector's version: bump it whenever a change to reviewer/detect/ changes the features or the
# candidates for the same movie and settings; a cached scan of another version is never reused.
DETECTOR_VERSION = "2026.12-k"
FEATURES = "features"


def _fsync(path: Path) -> None:
    with open(path, "rb") as f:
        os.fsync(f.fileno())


def _replace(tmp: Path, final: Path) -> None:
    _fsync(tmp)
    os.replace(tmp, final)


def _lives_in(a, folder: Path) -> bool:
    name = getattr(a, "filename", None)
    return isinstance(a, np.memmap) and bool(name) and Path(name).resolve().parent == folder.resolve()


def _store_features(features: dict[str, np.ndarray], folder: Path) -> None:
    live, new = folder / FEATURES, folder / NEW_FEATURES
    if live.is_dir() and all(_lives_in(a, live) for a in features.values()):
        return  # re-proposed from the cached features: they are in place already
    new.mkdir(exist_ok=True)
    for name, a in features.items():
        target = new / f"{name}.npy"
        if _lives_in(a, new) and Path(a.filename).name == target.name:
            a.flush()
        else:
            tmp = new / f"{name}.tmp.npy"
            np.save(tmp, np.asarray(a))
            os.replace(tmp, target)
        _fsync(target)
    for p in new.iterdir():  # nothing left over from an earlier, interrupted scan
        if p.stem not in features:
            p.unlink()
    old = folder / "features.old"
    shutil.rmtree(old, ignore_errors=True)
    if live.exists():
        os.replace(live, old)
    os.replace(new, live)
    shutil.rmtree(old, ignore_errors=True)
    (folder / "features.npz").unlink(missing_ok=True)  # format 2


def save_scan(result: ScanResult, folder: str | os.PathLike) -> Path:
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "scan.json").unlink(missing_ok=True)  # invalidate first: no mixed old/new folder
    _store_features(result.features, folder)
    tmp = folder / "candidates.tmp.csv"
    result.candidates.to_csv(tmp, index=False)
    _replace(tmp, folder / "candidates.csv")
    tmp = folder / "scan.tmp.json"
    tmp.write_text(json.dumps({"format": FORMAT, "detector": DETECTOR_VERSION,
                               "settings": result.settings, "meta": result.meta},
                              indent=1, default=float))
    _replace(tmp, folder / "scan.json")
    return folder


def reusable(cached: ScanResult | None, settings, n_frames: int) -> bool:
    """A cached scan made with the same scan settings (`DetectSettings.scan_key`) over all frames."""
    from reviewer.detect.settings import DetectSettings

    return (cached is not None and bool(cached.settings)
            and DetectSettings.from_dict(cached.settings).scan_key() == settings.scan_key()
            and len(cached.features["score"]) == n_frames)


def load_scan(folder: str | os.PathLike) -> ScanResult | None:
    folder = Path(folder)
    try:
        info = json.loads((folder / "scan.json").read_text())
        if info.get("format") != FORMAT or info.get("detector") != DETECTOR_VERSION:
            return None
        features = {p.stem: np.load(p, mmap_mode="r")
                    for p in sorted((folder / FEATURES).glob("*.npy"))}
        cands = pd.read_csv(folder / "candidates.csv", dtype={"kind": str, "cause": str},
                            keep_default_na=False, na_values={"frame_end": [""], "x": [""],
                                                              "y": [""], "time_s": [""]})
    except (OSError, ValueError, KeyError, json.JSONDecodeError):
        return None
    if "cause" not in cands.columns:  # candidates written without the cause column
        cands["cause"] = ""
    if "score" not in features or list(cands.columns) != list(CANDIDATE_COLUMNS):
        return None
    features = {"score": features.pop("score"), **features}
    cands["frame_end"] = cands["frame_end"].astype("Int64")
    return ScanResult(features=features, candidates=cands, settings=info.get("settings", {}),
                      meta=info.get("meta", {}))
