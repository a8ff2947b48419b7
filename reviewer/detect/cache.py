"""Saving and loading a scan: features.npz + candidates.csv + scan.json in one folder.

Files are written to temporary names and renamed, scan.json last, so a folder holds either a whole
scan or none (load_scan returns None for a missing, partial or unreadable one, and for one written
by another version of the detector: DETECTOR_VERSION).
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import pandas as pd

from reviewer.detect.candidates import CANDIDATE_COLUMNS
from reviewer.detect.stream import ScanResult

FORMAT = 2  # 2: located frames are per-window peaks and carry an onset shift
# The detector's version: bump it whenever a change to reviewer/detect/ changes the features or the
# candidates for the same movie and settings; a cached scan of another version is never reused.
DETECTOR_VERSION = "2026.12-a"


def _replace(tmp: Path, final: Path) -> None:
    with open(tmp, "rb") as f:
        os.fsync(f.fileno())
    os.replace(tmp, final)


def save_scan(result: ScanResult, folder: str | os.PathLike) -> Path:
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "scan.json").unlink(missing_ok=True)  # invalidate first: no mixed old/new folder
    tmp = folder / "features.tmp.npz"
    np.savez(tmp, **result.features)
    _replace(tmp, folder / "features.npz")
    tmp = folder / "candidates.tmp.csv"
    result.candidates.to_csv(tmp, index=False)
    _replace(tmp, folder / "candidates.csv")
    tmp = folder / "scan.tmp.json"
    tmp.write_text(json.dumps({"format": FORMAT, "detector": DETECTOR_VERSION, "settings": result.settings,
                               "meta": result.meta}, indent=1, default=float))
    _replace(tmp, folder / "scan.json")
    return folder


def load_scan(folder: str | os.PathLike) -> ScanResult | None:
    folder = Path(folder)
    try:
        info = json.loads((folder / "scan.json").read_text())
        if info.get("format") != FORMAT or info.get("detector") != DETECTOR_VERSION:
            return None
        with np.load(folder / "features.npz") as z:
            features = {k: z[k] for k in z.files}
        cands = pd.read_csv(folder / "candidates.csv", dtype={"kind": str})
    except (OSError, ValueError, KeyError, json.JSONDecodeError):
        return None
    if "score" not in features or list(cands.columns) != list(CANDIDATE_COLUMNS):
        return None
    cands["frame_end"] = cands["frame_end"].astype("Int64")
    return ScanResult(features=features, candidates=cands, settings=info.get("settings", {}),
                      meta=info.get("meta", {}))
