"""What the kinetics report prints beside its figures: the frame time beside every wait (so a wait
of a few frames shows as such) and the simulated coverage beside the renewal rate interval."""

from __future__ import annotations

import json
import re

import numpy as np
import pytest

from reviewer.cli import main
from reviewer.kinetics.renewal import RATE_COVERAGE, rate_coverage
from reviewer.store.table import write_csv

FPS = 400.0


def table(tmp_path, frames, fps=FPS):
    rows = [dict(event_id=f"d{i:06d}", frame=int(f), time_s=f / FPS, frame_end=None, kind="step",
                 score=5.0, x=10, y=10, status="accepted", label="layer", note="",
                 source="detector", reviewed_at="2026-01-01T00:00:00Z")
            for i, f in enumerate(frames)]
    path = tmp_path / "events.csv"
    write_csv(rows, path)
    (tmp_path / "events.json").write_text(json.dumps(
        {"movie": {"frames": int(frames[-1]) + 50, "fps": fps, "path": "m.tif",
                   "duration_s": (int(frames[-1]) + 50) / fps if fps else None}}))
    return path


def row(text: str, name: str) -> str:
    line = next(ln for ln in text.splitlines() if ln.startswith(name))
    return line[len(name):].strip()


def test_waits_are_shown_in_frames_beside_seconds(tmp_path, capsys):
    rng = np.random.default_rng(5)
    frames = 20 + np.cumsum(rng.integers(3, 400, 31))
    assert main(["kinetics", str(table(tmp_path, frames))]) == 0
    out = capsys.readouterr().out
    assert row(out, "frame time").startswith("2.5 ms")
    waits = np.diff(frames) / FPS
    for name, value in (("interval mean", waits.mean()), ("interval median", np.median(waits)),
                        ("interval SD (ddof 1)", waits.std(ddof=1)),
                        ("shortest interval", waits.min())):
        m = re.fullmatch(r"(\S+) s = (\S+) frames", row(out, name))
        assert m, (name, row(out, name))
        assert float(m[1]) == pytest.approx(value, rel=1e-3)
        assert float(m[2]) == pytest.approx(value * FPS, rel=1e-2)


def test_without_frame_rate_the_report_says_so(tmp_path, capsys):
    frames = np.arange(1, 31) * 37
    path = table(tmp_path, frames, fps=None)
    assert main(["kinetics", str(path)]) == 0
    out = capsys.readouterr().out
    assert row(out, "frame time").startswith("unknown")
    assert "frames" not in row(out, "interval mean")


def test_renewal_rate_interval_prints_its_simulated_coverage(tmp_path, capsys):
    rng = np.random.default_rng(9)
    frames = 10 + np.cumsum(np.maximum(1, np.round(rng.gamma(4.0, 30.0, 30)))).astype(int)
    assert main(["kinetics", str(table(tmp_path, frames))]) == 0
    text = row(capsys.readouterr().out, "rate k/span  [95 %, gamma renewal]")
    m = re.search(r"covers ~(\S+)$", text)
    assert m and float(m[1]) == rate_coverage(29) == dict(RATE_COVERAGE)[20]


def test_rate_coverage_table_is_the_lowest_at_or_below_k():
    assert rate_coverage(4) == RATE_COVERAGE[0][1]
    assert rate_coverage(10_000) == RATE_COVERAGE[-1][1]
    assert all(0.9 <= c <= 0.98 for _, c in RATE_COVERAGE)  # the acceptance band of the issue
