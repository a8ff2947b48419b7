"""A session lock: a small JSON file naming the process (pid, host, start time) that holds the session.

It only warns: a second session on the same folder is told who holds it (the caller decides whether to
go on). A lock left by a dead process on this host is taken over silently.
"""

from __future__ import annotations

import contextlib
import json
import os
import socket
import uuid
from pathlib import Path

from reviewer.store.events import utc_now

LOCK = "lock"
_HELD: set[str] = set()  # lock files held by Session objects of this process


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


class SessionLock:
    def __init__(self, folder: Path) -> None:
        self.path = folder / LOCK
        self.token = uuid.uuid4().hex
        self.owned = False

    def read(self) -> dict | None:
        try:
            info = json.loads(self.path.read_text(encoding="utf-8"))
            return info if isinstance(info, dict) else {}
        except FileNotFoundError:
            return None
        except (OSError, ValueError):
            return {}  # unreadable lock: treat as stale

    def _holder_alive(self, info: dict) -> bool:
        if not info:
            return False
        if info.get("host") != socket.gethostname():
            return True  # cannot tell for another machine: assume it lives
        pid = info.get("pid")
        if not isinstance(pid, int):
            return False
        if pid == os.getpid():
            return str(self.path) in _HELD
        return _pid_alive(pid)

    def acquire(self) -> str | None:
        """Take the lock; return a warning (and do not take it) when a live session holds it."""
        info = self.read()
        if info is not None and self._holder_alive(info):
            return (f"{self.path.parent}: this session is already open in another reviewer "
                    f"(pid {info.get('pid')} on {info.get('host')}, since {info.get('started')}); "
                    "decisions made in both at once can be lost")
        mine = json.dumps({"pid": os.getpid(), "host": socket.gethostname(), "started": utc_now(),
                           "token": self.token})
        try:
            if info is None:  # no lock: create it exclusively, so two starters cannot both win
                try:
                    fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
                except FileExistsError:
                    return self.acquire()
                with os.fdopen(fd, "w", encoding="utf-8") as f:
                    f.write(mine)
            else:  # a stale lock: replace it in one step
                tmp = self.path.with_name(f"{LOCK}.{self.token}.tmp")
                try:
                    tmp.write_text(mine, encoding="utf-8")
                    os.replace(tmp, self.path)
                finally:
                    with contextlib.suppress(OSError):
                        tmp.unlink()
        except OSError:
            return None  # a folder that cannot hold a lock: nothing to warn about
        self.owned = True
        _HELD.add(str(self.path))
        return None

    def release(self) -> None:
        if not self.owned:
            return
        self.owned = False
        _HELD.discard(str(self.path))
        info = self.read()
        if info and info.get("token") == self.token:
            with contextlib.suppress(OSError):
                self.path.unlink()
