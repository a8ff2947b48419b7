"""Split the selected events into groups: by label, by place (distance clustering), or by ROI file.

ROI file (our format): named rectangles in pixel coordinates of the movie, corners included,
  CSV   with a header row   name,x0,y0,x1,y1     (one rectangle a row), or
  JSON  {"regions": [{"name": "front A", "x0": 0, "y0": 0, "x1": 40, "y1": 96}, ...]}
        (a bare list of such objects is accepted too).
Rectangles may overlap: an event inside two rectangles counts in both. Events inside none form the
group "outside ROIs".
"""

from __future__ import annotations

import csv
import json
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from reviewer.errors import BadInput
from reviewer.kinetics.places import single_linkage

DEFAULT_RADIUS_PX = 20.0
MAX_REGIONS = 20  # regions analysed one by one; the smaller ones are listed together
NO_POSITION = "no position"
OUTSIDE = "outside ROIs"


@dataclass(frozen=True)
class Roi:
    name: str
    x0: float
    y0: float
    x1: float
    y1: float

    def contains(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        return (x >= self.x0) & (x <= self.x1) & (y >= self.y0) & (y <= self.y1)


def by_label(df: pd.DataFrame) -> list[tuple[str, pd.DataFrame]]:
    """One group per label (empty label -> '(no label)'), in order of first appearance."""
    names = df["label"].replace("", "(no label)")
    return [(str(name), df[names == name]) for name in dict.fromkeys(names)]


def _unplaced(df: pd.DataFrame) -> np.ndarray:
    return ~(np.isfinite(df["x"].to_numpy(float)) & np.isfinite(df["y"].to_numpy(float)))


def by_region(df: pd.DataFrame, radius: float = DEFAULT_RADIUS_PX,
              max_regions: int = MAX_REGIONS) -> list[tuple[str, pd.DataFrame]]:
    """Single-linkage clusters of (x, y): events closer than `radius` pixels (in a chain) share a group.

    Groups are named by their mean position, largest group first; beyond `max_regions` the smaller
    regions are put together in one group marked `attrs["skip"]` (not analysed: it mixes places).
    """
    unplaced = _unplaced(df)
    placed = df[~unplaced]
    groups: list[tuple[str, pd.DataFrame]] = []
    labels = single_linkage(placed[["x", "y"]].to_numpy(float), radius)
    counts = np.bincount(labels) if labels.size else np.zeros(0, int)
    ranked = np.lexsort((np.arange(counts.size), -counts))  # largest first, then first seen
    by_cluster = np.argsort(labels, kind="stable")
    starts = np.concatenate([[0], np.cumsum(counts)])
    x, y = placed["x"].to_numpy(float), placed["y"].to_numpy(float)
    for i, c in enumerate(ranked[:max_regions], 1):
        rows = np.sort(by_cluster[starts[c]:starts[c + 1]])
        groups.append((f"region {i} (x {x[rows].mean():.0f}, y {y[rows].mean():.0f})",
                       placed.iloc[rows]))
    rest = ranked[max_regions:]
    if rest.size:
        rows = np.flatnonzero(np.isin(labels, rest))
        part = placed.iloc[rows].copy()
        part.attrs["skip"] = (f"not analysed: {rest.size} smaller regions ({rows.size} events, at "
                              f"most {int(counts[rest].max())} in one); waits pooled across places "
                              "would mix processes")
        groups.append((f"{rest.size} smaller regions", part))
    if unplaced.any():
        groups.append((NO_POSITION, df[unplaced]))
    return groups


def _roi(path: Path, item: dict, where: str) -> Roi:
    try:
        roi = Roi(str(item["name"]).strip(), *(float(item[k]) for k in ("x0", "y0", "x1", "y1")))
    except (KeyError, TypeError, ValueError):
        raise BadInput(f"{path}: {where}: a region needs name, x0, y0, x1, y1 (numbers)") from None
    if not roi.name or not (roi.x0 <= roi.x1 and roi.y0 <= roi.y1):
        raise BadInput(f"{path}: {where}: needs a name and x0 <= x1, y0 <= y1")
    return roi


def read_roi(path: str | os.PathLike) -> list[Roi]:
    """Named rectangles from a CSV or JSON ROI file (format in the module docstring)."""
    path = Path(path)
    if not path.is_file():
        raise BadInput(f"{path}: no such ROI file")
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise BadInput(f"{path}: cannot read ROI file ({exc})") from None
    if path.suffix.lower() == ".json":
        try:
            data = json.loads(text)
        except json.JSONDecodeError as exc:
            raise BadInput(f"{path}: not valid JSON ({exc})") from None
        items = data.get("regions") if isinstance(data, dict) else data
        if not isinstance(items, list):
            raise BadInput(f"{path}: expected {{\"regions\": [...]}} or a list of regions")
        rois = [_roi(path, it if isinstance(it, dict) else {}, f"region {i}")
                for i, it in enumerate(items, 1)]
    else:
        rows = list(csv.DictReader(text.splitlines()))
        rois = [_roi(path, row, f"row {i}") for i, row in enumerate(rows, 1)]
    if not rois:
        raise BadInput(f"{path}: no regions in the ROI file")
    names = [r.name for r in rois]
    if len(set(names)) != len(names):
        raise BadInput(f"{path}: region names must be unique")
    return rois


def by_roi(df: pd.DataFrame, rois: list[Roi]) -> list[tuple[str, pd.DataFrame]]:
    """One group per rectangle (events inside it), then 'outside ROIs' and 'no position' if any."""
    x, y = df["x"].to_numpy(float), df["y"].to_numpy(float)
    unplaced = _unplaced(df)
    inside_any = np.zeros(len(df), bool)
    groups = []
    for roi in rois:
        hit = roi.contains(x, y)
        inside_any |= hit
        groups.append((roi.name, df[hit]))
    rest = ~inside_any & ~unplaced
    if rest.any():
        groups.append((OUTSIDE, df[rest]))
    if unplaced.any():
        groups.append((NO_POSITION, df[unplaced]))
    return groups
