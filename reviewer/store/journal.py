"""The journal (JSON lines, fsynced per action) and the snapshot (written by write-then-rename).

Files in a session folder: ``journal.jsonl`` (one JSON object per action, ``{"seq", "t", "op", ...}``),
``snapshot.json`` (the full state up to ``"seq"``), ``meta.json``, ``lock``.

Compaction and its crash windows (seq numbers only grow; replay skips journal lines whose seq is not
above the snapshot's, so the journal may safely hold lines the snapshot already contains):

1. Write the state to ``snapshot.json.tmp``, flush, fsync.   Crash here: the old snapshot and the full
   journal are intact; the stray ``.tmp`` is ignored (and overwritten next time).
2. ``os.replace`` the temp file over ``snapshot.json``, fsync the folder.   Crash before the replace:
   as in 1. After it: the new snapshot plus the full journal; replay skips the lines it already holds.
   The folder fsync makes the rename durable before step 3, so a power cut cannot bring back the old
   snapshot next to an emptied journal.
3. Truncate the journal to zero length and fsync it.   Crash before or during: as in 2 (a truncate is
   all-or-nothing for the file length); after: new snapshot, empty journal.

Appends: the line is written with one ``os.write`` on an O_APPEND descriptor, then ``os.fsync``; the
call returns only after both. A crash mid-write leaves a torn last line: on open it is ignored with a
notice and cut off (so the next line does not glue onto it). A failed write (disk full, I/O error)
cuts the file back to its last good length and raises `StoreWriteError`; the caller applies the action
in memory only after a successful append.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
from pathlib import Path

JOURNAL = "journal.jsonl"
SNAPSHOT = "snapshot.json"


class StoreWriteError(OSError):
    """The session could not be saved; the action was not applied."""


def _explain(path: Path, exc: OSError, action: bool = False) -> StoreWriteError:
    why = "the disk is full" if exc.errno == errno.ENOSPC else (exc.strerror or str(exc))
    text = f"{path}: cannot write ({why})"
    if action:
        text += "; the last action was not applied: free space or fix the folder, then repeat it"
    return StoreWriteError(exc.errno, text)


def fsync_dir(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass  # some file systems cannot fsync a folder
    finally:
        os.close(fd)


def write_json_atomic(path: Path, obj) -> None:
    """Write JSON to path by temp file + fsync + os.replace + folder fsync."""
    tmp = path.with_name(path.name + ".tmp")
    data = json.dumps(obj, ensure_ascii=False, separators=(",", ":")).encode("utf-8")
    try:
        with open(tmp, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except OSError as exc:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise _explain(path, exc) from exc
    fsync_dir(path.parent)


def read_snapshot(folder: Path) -> tuple[dict | None, list[str]]:
    path = folder / SNAPSHOT
    try:
        return json.loads(path.read_bytes()), []
    except FileNotFoundError:
        return None, []
    except (OSError, ValueError) as exc:
        return None, [f"{path}: unreadable snapshot ignored ({exc}); replaying the journal alone"]


def read_journal(path: Path) -> tuple[list[dict], list[str], int | None]:
    """Records of a journal, notices, and the length to cut the file to (None: file is fine)."""
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        return [], [], None
    records: list[dict] = []
    bad: list[tuple[int, int]] = []  # (line number, start offset) of damaged lines
    good_end = 0
    start = 0
    line_no = 0
    while start < len(data):
        nl = data.find(b"\n", start)
        end = len(data) if nl < 0 else nl + 1
        line_no += 1
        raw = data[start:end].strip()
        if raw:
            try:
                rec = json.loads(raw)
                if not isinstance(rec, dict) or "op" not in rec or nl < 0:
                    raise ValueError("incomplete record")
                records.append(rec)
                good_end = end
            except ValueError:
                bad.append((line_no, start))
        start = end
    notices: list[str] = []
    cut = good_end if good_end < len(data) else None
    tail = [n for n, s in bad if s >= good_end]
    if tail:
        notices.append(f"{path}: line {tail[0]} was incomplete (written during a crash) and was "
                       "ignored")
    notices += [f"{path}: line {n} is damaged and was skipped" for n, s in bad if s < good_end]
    return records, notices, cut


class Journal:
    """Append-only JSON-lines file; every append is written and fsynced before it returns."""

    def __init__(self, path: Path, cut_to: int | None = None) -> None:
        self.path = path
        try:
            self.fd = os.open(path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)
            if cut_to is not None:
                os.ftruncate(self.fd, cut_to)
                os.fsync(self.fd)
            self.size = os.fstat(self.fd).st_size
        except OSError as exc:
            raise _explain(path, exc) from exc
        self._repair = False

    def append(self, record: dict) -> None:
        line = json.dumps(record, ensure_ascii=False, separators=(",", ":")).encode("utf-8") + b"\n"
        try:
            if self._repair:
                os.ftruncate(self.fd, self.size)
                self._repair = False
            view = memoryview(line)
            while view:
                n = os.write(self.fd, view)
                view = view[n:]
            os.fsync(self.fd)
        except OSError as exc:
            self._repair = True
            with contextlib.suppress(OSError):
                os.ftruncate(self.fd, self.size)
                self._repair = False
            raise _explain(self.path, exc, action=True) from exc
        self.size += len(line)

    def truncate(self) -> None:
        """Empty the journal (after a snapshot holding everything in it is durable)."""
        try:
            os.ftruncate(self.fd, 0)
            os.fsync(self.fd)
        except OSError as exc:
            raise _explain(self.path, exc) from exc
        self.size = 0

    def close(self) -> None:
        if self.fd >= 0:
            os.close(self.fd)
            self.fd = -1
