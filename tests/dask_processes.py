"""A real Dask engine for tests: `dask scheduler` and `dask worker` processes on localhost, started
as subprocesses and stopped at the end (terminate, then kill after 20 s)."""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest


def reviewer(*args, env=None, timeout=300):
    """`python -m reviewer ARGS…` in a child process."""
    return subprocess.run([sys.executable, "-m", "reviewer", *map(str, args)],
                          capture_output=True, text=True, timeout=timeout, env=env)


def _wait_for(path: Path, seconds: float = 60) -> None:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        if path.exists() and path.stat().st_size > 0:
            return
        time.sleep(0.2)
    raise TimeoutError(f"{path} did not appear")


@contextlib.contextmanager
def dask_processes(folder: Path, workers: int = 2):
    """Yields the scheduler's address once `workers` single-thread workers have joined; skips the
    test when the `dask` command is not installed."""
    pytest.importorskip("distributed")
    dask = shutil.which("dask", path=os.path.dirname(sys.executable)) or shutil.which("dask")
    if dask is None:
        pytest.skip("the dask command is not installed")
    info = Path(folder) / "scheduler.json"
    quiet = {"stdout": subprocess.DEVNULL, "stderr": subprocess.DEVNULL}
    procs = [subprocess.Popen([dask, "scheduler", "--host", "127.0.0.1", "--port", "0",
                               "--no-dashboard", "--scheduler-file", str(info)], **quiet)]
    try:
        _wait_for(info)
        address = json.loads(info.read_text())["address"]
        procs += [subprocess.Popen([dask, "worker", address, "--nworkers", "1", "--nthreads", "1",
                                    "--no-dashboard", "--host", "127.0.0.1"], **quiet)
                  for _ in range(workers)]
        from distributed import Client

        with Client(address, timeout="30s") as c:
            c.wait_for_workers(workers, timeout=60)
        yield address
    finally:
        for p in procs[::-1]:
            p.terminate()
        for p in procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
