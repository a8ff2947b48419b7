"""Ctrl-C during `reviewer scan`: the process stops with exit 130, says so in one line, and writes
no candidate file (a half-finished scan must not look like a finished one)."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time

import numpy as np


def test_ctrl_c_stops_the_scan_cleanly(tmp_path):
    rng = np.random.default_rng(0)
    movie = tmp_path / "long.npy"
    # long enough that the scan is still running when the signal arrives: ~0.3 s of scanning at
    # the ~250,000 frames/s a 64² scan reaches on an idle core
    data = np.lib.format.open_memmap(movie, mode="w+", dtype=np.uint8, shape=(80_000, 64, 64))
    data[:] = rng.poisson(40, size=(1, 64, 64)).astype(np.uint8)
    data.flush()
    del data
    out = tmp_path / "cands.csv"
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.Popen([sys.executable, "-m", "reviewer", "scan", str(movie), "-o", str(out)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    first = proc.stderr.readline()  # the first progress line: the scan has started
    assert "frames" in first, first
    time.sleep(0.05)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    lines = [line for line in err.splitlines() if line.strip()]
    assert lines and "interrupted" in lines[-1] and "Traceback" not in err
    assert not out.exists()
