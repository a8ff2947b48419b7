"""Seeded fuzz of the inputs a user hands the command line: raw-movie descriptors (`<data>.json`, and
the data file's length) for `info` and `scan`, event-table CSV rows and sidecars for `kinetics`.

Every case must end in exit 2 with one line naming one of its files, or exit 0 with a consistent
result; never a traceback (stderr holding "Traceback"), another exit code or a hang (time limit).
The cases run in forked children of one interpreter that imported the program once
(tests/forkrun.py), so a few hundred cases take seconds; REVIEWER_HEAVY=1 runs many more."""

from __future__ import annotations

import csv
import io
import json
import math
import os
import random
import subprocess
import sys
from pathlib import Path

import pytest

HERE = Path(__file__).parent
N_FAST, N_HEAVY = 100, 1500

POOL = [None, True, False, 0, 1, -1, 2, 3, 7, 8, 9, 16, 17, 2**31, 2**63, -2**63, 10**400 // 10**300,
        1e308, -1e308, 1e-308, 0.5, float("nan"), float("inf"), "nan", "inf", "", "8", "uint16",
        "float32", "float64", "complex64", "int8", "bool", "S3", "object", "<u2", ">f8", "V2",
        "little", "big", "middle", "<", "run.raw", "../run.raw", "/", "/dev/zero", "nope.raw",
        [], {}, [1], [8, 16, 16], [0, 16, 16], [8, -16, 16], [2**40, 16, 16], [8, 16, 16, 1],
        "x" * 300, "\u00e9\u0000"]
BASE_DESC = {"shape": [8, 16, 16], "dtype": "uint16", "byte_order": "little", "header_bytes": 0,
             "fps": 10.0}
KEYS = [*BASE_DESC, "height", "width", "file"]


def _run_all(cases: list[dict], tmp_path: Path) -> list[dict]:
    spec, out = tmp_path / "cases.json", tmp_path / "results.json"
    spec.write_text(json.dumps(cases))
    r = subprocess.run([sys.executable, str(HERE / "forkrun.py"), str(spec), str(out)],
                       capture_output=True, text=True, timeout=30 + 20 * len(cases))
    assert r.returncode == 0, r.stderr
    return json.loads(out.read_text())


def _strict_json(text: str):
    def bad(name):
        raise ValueError(f"not JSON: {name}")
    return json.loads(text, parse_constant=bad)


def _check_common(res: dict, names: list[str], what: str) -> list[str] | None:
    """The error lines of an exit-2 result (asserted to be one, naming a file); None on exit 0."""
    assert res["rc"] != "timeout", f"hang: {what}"
    assert "Traceback" not in res["stderr"], f"{what}\n{res['stderr']}"
    assert res["rc"] in (0, 2), f"exit {res['rc']}: {what}\n{res['stderr']}"
    if res["rc"] == 0:
        return None
    lines = [ln for ln in res["stderr"].replace("\r", "\n").splitlines()
             if ln.startswith("reviewer") and not ln.startswith("reviewer: notice:")]
    assert len(lines) == 1, f"{what}\n{res['stderr']}"
    assert any(n in lines[0] for n in names), f"no file named: {lines[0]!r} ({what})"
    return lines


def _all_hold(check, made: list[tuple], results: list[dict]) -> None:
    """Run `check` on every case; fail listing every case that broke (up to five shown)."""
    broken = []
    for (case, names, facts), res in zip(made, results, strict=True):
        try:
            check(res, case, names, facts)
        except AssertionError as exc:
            broken.append(str(exc).splitlines()[0][:600])
    assert not broken, f"{len(broken)} of {len(made)} cases broke:\n" + "\n".join(broken[:5])


# --- raw descriptors -----------------------------------------------------------------------------

def _descriptor_case(rng: random.Random, folder: Path, i: int) -> tuple[dict, list[str], dict]:
    case = folder / f"d{i:04d}"
    case.mkdir()
    data = bytes(rng.randrange(256) for _ in range(64)) * 64  # 4096 bytes: 8 frames 16x16 uint16
    desc: object = dict(BASE_DESC)
    for _ in range(rng.randint(1, 3)):
        kind = rng.random()
        if kind < 0.5 and isinstance(desc, dict):
            desc[rng.choice(KEYS)] = rng.choice(POOL)
        elif kind < 0.65 and isinstance(desc, dict):
            desc.pop(rng.choice(KEYS), None)
        elif kind < 0.75:
            desc = rng.choice([[], 3, None, "shape", [BASE_DESC]])
        elif kind < 0.9:
            data = data[: rng.randrange(0, len(data) + 1)]
        else:
            data += bytes(rng.randrange(1, 600))
    text = json.dumps(desc)  # NaN and Infinity come out as the non-standard literals
    if rng.random() < 0.15:  # a damaged text
        cut = rng.randrange(len(text) + 1)
        text = text[:cut] + rng.choice(["", "\x00", "}", "\udcff", "\u00e9", "{{"]) + text[cut:]
    (case / "run.raw").write_bytes(data)
    (case / "run.raw.json").write_bytes(text.encode("utf-8", "surrogateescape"))
    given = rng.choice(["run.raw", "run.raw.json"])
    argv = ["scan", given, "-o", "out.csv"] if rng.random() < 0.3 else ["info", given, "--json"]
    names = ["run.raw", "out.csv"]
    if isinstance(desc, dict) and "file" in desc:  # the data file the descriptor names
        value = str(desc["file"])
        names.append(os.path.basename(value.rstrip("/")) or value)
    facts = {"size": len(data), "desc": text}
    return {"argv": argv, "cwd": str(case), "timeout": 20}, names, facts


def _check_descriptor(res: dict, case: dict, names: list[str], facts: dict) -> None:
    what = f"{case['argv']} with descriptor {facts['desc'][:200]!r}, data {facts['size']} bytes"
    if _check_common(res, names, what) is not None:
        return
    if case["argv"][0] == "info":
        d = _strict_json(res["stdout"])
        assert d["frames"] >= 1 and d["height"] >= 1 and d["width"] >= 1, what
        assert d["frames"] * d["height"] * d["width"] <= facts["size"], what  # >= 1 byte a pixel
        assert d["fps"] is None or 1e-6 <= d["fps"] <= 1e7, what
    else:
        out = Path(case["cwd"]) / "out.csv"
        assert out.read_text().startswith("event_id,"), what


def _descriptor_fuzz(tmp_path: Path, n: int, seed: int) -> None:
    rng = random.Random(seed)
    made = [_descriptor_case(rng, tmp_path, i) for i in range(n)]
    results = _run_all([c for c, _, _ in made], tmp_path)
    _all_hold(_check_descriptor, made, results)


def test_fuzzed_raw_descriptors(tmp_path):
    _descriptor_fuzz(tmp_path, N_FAST, seed=20261202)


@pytest.mark.heavy
def test_fuzzed_raw_descriptors_many(tmp_path):
    _descriptor_fuzz(tmp_path, N_HEAVY, seed=7)


# --- event tables ---------------------------------------------------------------------------------

HEADER = ["event_id", "frame", "time_s", "frame_end", "kind", "score", "x", "y", "status", "label",
          "note", "source", "reviewed_at"]
TIMES = [0.21, 0.5, 0.93, 1.4, 1.62, 2.3, 2.9, 3.05, 3.7]
CELLS = ["", " ", "nan", "NaN", "inf", "-inf", "-1", "0", "-0", "1e308", "1e-320", "abc", '"',
         "=1+1", "\x00", "x" * 5000, "0x10", " 1.5 ", "1,5", "accepted", "rejected", "candidate",
         "ACCEPTED", "global", "manual", "detector", "\u00e9", "\r", "\n", "9" * 40, "2.5", "17"]
OPTIONS = [[], [], ["--by", "label"], ["--by", "region"], ["--status", "accepted,candidate"],
           ["--label", "a"], ["--layer-nm", "0.5"], ["--layer-nm", "1e300"]]


def _table_rows() -> list[list[str]]:
    rows = [HEADER]
    for i, t in enumerate(TIMES, start=1):
        rows.append([f"e{i}", str(round(t * 100)), repr(t), "", "step", "9", str(i * 3.0), "4.0",
                     "accepted", "a" if i % 2 else "b", "", "manual", ""])
    return rows


def _csv_text(rows: list[list[str]]) -> str:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\r\n").writerows(rows)
    return buf.getvalue()


def _table_case(rng: random.Random, folder: Path, i: int) -> tuple[dict, list[str], int]:
    case = folder / f"t{i:04d}"
    case.mkdir()
    rows = _table_rows()
    sidecar: object = {"movie": {"frames": 400, "fps": 100.0, "duration_s": 4.0}}
    raw_text = None
    for _ in range(rng.randint(1, 3)):
        kind = rng.random()
        r = rng.randrange(len(rows))
        if kind < 0.45:
            row = rows[r]
            if row:
                row[rng.randrange(len(row))] = rng.choice(CELLS)
        elif kind < 0.55 and rows[r]:
            rows[r].pop(rng.randrange(len(rows[r])))  # a short row
        elif kind < 0.6:
            rows[r].append(rng.choice(CELLS))  # a long row
        elif kind < 0.68:
            rows.insert(r, list(rows[rng.randrange(1, len(rows))]) if len(rows) > 1 else [])
        elif kind < 0.74 and len(rows) > 1:
            del rows[rng.randrange(1, len(rows))]
        elif kind < 0.8:
            rows.insert(r, [rng.choice(CELLS) for _ in range(rng.randrange(0, 15))])
        elif kind < 0.9 and isinstance(sidecar, dict) and isinstance(sidecar.get("movie"), dict):
            sidecar["movie"][rng.choice(["frames", "fps", "duration_s"])] = rng.choice(POOL)
        elif kind < 0.95:
            sidecar = rng.choice([None, [], "movie", {"movie": []}, {"movie": None}, {}])
        else:
            raw_text = _csv_text(rows)
            raw_text = raw_text[: rng.randrange(len(raw_text) + 1)] + rng.choice(
                ["", '"unterminated', "\ufeff", "\x00\x01", "\udcfe"])
    text = raw_text if raw_text is not None else _csv_text(rows)
    if rng.random() < 0.05:
        text = "\ufeff" + text
    (case / "e.csv").write_bytes(text.encode("utf-8", "surrogateescape"))
    if rng.random() < 0.9:
        side = json.dumps(sidecar)
        if rng.random() < 0.1:
            side = side[: rng.randrange(len(side) + 1)]
        (case / "e.json").write_text(side)
    argv = ["kinetics", "e.csv", "--json", *rng.choice(OPTIONS)]
    lines = max(0, len([ln for ln in text.splitlines() if ln.strip()]) - 1)
    return {"argv": argv, "cwd": str(case), "timeout": 30}, ["e.csv", "e.json", "--layer-nm"], lines


def _check_table(res: dict, case: dict, names: list[str], lines: int) -> None:
    text = (Path(case["cwd"]) / "e.csv").read_bytes()[:600]
    what = f"{case['argv']} on {text!r}"
    if _check_common(res, names, what) is not None:
        return
    d = _strict_json(res["stdout"])
    n = d["events"]
    assert 2 <= n <= lines + text.count(b"\r") + 1, what  # never more events than rows
    assert d["intervals"] == n - 1, what
    assert d["first_time_s"] <= d["last_time_s"], what
    assert math.isclose(d["span_s"], d["last_time_s"] - d["first_time_s"], rel_tol=1e-9,
                        abs_tol=1e-12), what


def test_the_unchanged_table_gives_the_known_figures(tmp_path):
    """The control of the table fuzz: 9 events, 8 intervals, span 3.7 - 0.21 s."""
    (tmp_path / "e.csv").write_text(_csv_text(_table_rows()))
    res = _run_all([{"argv": ["kinetics", "e.csv", "--json"], "cwd": str(tmp_path)}], tmp_path)[0]
    assert res["rc"] == 0, res["stderr"]
    d = _strict_json(res["stdout"])
    assert (d["events"], d["intervals"]) == (9, 8)
    assert d["span_s"] == pytest.approx(3.7 - 0.21)


def _table_fuzz(tmp_path: Path, n: int, seed: int) -> None:
    rng = random.Random(seed)
    made = [_table_case(rng, tmp_path, i) for i in range(n)]
    results = _run_all([c for c, _, _ in made], tmp_path)
    _all_hold(_check_table, made, results)


def test_fuzzed_event_tables(tmp_path):
    _table_fuzz(tmp_path, N_FAST, seed=20261202)


@pytest.mark.heavy
def test_fuzzed_event_tables_many(tmp_path):
    _table_fuzz(tmp_path, N_HEAVY, seed=11)
