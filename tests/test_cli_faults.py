"""Fault injection at the command line: the real program in a subprocess under a read-only folder, a
full disk (RLIMIT_FSIZE), too little memory (RLIMIT_AS), unreadable files, file names that are not
UTF-8, absurd frame rates and truncated movies. Each ends in one line and exit 2 (or a correct
result and the user told), never a traceback, never a partial output."""

from __future__ import annotations

import json
import os
import resource

import numpy as np
import pytest
from faultkit import (
    assert_refused,
    digest,
    file_size_limit,
    movie_array,
    problem_lines,
    run,
    text,
    unprivileged,
    write_events,
    write_raw,
)


def _strict_json(data: bytes):
    """json.loads that refuses NaN and Infinity (RFC 8259 has no such numbers)."""
    def bad(name):
        raise ValueError(f"not JSON: {name}")
    return json.loads(data, parse_constant=bad)


@pytest.fixture
def place(tmp_path):
    """A folder usable by an unprivileged child, with the movie, an event table and a read-only
    sub-folder holding a copy of both; the child's cache and data folders inside it."""
    preexec, why = unprivileged(tmp_path)
    os.chmod(tmp_path, 0o777)
    np.save(tmp_path / "m.npy", movie_array())
    write_events(tmp_path / "e.csv", [0.2, 0.55, 0.8, 1.3, 1.7, 2.6, 3.1])
    ro = tmp_path / "ro"
    ro.mkdir()
    for name in ("m.npy", "e.csv", "e.json"):
        (ro / name).write_bytes((tmp_path / name).read_bytes())
        os.chmod(ro / name, 0o644)
    os.chmod(ro, 0o555)
    env = dict(os.environ)
    for var, sub in (("REVIEWER_CACHE_DIR", "cache"), ("REVIEWER_DATA_DIR", "data")):
        (tmp_path / sub).mkdir(mode=0o777)
        os.chmod(tmp_path / sub, 0o777)
        env[var] = str(tmp_path / sub)
    yield tmp_path, preexec, why, env
    os.chmod(ro, 0o755)


def _leftovers(folder) -> list[str]:
    return sorted(p for p in os.listdir(folder) if p.endswith(".part") or p.startswith("out"))


@pytest.mark.parametrize("argv", [
    ["scan", "m.npy", "-o", "ro/out.csv"],
    ["export", "m.npy", "-o", "ro/out.csv"],
    ["kinetics", "e.csv", "--plot", "ro/out.png"],
], ids=["scan", "export", "kinetics-plot"])
def test_output_into_a_read_only_folder_is_one_line(place, argv):
    folder, preexec, why, env = place
    if preexec is False:
        pytest.skip(why)
    r = run(*argv, cwd=folder, preexec=preexec, env=env)
    assert_refused(r, argv[-1], "not writable")
    assert _leftovers(folder / "ro") == []


def test_a_write_protected_output_file_is_not_replaced(place):
    folder, preexec, why, env = place
    if preexec is False:
        pytest.skip(why)
    (folder / "kept.csv").write_bytes(b"mine\r\n")
    os.chmod(folder / "kept.csv", 0o444)
    r = run("scan", "m.npy", "-o", "kept.csv", cwd=folder, preexec=preexec, env=env)
    assert_refused(r, "kept.csv", "write-protected")
    assert (folder / "kept.csv").read_bytes() == b"mine\r\n"


def test_an_unwritable_cache_folder_is_a_notice_and_the_scan_still_written(place):
    folder, preexec, why, env = place
    if preexec is False:
        pytest.skip(why)
    env = {**env, "REVIEWER_CACHE_DIR": str(folder / "ro" / "cache")}
    r = run("scan", "m.npy", "-o", "cands.csv", cwd=folder, preexec=preexec, env=env)
    assert r.returncode == 0, text(r.stderr)
    assert "Traceback" not in text(r.stderr) and "cannot use the cache folder" in text(r.stderr)
    assert (folder / "cands.csv").read_text().startswith("event_id,")
    # ... and with the movie's own folder read-only too, the default output has nowhere to go
    r = run("scan", "ro/m.npy", cwd=folder, preexec=preexec, env=env)
    assert_refused(r, "m.candidates.csv")


def test_unreadable_inputs_are_one_line_naming_the_file(place):
    folder, preexec, why, env = place
    if preexec is False:
        pytest.skip(why)
    for name in ("e.csv", "m.npy"):
        os.chmod(folder / name, 0)
    assert_refused(run("kinetics", "e.csv", cwd=folder, preexec=preexec, env=env), "e.csv")
    assert_refused(run("info", "m.npy", cwd=folder, preexec=preexec, env=env), "m.npy")
    # --debug keeps the traceback for the developer
    r = run("--debug", "kinetics", "e.csv", cwd=folder, preexec=preexec, env=env)
    assert r.returncode != 0 and "Traceback" in text(r.stderr)


@pytest.mark.parametrize("argv", [["scan", "m.npy", "-o", "out.csv"],
                                  ["export", "m.npy", "-o", "out.csv"]], ids=["scan", "export"])
def test_a_full_disk_leaves_the_earlier_output_whole(tmp_path, argv):
    np.save(tmp_path / "m.npy", movie_array())
    (tmp_path / "out.csv").write_text("earlier result\r\n")
    (tmp_path / "out.json").write_text('{"earlier": true}')
    before = digest(tmp_path / "out.csv", tmp_path / "out.json")
    r = run(*argv, cwd=tmp_path, preexec=file_size_limit(60))
    # export fails on its output; scan already on the features it writes into the cache as it goes
    line = assert_refused(r, "out." if argv[0] == "export" else "cannot keep the scan's features")
    assert "file too large" in line
    assert digest(tmp_path / "out.csv", tmp_path / "out.json") == before
    assert not [p for p in os.listdir(tmp_path) if p.endswith(".part")]


def test_too_little_memory_is_one_line(tmp_path):
    """A raw movie of two 1 GiB frames (a sparse file) read with a 1.5 GB address-space limit."""
    data = tmp_path / "huge.raw"
    with open(data, "wb") as f:
        f.truncate(2 * 23170 * 23170 * 2)
    (tmp_path / "huge.raw.json").write_text(json.dumps({"shape": [2, 23170, 23170],
                                                        "dtype": "uint16", "fps": 10}))

    def limit():
        resource.setrlimit(resource.RLIMIT_AS, (1_500_000_000, 1_500_000_000))

    r = run("scan", "huge.raw", "-o", "out.csv", cwd=tmp_path, preexec=limit)
    assert_refused(r, "huge.raw")
    assert not (tmp_path / "out.csv").exists()


NAME = b"caf\xe9"  # Latin-1 e-acute: not UTF-8


def test_file_names_that_are_not_utf8(tmp_path):
    folder = os.fsencode(tmp_path)
    np.save(os.fsdecode(os.path.join(folder, NAME + b".npy")), movie_array())
    r = run("info", NAME + b".npy", cwd=tmp_path)
    assert r.returncode == 0 and b"caf\\xe9.npy" in r.stdout, text(r.stderr)
    r = run("scan", NAME + b".npy", cwd=tmp_path)
    assert r.returncode == 0 and "Traceback" not in text(r.stderr), text(r.stderr)
    r = run("export", NAME + b".npy", cwd=tmp_path)
    assert r.returncode == 0 and "Traceback" not in text(r.stderr), text(r.stderr)
    csv_path = os.path.join(folder, NAME + b".events.csv")
    with open(os.path.join(folder, NAME + b".events.json"), "rb") as f:
        side = _strict_json(f.read())
    assert os.path.isfile(csv_path)
    # the sidecar holds the name as its JSON escape; decoded it is the same bytes again
    assert os.fsencode(side["csv"]) == NAME + b".events.csv"
    assert os.fsencode(side["movie"]["path"]).endswith(NAME + b".npy")
    assert_refused(run("info", b"gone\xff.npy", cwd=tmp_path), "gone\\xff.npy")


@pytest.mark.parametrize("fps", ["inf", "nan", "1e-308", "1e8", "-3", "0"])
def test_absurd_fps_from_the_option_is_one_line(tmp_path, fps):
    np.save(tmp_path / "m.npy", movie_array(n=8))
    assert_refused(run("info", "m.npy", "--fps", fps, cwd=tmp_path), "fps")


@pytest.mark.parametrize("fps", [1e-308, 1e300, 5e7])
def test_absurd_fps_from_the_file_is_one_line_and_fps_overrides_it(tmp_path, fps):
    write_raw(tmp_path, movie_array(n=8), fps=fps)
    assert_refused(run("info", "run.raw", "--json", cwd=tmp_path), "run.raw", "--fps")
    r = run("info", "run.raw", "--json", "--fps", "10", cwd=tmp_path)
    assert r.returncode == 0 and _strict_json(r.stdout)["fps"] == 10


def test_info_json_is_strict_json_at_the_ends_of_the_fps_range(tmp_path):
    np.save(tmp_path / "m.npy", movie_array(n=8))
    for fps, duration in (("1e-6", 8e6), ("1e7", 8e-7)):
        r = run("info", "m.npy", "--json", "--fps", fps, cwd=tmp_path)
        d = _strict_json(r.stdout)
        assert d["duration_s"] == pytest.approx(duration)  # 8 frames / fps


def test_every_command_that_opens_a_movie_repeats_its_notices(tmp_path):
    full = tmp_path / "full.npy"
    np.save(full, movie_array(n=40))
    (tmp_path / "cut.npy").write_bytes(full.read_bytes()[: 128 + 25 * 32 * 32 * 2 + 100])
    said = {}
    for cmd in (["info"], ["scan", "-o", "c.csv"], ["export", "-o", "x.csv"]):
        r = run(cmd[0], "cut.npy", *cmd[1:], cwd=tmp_path)
        assert r.returncode == 0, text(r.stderr)
        said[cmd[0]] = [ln for ln in text(r.stderr).replace("\r", "\n").splitlines()
                        if ln.startswith("reviewer: notice:")]
    assert said["info"] and "truncated" in said["info"][0]
    assert said["scan"] == said["info"] == said["export"]


def test_usage_errors_are_one_line(tmp_path):
    r = run("scan", cwd=tmp_path)
    assert r.returncode == 2 and len(problem_lines(r)) == 1 and "MOVIE" in text(r.stderr)
    assert len(text(r.stderr).splitlines()) == 1
