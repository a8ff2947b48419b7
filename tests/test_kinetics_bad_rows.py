"""`reviewer kinetics` refuses tables it cannot read honestly: one line on stderr naming the file and
the row, exit 2, nothing on stdout. Each case runs the real command in a subprocess."""

from __future__ import annotations

import json
import math
import os
import subprocess
import sys

import pytest

HEADER = "event_id,frame,time_s,frame_end,kind,score,x,y,status,label,note,source,reviewed_at"
FPS = 100.0


def _line(eid: str, frame: int, time_s: float | str | None = None, x: float = 10.0) -> str:
    t = frame / FPS if time_s is None else time_s
    return f"{eid},{frame},{t},,step,5,{x},20.00,accepted,layer,,detector,2025-01-01T00:00:00Z"


def write(folder, lines: list[str], frames: int | None = 1000, fps: float | None = FPS,
          name: str = "events"):
    path = folder / f"{name}.csv"
    path.write_text("\r\n".join([HEADER, *lines]) + "\r\n", encoding="utf-8")
    if frames is not None:
        (folder / f"{name}.json").write_text(json.dumps({"movie": {"frames": frames, "fps": fps}}))
    return path


def good(n: int = 8) -> list[str]:
    return [_line(f"e{i}", 20 + 37 * i + (i * i) % 11) for i in range(n)]


def run(*argv) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "reviewer.cli", "kinetics", *map(str, argv)],
                          capture_output=True, text=True, timeout=120,
                          env={**os.environ, "PYTHONWARNINGS": "ignore"})


def one_line_exit_2(done: subprocess.CompletedProcess, *words: str) -> str:
    assert done.returncode == 2, done.stderr
    assert done.stdout == ""
    lines = done.stderr.strip().splitlines()
    assert len(lines) == 1, done.stderr
    for w in words:
        assert w in lines[0], lines[0]
    return lines[0]


def test_duplicate_event_id(tmp_path):
    lines = good()
    lines[5] = lines[5].replace("e5,", "e2,", 1)
    one_line_exit_2(run(write(tmp_path, lines)), "events.csv", "row 6", "'e2'", "twice",
                    "row 3")


def test_negative_time(tmp_path):
    lines = good()
    lines[0] = _line("e0", 0, time_s=-0.5)
    one_line_exit_2(run(write(tmp_path, lines)), "events.csv", "row 1", "negative time_s")


def test_negative_frame(tmp_path):
    lines = [_line("e0", -3, time_s=""), *good()[1:]]
    one_line_exit_2(run(write(tmp_path, lines)), "row 1", "negative frame")


def test_time_past_the_recording(tmp_path):
    # 1000 frames at 100 fps: the recording lasts 10 s; an event at 12.5 s cannot be in it
    lines = [*good(), _line("e99", 999, time_s=12.5)]
    one_line_exit_2(run(write(tmp_path, lines)), "events.csv", "row 9", "12.5 s",
                    "outside the recording", "events.json")


def test_frame_past_the_recording(tmp_path):
    lines = [*good(), _line("e99", 1000, time_s="")]
    one_line_exit_2(run(write(tmp_path, lines)), "row 9", "frame 1000", "outside the recording")


def test_times_written_in_milliseconds(tmp_path):
    # time_s = 1000 x frame / fps: milliseconds in the seconds column; the sidecar's duration is
    # left out, so only the frame / time mismatch can tell
    lines = [_line(f"e{i}", 20 + 37 * i, time_s=(20 + 37 * i) / FPS * 1000) for i in range(8)]
    path = write(tmp_path, lines, frames=None)
    (tmp_path / "events.json").write_text(json.dumps({"movie": {"fps": FPS}}))
    one_line_exit_2(run(path), "events.csv", "1e+03 x frame / fps", "milliseconds")


@pytest.mark.parametrize("cut", [3, 9])
def test_short_row(tmp_path, cut):
    lines = good()
    lines[4] = ",".join(lines[4].split(",")[:cut])
    one_line_exit_2(run(write(tmp_path, lines)), "events.csv", "row 5", f"has {cut} field(s)",
                    "header has 13")


def test_short_row_in_a_quoted_table(tmp_path):
    # a quoted note (with a comma and a line break) sends the check through the csv module
    lines = good()
    lines[1] = lines[1].replace(",,detector", ',"a note, over\r\ntwo lines",detector')
    lines[6] = ",".join(lines[6].split(",")[:10])
    one_line_exit_2(run(write(tmp_path, lines)), "row 7", "has 10 field(s)")


def test_long_row(tmp_path):
    lines = good()
    lines[2] += ",extra"
    one_line_exit_2(run(write(tmp_path, lines)), "row 3", "has 14 field(s)")


def test_not_utf8(tmp_path):
    path = write(tmp_path, good())
    path.write_bytes(path.read_bytes().replace(b"layer", b"lay\xffer", 1))
    one_line_exit_2(run(path), "events.csv")


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0,
                    reason="root reads files whatever their mode")
def test_unreadable_file(tmp_path):
    path = write(tmp_path, good())
    path.chmod(0)
    try:
        one_line_exit_2(run(path), "events.csv", "cannot read")
    finally:
        path.chmod(0o644)


def test_a_folder_is_not_a_table(tmp_path):
    (tmp_path / "events.csv").mkdir()
    one_line_exit_2(run(tmp_path / "events.csv"), "events.csv")


def test_huge_position(tmp_path):
    lines = good()
    lines[3] = _line("e3", 20 + 37 * 3 + 9, x=1e300)
    one_line_exit_2(run(write(tmp_path, lines), "--by", "region"), "row 4", "not a pixel")


def test_absurd_layer_height_is_refused(tmp_path):
    one_line_exit_2(run(write(tmp_path, good()), "--layer-nm", "1e308", "--json"), "--layer-nm",
                    "not a layer height")


def test_json_never_holds_nan_or_infinity(tmp_path):
    # the largest accepted layer height, and equal waits (CV 0: no fits): strict JSON all the same
    lines = [_line(f"e{i}", 20 + 30 * i) for i in range(6)]
    done = run(write(tmp_path, lines), "--layer-nm", "10000", "--json")
    assert done.returncode == 0, done.stderr

    def strict(text):
        raise ValueError(f"not JSON: {text}")

    out = json.loads(done.stdout, parse_constant=strict)  # Python's json: NaN/Infinity refused

    def walk(v):
        if isinstance(v, dict):
            for x in v.values():
                walk(x)
        elif isinstance(v, list):
            for x in v:
                walk(x)
        elif isinstance(v, float):
            assert math.isfinite(v)

    walk(out)
    assert out["velocity_nm_per_s"] == pytest.approx(10000 * 5 / 1.5)


def test_plot_of_equally_spaced_events_is_small(tmp_path):
    # 6 accepted events at frames 20, 50, ..., 170 at 100 fps: every wait 0.3 s (no spread)
    lines = [_line(f"e{i}", f) for i, f in enumerate(range(20, 171, 30))]
    png = tmp_path / "k.png"
    done = run(write(tmp_path, lines, frames=200), "--plot", png)
    assert done.returncode == 0, done.stderr
    assert 0 < png.stat().st_size < 1_000_000
