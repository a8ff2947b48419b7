"""Read the exported event table (CSV + JSON sidecar) and pick the events to analyse."""

from __future__ import annotations

import csv
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


def _plain_column(col: pd.Series) -> pd.Series:
    """_plain(strip()) on a whole column, once per distinct value (long tables, few labels)."""
    codes, uniq = pd.factorize(col, use_na_sentinel=False)
    plain = np.array([_plain(str(u).strip()) for u in uniq] or [""], dtype=object)
    return pd.Series(plain[codes], index=col.index, dtype=str)


def _numbers(df: pd.DataFrame, column: str) -> tuple[np.ndarray, np.ndarray]:
    """Float values of a text column and a mask of the cells that were filled but not numbers."""
    text = df[column].str.strip()
    values = pd.to_numeric(text.where(text != ""), errors="coerce").to_numpy(float, copy=True)
    bad = (text != "").to_numpy() & ~np.isfinite(values)
    return values, bad


def _row(df: pd.DataFrame, i: int) -> str:
    eid = df["event_id"].iloc[i] if "event_id" in df.columns else ""
    return f"row {i + 1}" + (f" (event {eid})" if eid else "")


NUMERIC = ("frame", "time_s", "frame_end", "x", "y")
TEXT = ("event_id", "status", "label")
MAX_PIXEL = 1e9  # a position further than this from the origin is not a pixel of any movie
FAR_OFF = 3.0    # time_s more than this many times frame / fps (or less than 1/this): wrong unit


SCAN_BLOCK = 1 << 23  # bytes read at a time by the quick field count


def _short_or_long(path: Path, row: int, line: int, got: int, width: int) -> BadInput:
    return BadInput(f"{path}: row {row} (line {line}) has {got} field(s) where the header has "
                    f"{width}")


def _quick_counts(path: Path) -> list[str] | None:
    """The header, after checking every line's comma count in blocks (numpy); None when the file
    holds a double quote (quoted fields may hold commas or line breaks: the csv module decides)."""
    with open(path, "rb") as f:
        first = f.readline()
        if b'"' in first:
            return None
        header = first.decode("utf-8", errors="strict").rstrip("\r\n").split(",")
        width, row, line, carry = len(header), 0, 1, b""
        while True:
            block = f.read(SCAN_BLOCK)
            if b'"' in block:
                return None
            data = carry + block
            if not block:
                data += b"\n" if data else b""
            buf = np.frombuffer(data, np.uint8)
            ends = np.flatnonzero(buf == 10)
            if ends.size:
                starts = np.concatenate([[0], ends[:-1] + 1])
                commas = np.flatnonzero(buf == 44)
                counts = np.searchsorted(commas, ends) - np.searchsorted(commas, starts) + 1
                length = ends - starts - (buf[np.maximum(ends - 1, 0)] == 13)
                filled = length > 0
                wrong = filled & (counts != width)
                if wrong.any():
                    i = int(np.flatnonzero(wrong)[0])
                    raise _short_or_long(path, row + int(filled[:i + 1].sum()), line + i + 1,
                                         int(counts[i]), width)
                row += int(filled.sum())
                line += ends.size
                carry = data[ends[-1] + 1:]
            else:
                carry = data
            if not block:
                return header


def _field_counts(path: Path) -> list[str]:
    """The header; BadInput naming the first data row whose field count differs from it."""
    try:
        quick = _quick_counts(path)
        if quick is not None:
            if quick == [""]:
                raise BadInput(f"{path}: empty file (expected an event table with a header row)")
            return [h.strip() for h in quick]
        with open(path, newline="", encoding="utf-8") as f:
            reader = csv.reader(f)
            header = next(reader, None)
            if not header:
                raise BadInput(f"{path}: empty file (expected an event table with a header row)")
            width, row = len(header), 0
            for fields in reader:
                if not fields:
                    continue  # blank line (skipped by the table reader too)
                row += 1
                if len(fields) != width:
                    raise _short_or_long(path, row, reader.line_num, len(fields), width)
    except OSError as exc:
        raise BadInput(f"{path}: cannot read the table ({exc.strerror or exc})") from None
    except UnicodeDecodeError as exc:
        raise BadInput(f"{path}: not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    except csv.Error as exc:
        raise BadInput(f"{path}: not a readable CSV table ({exc})") from None
    return [h.strip() for h in header]


def _load(path: Path) -> pd.DataFrame:
    """The columns kinetics uses, numbers parsed by pandas where every cell is a number."""
    header = _field_counts(path)
    missing = [c for c in REQUIRED if c not in header]
    if missing:
        raise BadInput(f"{path}: missing column(s) {', '.join(missing)} "
                       f"(an event table needs {', '.join(REQUIRED)})")
    wanted = set(NUMERIC) | set(TEXT)
    try:
        df = pd.read_csv(path, usecols=lambda c: str(c).strip() in wanted,
                         dtype={c: str for c in TEXT}, keep_default_na=False,
                         na_values={c: [""] for c in NUMERIC}, encoding="utf-8")
    except OSError as exc:
        raise BadInput(f"{path}: cannot read the table ({exc.strerror or exc})") from None
    except (UnicodeDecodeError, pd.errors.ParserError, ValueError) as exc:
        raise BadInput(f"{path}: not a readable CSV table ({str(exc).splitlines()[0]})") from None
    except pd.errors.EmptyDataError:
        raise BadInput(f"{path}: empty file (expected an event table with a header row)") from None
    df.columns = [str(c).strip() for c in df.columns]
    return df


def _column(df: pd.DataFrame, column: str, path: Path) -> np.ndarray:
    """Float values of a numeric column (NaN where empty); BadInput at the first non-number."""
    if column not in df.columns:
        return np.full(len(df), np.nan)
    col = df[column]
    if pd.api.types.is_numeric_dtype(col.dtype):
        values = col.to_numpy(float, copy=True)
        bad = np.isinf(values)
    else:
        values, bad = _numbers(df.assign(**{column: col.astype(str)}), column)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise BadInput(f"{path}: {_row(df, i)}: {column} {df[column].iloc[i]!r} is not a number")
    return values


def _first(mask: np.ndarray) -> int | None:
    hits = np.flatnonzero(mask)
    return int(hits[0]) if hits.size else None


def _check_ids(df: pd.DataFrame, path: Path) -> None:
    if "event_id" not in df.columns:
        return
    ids = df["event_id"].str.strip()
    dup = ids.duplicated(keep="first").to_numpy() & (ids != "").to_numpy()
    i = _first(dup)
    if i is not None:
        j = int(np.flatnonzero((ids == ids.iloc[i]).to_numpy())[0])
        raise BadInput(f"{path}: row {i + 1}: event id {ids.iloc[i]!r} appears twice (first in row "
                       f"{j + 1}); each event is counted once")


def _check_places(df: pd.DataFrame, x: np.ndarray, y: np.ndarray, path: Path) -> None:
    with np.errstate(invalid="ignore"):
        far = (np.abs(x) > MAX_PIXEL) | (np.abs(y) > MAX_PIXEL)
    i = _first(far)
    if i is not None:
        raise BadInput(f"{path}: {_row(df, i)}: position x {x[i]:g}, y {y[i]:g} is not a pixel of a "
                       f"movie (more than {MAX_PIXEL:g} px from the origin)")


def _check_times(df: pd.DataFrame, times: np.ndarray, frame: np.ndarray, given: np.ndarray,
                 info: dict, path: Path) -> None:
    """Negative times or frames, times past the recording, time_s in another unit than frames/fps."""
    for values, col in ((frame, "frame"), (times, "time_s")):
        i = _first(values < 0)
        if i is not None:
            raise BadInput(f"{path}: {_row(df, i)}: negative {col} {values[i]:g} (times count from "
                           "the start of the recording)")
    frames, fps, duration = info.get("frames"), info.get("fps"), info.get("duration_s")
    if frames:
        i = _first(frame > frames - 1)
        if i is not None:
            raise BadInput(f"{path}: {_row(df, i)}: frame {frame[i]:g} is outside the recording "
                           f"({frames} frames, 0 to {frames - 1}, in {info.get('sidecar')})")
    both = given & np.isfinite(frame) & (frame > 0) & (times > 0)
    if fps and both.any():
        ratio = float(np.median(times[both] * fps / frame[both]))
        if not 1 / FAR_OFF <= ratio <= FAR_OFF:
            raise BadInput(f"{path}: time_s is {ratio:.3g} x frame / fps (fps {fps:g} from "
                           f"{info.get('sidecar')}): times in another unit than seconds "
                           "(milliseconds?)")
    if duration:
        slack = 1.0 / fps if fps else 0.0
        i = _first(times > duration * (1 + 1e-9) + slack)
        if i is not None:
            raise BadInput(f"{path}: {_row(df, i)}: time {times[i]:g} s is outside the recording "
                           f"(duration {duration:g} s in {info.get('sidecar')})")


def read_events(path: str | os.PathLike) -> pd.DataFrame:
    """The event table with numeric time_s (seconds), frame, x, y; df.attrs['movie'] = sidecar info.

    time_s comes from the time_s column, or frame / fps (sidecar) where time_s is empty. Raises
    BadInput for a missing or unreadable file, rows with too few or too many fields, missing columns,
    non-numeric, negative or decreasing times, times outside the recording (sidecar), time_s in
    another unit than frame / fps, duplicate event ids and positions that are no pixel.
    """
    path = Path(path)
    if not path.is_file():
        raise BadInput(f"{path}: no such file")
    df = _load(path)
    info = read_movie_info(path)
    fps = info.get("fps")
    times = _column(df, "time_s", path)
    frame = _column(df, "frame", path)
    given = np.isfinite(times)
    empty = ~given
    if empty.any():
        if fps is None or np.isnan(frame[empty]).any():
            i = int(np.flatnonzero(empty & (np.isnan(frame) | (fps is None)))[0])
            raise BadInput(f"{path}: {_row(df, i)}: no time_s, and no frame with a sidecar fps "
                           "to compute it")
        times[empty] = frame[empty] / fps
    _check_times(df, times, frame, given, info, path)
    back = np.flatnonzero(np.diff(times) < 0)
    if back.size:
        i = int(back[0]) + 1
        raise BadInput(f"{path}: times are not in increasing order: {_row(df, i)} at "
                       f"{times[i]:g} s comes after {times[i - 1]:g} s (sort the table by time_s)")
    _check_ids(df, path)
    out = pd.DataFrame({"time_s": times, "frame": frame}, index=df.index)
    for col in ("x", "y", "frame_end"):
        out[col] = _column(df, col, path)
    _check_places(df, out["x"].to_numpy(), out["y"].to_numpy(), path)
    for col in ("status", "label"):
        out[col] = _plain_column(df[col])
    if "event_id" in df.columns:
        out["event_id"] = df["event_id"]
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
