"""The journal (JSON lines, fsynced per action) and the snapshots (written by write-then-rename).

Files in a session folder: ``journal.jsonl`` (one JSON object per action, ``{"seq", "t", "op", ...}``),
``snapshot.json`` (the full state up to ``"seq"``), ``snapshot.json.prev`` (the snapshot before it),
``meta.json``, ``lock``. The journal holds every action after the previous snapshot's seq, so the state
can be rebuilt from ``snapshot.json.prev`` plus the journal when ``snapshot.json`` is damaged.

Compaction (store/session.py) and its crash windows (seq numbers only grow; replay skips journal lines
whose seq is not above the snapshot's, so the journal may safely hold lines the snapshot contains):

1. Write the state to ``snapshot.json.tmp``, flush, fsync.   Crash here: the old snapshot and the full
   journal are intact; the stray ``.tmp`` is ignored (and overwritten next time).
2. Rename ``snapshot.json`` to ``snapshot.json.prev``.   Crash after it: no ``snapshot.json``; the
   state is rebuilt from ``.prev`` and the journal, which holds everything after it.
3. ``os.replace`` the temp file over ``snapshot.json``, fsync the folder.   After it: the new snapshot
   plus the full journal; replay skips the lines it already holds.
4. Rewrite the journal without the lines ``.prev`` already holds (temp file, fsync, rename, folder
   fsync).   A crash before the rename leaves the longer journal, which is still right.

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
PREV = "snapshot.json.prev"


class StoreWriteError(OSError):
    """The session could not be saved; the action was not applied."""


class ReadOnlySession(RuntimeError):
    """A change was asked of a session opened read-only; nothing was applied."""


def _explain(path: Path, exc: OSError, action: bool = False) -> StoreWriteError:
    if isinstance(exc, StoreWriteError):
        return exc
    full = exc.errno in (errno.ENOSPC, errno.EFBIG, errno.EDQUOT)
    why = "the disk is full" if full else (exc.strerror or str(exc))
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


def write_json_temp(path: Path, obj) -> Path:
    """Write JSON to ``<path>.tmp``, flushed and fsynced; returns the temp path (renamed by the
    caller)."""
    tmp = path.with_name(path.name + ".tmp")
    data = json.dumps(obj, ensure_ascii=False, separators=(",", ":")).encode("utf-8")
    try:
        with open(tmp, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
    except OSError as exc:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise _explain(path, exc) from exc
    return tmp


def replace_durably(tmp: Path, path: Path) -> None:
    """os.replace the temp file over path, then fsync the folder (the temp is removed on failure)."""
    try:
        os.replace(tmp, path)
    except OSError as exc:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise _explain(path, exc) from exc
    fsync_dir(path.parent)


def copy_durably(src: Path, path: Path) -> None:
    """A separate copy of src at path (temp file, fsync, rename; not a hard link, so damage to one
    file cannot reach the other)."""
    import shutil

    tmp = path.with_name(path.name + ".tmp")
    try:
        shutil.copyfile(src, tmp)
        fd = os.open(tmp, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
    except OSError as exc:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise _explain(path, exc) from exc
    replace_durably(tmp, path)


def write_json_atomic(path: Path, obj) -> None:
    """Write JSON to path by temp file + fsync + os.replace + folder fsync."""
    replace_durably(write_json_temp(path, obj), path)


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

    def keep_after(self, seq: int) -> None:
        """Rewrite the journal without its lines up to seq (temp file, fsync, rename), then append
        to the new file. On failure the longer journal stays, which is still right."""
        with open(self.path, "rb") as f:
            data = f.read()
        kept = []
        for line in data.splitlines(keepends=True):
            try:
                rec = json.loads(line)
            except ValueError:
                continue
            if line.endswith(b"\n") and isinstance(rec, dict) and isinstance(rec.get("seq"), int) \
                    and rec["seq"] > seq:
                kept.append(line)
        body = b"".join(kept)
        tmp = self.path.with_name(self.path.name + ".tmp")
        try:  # the new descriptor is the file renamed into place: appends can never go astray
            fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_TRUNC | os.O_APPEND, 0o644)
        except OSError as exc:
            raise _explain(self.path, exc) from exc
        try:
            view = memoryview(body)
            while view:
                view = view[os.write(fd, view):]
            os.fsync(fd)
            os.replace(tmp, self.path)
        except OSError as exc:
            os.close(fd)
            with contextlib.suppress(OSError):
                tmp.unlink()
            raise _explain(self.path, exc) from exc
        fsync_dir(self.path.parent)
        os.close(self.fd)
        self.fd = fd
        self.size = len(body)

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
