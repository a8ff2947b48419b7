"""Read the exported event table (CSV + JSON sidecar) and pick the events to analyse."""

from __future__ import annotations

import json
import math
import os
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd

from reviewer.errors import BadInput

REQUIRED = ("frame", "time_s", "status", "label")
_DANGEROUS = ("=", "+", "-", "@", "\t", "\r")


def sidecar_path(csv_path: str | os.PathLike) -> Path:
    """`events.csv` -> `events.json` (the export writes the movie description there)."""
    p = Path(csv_path)
    return p.with_suffix(".json") if p.suffix.lower() == ".csv" else p.with_name(p.name + ".json")


def _finite_or_none(value: object) -> float | None:
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) and v > 0 else None


def read_movie_info(csv_path: str | os.PathLike) -> dict:
    """frames, fps, duration_s from the sidecar (each None when absent); {} without a sidecar.

    duration_s falls back to frames / fps when the sidecar gives those but no duration.
    """
    side = sidecar_path(csv_path)
    if not side.is_file():
        return {}
    try:
        data = json.loads(side.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise BadInput(f"{side}: not a readable JSON sidecar ({exc})") from None
    movie = data.get("movie") if isinstance(data, dict) else None
    if not isinstance(movie, dict):
        return {}
    frames = _finite_or_none(movie.get("frames"))
    fps = _finite_or_none(movie.get("fps"))
    duration = _finite_or_none(movie.get("duration_s"))
    if duration is None and frames is not None and fps is not None:
        duration = frames / fps
    return {"frames": int(frames) if frames else None, "fps": fps, "duration_s": duration,
            "sidecar": str(side)}


def _plain(text: str) -> str:
    """Undo the export's spreadsheet guard (an apostrophe before formula-like text)."""
    return text[1:] if text[:1] == "'" and text[1:2] and text[1:2] in _DANGEROUS else text


def _numbers(df: pd.DataFrame, column: str) -> tuple[np.ndarray, np.ndarray]:
    """Float values of a text column and a mask of the cells that were filled but not numbers."""
    text = df[column].str.strip()
    values = pd.to_numeric(text.where(text != ""), errors="coerce").to_numpy(float, copy=True)
    bad = (text != "").to_numpy() & ~np.isfinite(values)
    return values, bad


def _row(df: pd.DataFrame, i: int) -> str:
    eid = df["event_id"].iloc[i] if "event_id" in df.columns else ""
    return f"row {i + 1}" + (f" (event {eid})" if eid else "")


def read_events(path: str | os.PathLike) -> pd.DataFrame:
    """The event table with numeric time_s (seconds), frame, x, y; df.attrs['movie'] = sidecar info.

    time_s comes from the time_s column, or frame / fps (sidecar) where time_s is empty. Raises
    BadInput for a missing file, missing columns, non-numeric or decreasing times.
    """
    path = Path(path)
    if not path.is_file():
        raise BadInput(f"{path}: no such file")
    try:
        df = pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
    except (UnicodeDecodeError, pd.errors.ParserError) as exc:
        raise BadInput(f"{path}: not a readable CSV table ({str(exc).splitlines()[0]})") from None
    except pd.errors.EmptyDataError:
        raise BadInput(f"{path}: empty file (expected an event table with a header row)") from None
    df.columns = [str(c).strip() for c in df.columns]
    missing = [c for c in REQUIRED if c not in df.columns]
    if missing:
        raise BadInput(f"{path}: missing column(s) {', '.join(missing)} "
                       f"(an event table needs {', '.join(REQUIRED)})")
    info = read_movie_info(path)
    fps = info.get("fps")
    frame, bad_frame = _numbers(df, "frame")
    times, bad_time = _numbers(df, "time_s")
    for mask, col in ((bad_time, "time_s"), (bad_frame, "frame")):
        if mask.any():
            i = int(np.flatnonzero(mask)[0])
            raise BadInput(f"{path}: {_row(df, i)}: {col} {df[col].iloc[i]!r} is not a number")
    empty = np.isnan(times)
    if empty.any():
        if fps is None or np.isnan(frame[empty]).any():
            i = int(np.flatnonzero(empty & (np.isnan(frame) | (fps is None)))[0])
            raise BadInput(f"{path}: {_row(df, i)}: no time_s, and no frame with a sidecar fps "
                           "to compute it")
        times[empty] = frame[empty] / fps
    back = np.flatnonzero(np.diff(times) < 0)
    if back.size:
        i = int(back[0]) + 1
        raise BadInput(f"{path}: times are not in increasing order: {_row(df, i)} at "
                       f"{times[i]:g} s comes after {times[i - 1]:g} s (sort the table by time_s)")
    out = df.copy()
    out["time_s"], out["frame"] = times, frame
    for col in ("x", "y", "frame_end"):
        out[col] = _numbers(df, col)[0] if col in df.columns else np.nan
    for col in ("status", "label"):
        out[col] = df[col].str.strip().map(_plain)
    out.attrs["movie"] = info
    out.attrs["path"] = str(path)
    return out


def select_events(df: pd.DataFrame, label: str | None = None,
                  statuses: tuple[str, ...] = ("accepted",)) -> pd.DataFrame:
    """Rows with one of `statuses` (and `label`, when given); BadInput saying what the table holds."""
    keep = df["status"].isin(statuses)
    if label is not None:
        keep &= df["label"] == label
    chosen = df[keep]
    if chosen.empty:
        path = df.attrs.get("path", "events")
        by_status = Counter(df["status"].replace("", "(none)"))
        held = ", ".join(f"{n} {s}" for s, n in by_status.most_common()) or "no rows"
        want = " or ".join(statuses) + " events" + (f" with label {label!r}" if label is not None
                                                     else "")
        extra = ""
        if label is not None:
            labels = Counter(df.loc[df["status"].isin(statuses), "label"].replace("", "(none)"))
            if labels:
                extra = "; their labels: " + ", ".join(f"{lab} {n}" for lab, n in labels.most_common())
        raise BadInput(f"{path}: no {want} (the table has {held}{extra})")
    return chosen
