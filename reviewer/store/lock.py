"""The session lock: one writer per session folder.

The lock is the file ``lock`` in the session folder, held with an exclusive ``flock`` for as long as the
session is open and naming its holder (pid, host, start time). The kernel drops a flock when its
process dies, so a lock that is held means a live writer; a lock file whose flock is free but that
still names another process was left behind by a writer that ended without closing (killed, crashed).

`acquire` never takes a lock from anyone by itself:

- free (no file, or an empty one): taken ("owned");
- held by a live process (here or on another host): "busy";
- left behind by a process that is no longer running on this host: "stale", taken over only when the
  caller asks (`reclaim=True`, the user's explicit choice);
- the folder cannot be written: "unwritable".

The caller opens the session read-only in every case but "owned".
"""

from __future__ import annotations

import contextlib
import errno
import fcntl
import json
import os
import socket
import uuid
from dataclasses import dataclass, field
from pathlib import Path

from reviewer.store.events import utc_now

LOCK = "lock"


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    except OSError:
        return False
    try:  # a killed child not yet reaped by its parent is a zombie: dead for our purpose
        stat = Path(f"/proc/{pid}/stat").read_text()
        return stat.rsplit(")", 1)[1].split()[0] not in ("Z", "X")
    except (OSError, IndexError):
        return True


@dataclass
class LockState:
    state: str  # "owned", "busy", "stale" or "unwritable"
    info: dict = field(default_factory=dict)  # what the lock file says about its holder
    why: str = ""  # for "unwritable": the system's reason

    def holder(self) -> str:
        i = self.info
        text = f"pid {i.get('pid', '?')} on {i.get('host', '?')}"
        return text + (f", since {i['started']}" if i.get("started") else "")


def _parse(data: bytes) -> dict:
    try:
        info = json.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, ValueError):
        return {"damaged": True}
    return info if isinstance(info, dict) else {"damaged": True}


class SessionLock:
    def __init__(self, folder: Path) -> None:
        self.path = folder / LOCK
        self.token = uuid.uuid4().hex
        self.fd = -1

    @property
    def owned(self) -> bool:
        return self.fd >= 0

    def read(self) -> dict | None:
        """What the lock file says (None: no lock file)."""
        try:
            data = self.path.read_bytes()
        except FileNotFoundError:
            return None
        except OSError:
            return {"damaged": True}
        return _parse(data) if data.strip() else None

    def acquire(self, reclaim: bool = False) -> LockState:
        for _ in range(20):  # retried only when the file was replaced under us
            try:
                fd = os.open(self.path, os.O_RDWR | os.O_CREAT, 0o644)
            except OSError as exc:
                if exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
                    return LockState("unwritable", self.read() or {}, exc.strerror or str(exc))
                raise
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                os.close(fd)
                return LockState("busy", self.read() or {})
            try:
                same = os.fstat(fd).st_ino == os.stat(self.path).st_ino
            except FileNotFoundError:
                same = False
            if not same:  # the holder released (unlinked) it between our open and our flock
                os.close(fd)
                continue
            state = self._check(fd, reclaim)
            if state.state != "owned":
                os.close(fd)
            return state
        return LockState("busy", self.read() or {})

    def _check(self, fd: int, reclaim: bool) -> LockState:
        data = b""
        with contextlib.suppress(OSError):
            data = os.pread(fd, 1 << 16, 0)
        info = _parse(data) if data.strip() else {}
        if info and not info.get("damaged") and not reclaim:
            pid = info.get("pid")
            here = info.get("host") == socket.gethostname()
            if not here or (isinstance(pid, int) and pid != os.getpid() and _pid_alive(pid)):
                # flock free but the holder may live: another host whose file system does not share
                # flocks, or a reviewer of an older version; never taken over by ourselves
                return LockState("busy", info)
            return LockState("stale", info)
        mine = json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "started": utc_now(),
                           "token": self.token}).encode("utf-8")
        try:
            os.ftruncate(fd, 0)
            os.pwrite(fd, mine, 0)
            os.fsync(fd)
        except OSError as exc:
            return LockState("unwritable", info, exc.strerror or str(exc))
        self.fd = fd
        return LockState("owned", info)

    def release(self) -> None:
        if self.fd < 0:
            return
        fd, self.fd = self.fd, -1
        try:
            if os.fstat(fd).st_ino == os.stat(self.path).st_ino:
                self.path.unlink()
        except OSError:  # a folder turned read-only: an empty lock file is a free one too
            with contextlib.suppress(OSError):
                os.ftruncate(fd, 0)
        os.close(fd)
