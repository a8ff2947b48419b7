"""Helpers of the fault-injection tests: run the real `reviewer` program in a subprocess, make small
input files, and restrict the child (no write permission, a file-size limit)."""

from __future__ import annotations

import ctypes
import hashlib
import json
import os
import resource
import signal
import stat
import subprocess
import sys
from pathlib import Path

import numpy as np

EVENT_HEADER = ("event_id,frame,time_s,frame_end,kind,score,x,y,status,label,note,source,"
                "reviewed_at")


def run(*args, cwd, preexec=None, timeout=90, env=None) -> subprocess.CompletedProcess:
    """`python -m reviewer ARGS` as a user runs it (args may be bytes, for non-UTF-8 names)."""
    cmd = [os.fsencode(sys.executable), b"-m", b"reviewer", *(os.fsencode(a) for a in args)]
    return subprocess.run(cmd, cwd=cwd, capture_output=True, timeout=timeout, preexec_fn=preexec,
                          env=env)


def text(data: bytes) -> str:
    return data.decode("utf-8", "backslashreplace")


def problem_lines(r: subprocess.CompletedProcess) -> list[str]:
    """The error lines on stderr: notices and progress-bar lines left out."""
    lines = text(r.stderr).replace("\r", "\n").splitlines()
    return [ln for ln in lines if ln.startswith("reviewer") and not ln.startswith("reviewer: notice:")]


def assert_refused(r: subprocess.CompletedProcess, *names: str) -> str:
    """Exit 2, no traceback, exactly one error line, naming each of `names`; returns that line."""
    err = text(r.stderr)
    assert "Traceback" not in err, err
    assert r.returncode == 2, (r.returncode, err)
    lines = problem_lines(r)
    assert len(lines) == 1, err
    for name in names:
        assert name in lines[0], (name, lines[0])
    return lines[0]


def digest(*paths: Path) -> dict[str, str]:
    return {str(p): hashlib.sha256(p.read_bytes()).hexdigest() for p in paths}


def movie_array(n: int = 60, h: int = 32, w: int = 32, seed: int = 0) -> np.ndarray:
    """Poisson noise with a lasting bright patch from frame n // 2 (one growth step)."""
    rng = np.random.default_rng(seed)
    lam = np.full((n, h, w), 30.0)
    lam[n // 2:, 8:16, 8:16] += 60
    return rng.poisson(lam).astype(np.uint16)


def write_raw(folder: Path, data: np.ndarray, name: str = "run.raw", **desc) -> Path:
    path = folder / name
    data.tofile(path)
    desc = {"shape": list(data.shape), "dtype": "uint16", "fps": 10.0, **desc}
    (folder / (name + ".json")).write_text(json.dumps(desc))
    return path


def write_events(path: Path, times: list[float], fps: float = 100.0, frames: int = 1000) -> Path:
    """An event table with accepted events at `times` and its sidecar."""
    rows = [f"e{i},{round(t * fps)},{t!r},,step,9,1,1,accepted,,,manual,"
            for i, t in enumerate(times, start=1)]
    path.write_text("\r\n".join([EVENT_HEADER, *rows]) + "\r\n")
    side = path.with_suffix(".json")
    side.write_text(json.dumps({"movie": {"frames": frames, "fps": fps,
                                          "duration_s": frames / fps}}))
    return path


# --- restricting the child -------------------------------------------------------------------------

def file_size_limit(limit: int):
    """preexec_fn: RLIMIT_FSIZE of `limit` bytes with SIGXFSZ ignored, so a write past it fails with
    EFBIG, as on a full disk (the failure reaches the program as an OSError)."""
    def _apply() -> None:
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    return _apply


def _others_reach(path: Path) -> bool:
    """Whether a user who is neither owner nor group can reach (x on every folder) the path."""
    p = Path(os.path.realpath(path))
    return all(os.stat(d).st_mode & stat.S_IXOTH for d in [*reversed(p.parents)])


def _as_nobody() -> None:
    os.setgid(65534)
    os.setuid(65534)


_CAP_DAC_OVERRIDE, _CAP_DAC_READ_SEARCH, _CAP_FOWNER = 1, 2, 3
_PR_CAPBSET_DROP = 24


def _without_file_capabilities() -> None:
    """Root without CAP_DAC_OVERRIDE, CAP_DAC_READ_SEARCH and CAP_FOWNER: file modes apply to it
    (they are dropped from the bounding set, so the program started next never gets them)."""
    libc = ctypes.CDLL(None, use_errno=True)
    for cap in (_CAP_DAC_OVERRIDE, _CAP_DAC_READ_SEARCH, _CAP_FOWNER):
        if libc.prctl(_PR_CAPBSET_DROP, cap, 0, 0, 0) != 0:
            raise OSError(ctypes.get_errno(), "prctl(PR_CAPBSET_DROP)")


def unprivileged(folder: Path):
    """(preexec_fn, why) to run the program so that file permissions bind it, with `folder` usable.

    Not root: (None, ""). Root: user 65534 when it can reach the interpreter, the package and
    `folder`; else root without the capabilities that bypass file modes; (False, reason) when
    neither works here."""
    if os.geteuid() != 0:
        return None, ""
    import reviewer

    probe_dir = folder / "probe"
    probe_dir.mkdir(exist_ok=True)
    os.chmod(probe_dir, 0o555)
    candidates = []
    if all(_others_reach(p) for p in (Path(sys.executable), Path(reviewer.__file__), folder)):
        candidates.append(_as_nobody)
    candidates.append(_without_file_capabilities)
    tried = []
    for preexec in candidates:
        try:
            r = subprocess.run([sys.executable, "-c", f"open({str(probe_dir / 'x')!r}, 'w')"],
                               preexec_fn=preexec, capture_output=True, text=True, timeout=30)
        except (OSError, subprocess.SubprocessError) as exc:
            tried.append(f"{preexec.__name__}: {exc}")
            continue
        if r.returncode != 0 and "PermissionError" in r.stderr:
            os.chmod(probe_dir, 0o755)
            return preexec, ""
        tried.append(f"{preexec.__name__}: a read-only folder was still writable")
    os.chmod(probe_dir, 0o755)
    return False, "running as root and cannot drop the right to write anywhere (" + "; ".join(tried) + ")"
