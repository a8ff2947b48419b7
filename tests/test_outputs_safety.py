"""No output may overwrite an input, and outputs appear whole or not at all (reviewer/outputs.py).

The reproductions run the real program in a subprocess and check three things: exit 2, one line
naming the file, and every input byte-for-byte unchanged (sha256)."""

from __future__ import annotations

import json
import os

import numpy as np
import pytest
import tifffile
from faultkit import assert_refused, digest, movie_array, run, write_events, write_raw

from reviewer.errors import BadInput
from reviewer.outputs import WriteFailed, guard, movie_files, replacing


@pytest.fixture
def folder(tmp_path):
    data = movie_array()
    np.save(tmp_path / "m.npy", data)
    tifffile.imwrite(tmp_path / "m.tif", data)
    write_raw(tmp_path, data)
    write_events(tmp_path / "e.csv", [0.2, 0.55, 0.8, 1.3, 1.7, 2.6, 3.1])
    return tmp_path


INPUTS = ("m.npy", "m.tif", "run.raw", "run.raw.json", "e.csv", "e.json")

REPRODUCTIONS = [
    (["scan", "m.npy", "-o", "m.npy"], "m.npy", "the movie"),
    (["export", "m.tif", "-o", "m.tif"], "m.tif", "the movie"),
    (["kinetics", "e.csv", "--plot", "e.csv"], "e.csv", "the input table"),
    (["kinetics", "e.csv", "--plot", "e.json"], "e.json", "the input table's sidecar"),
    (["export", "run.raw", "-o", "run.raw.csv"], "run.raw.json", "raw descriptor"),
    (["export", "run.raw.json", "-o", "run.raw.csv"], "run.raw.json", "raw descriptor"),
    (["scan", "m.npy", "-o", "m.npy.times.csv"], "m.npy.times.csv", "frame times"),
]


@pytest.mark.parametrize(("argv", "name", "role"), REPRODUCTIONS,
                         ids=[" ".join(a) for a, _, _ in REPRODUCTIONS])
def test_an_output_onto_an_input_is_refused_and_the_input_kept(folder, argv, name, role):
    before = digest(*(folder / n for n in INPUTS))
    r = run(*argv, cwd=folder)
    line = assert_refused(r, name)
    assert role in line
    assert digest(*(folder / n for n in INPUTS)) == before
    assert not (folder / "m.npy.times.csv").exists()  # nothing new that would become an input
    assert not [p for p in os.listdir(folder) if p.endswith(".part")]


def test_symlinks_and_hard_links_to_an_input_are_refused(folder):
    os.symlink("m.npy", folder / "soft.csv")
    os.link(folder / "m.tif", folder / "hard.csv")
    before = digest(folder / "m.npy", folder / "m.tif")
    line = assert_refused(run("scan", "m.npy", "-o", "soft.csv", cwd=folder), "soft.csv")
    assert "the movie m.npy" in line
    # the export's sidecar of x.csv is x.json: a hard link to the TIFF named that way is caught too
    os.link(folder / "m.tif", folder / "x.json")
    assert_refused(run("export", "m.tif", "-o", "x.csv", cwd=folder), "x.json")
    assert_refused(run("export", "m.tif", "-o", "hard.csv", cwd=folder), "hard.csv")
    assert digest(folder / "m.npy", folder / "m.tif") == before
    assert not (folder / "x.csv").exists()


def test_session_files_are_refused_as_outputs(folder):
    session = folder / "m.npy.review"
    r = run("export", "m.npy", "-o", str(session / "snapshot.csv"), cwd=folder)
    assert_refused(r, "snapshot.csv")
    assert not (session / "snapshot.json").exists()
    own = folder / "elsewhere"
    r = run("export", "m.npy", "--session", str(own), "-o", str(own / "journal.csv"), cwd=folder)
    assert_refused(r, "journal.csv")
    assert not (own / "journal.jsonl").exists() and not (own / "journal.csv").exists()


def test_a_frame_folder_movie_gets_no_output_inside_it(tmp_path):
    frames = tmp_path / "frames"
    frames.mkdir()
    for i, f in enumerate(movie_array(n=6)):
        tifffile.imwrite(frames / f"f{i:03d}.tif", f)
    before = digest(*sorted(frames.iterdir()))
    assert_refused(run("scan", "frames", "-o", "frames/f000.tif", cwd=tmp_path), "f000.tif")
    assert_refused(run("scan", "frames", "-o", "frames/new.csv", cwd=tmp_path), "new.csv")
    assert digest(*sorted(frames.iterdir())) == before


def test_ordinary_outputs_still_work_and_carry_the_usual_permissions(folder):
    r = run("export", "m.tif", "-o", "out.csv", cwd=folder)
    assert r.returncode == 0, r.stderr
    mask = os.umask(0)
    os.umask(mask)
    assert (os.stat(folder / "out.csv").st_mode & 0o777) == 0o666 & ~mask
    side = json.loads((folder / "out.json").read_text())
    assert side["csv"] == "out.csv" and side["movie"]["frames"] == 60
    os.chmod(folder / "out.csv", 0o640)  # a second export keeps the file's own permissions
    assert run("export", "m.tif", "-o", "out.csv", cwd=folder).returncode == 0
    assert (os.stat(folder / "out.csv").st_mode & 0o777) == 0o640


# --- the module itself (in process: failure injection at each step) ------------------------------

def test_guard_names_the_sidecar_and_what_it_would_replace(tmp_path):
    data = write_raw(tmp_path, movie_array(n=4))
    with pytest.raises(BadInput, match=r"run\.raw\.json \(sidecar of run\.raw\.csv\): is the "
                                       r"movie's raw descriptor"):
        guard([tmp_path / "run.raw.csv", (tmp_path / "run.raw.json", "sidecar of run.raw.csv")],
              movie_files(None, data))
    guard([tmp_path / "fine.csv"], movie_files(None, data))  # no clash: no error


def test_a_failure_while_writing_leaves_the_old_outputs_and_no_temporary_file(tmp_path):
    csv, side = tmp_path / "t.csv", tmp_path / "t.json"
    csv.write_text("old csv")
    side.write_text("old json")
    with pytest.raises(RuntimeError), replacing(side, csv) as (tj, tc):
        tc.write_text("new csv")
        tj.write_text("new js")
        raise RuntimeError("power cut while writing")
    assert csv.read_text() == "old csv" and side.read_text() == "old json"
    assert sorted(os.listdir(tmp_path)) == ["t.csv", "t.json"]


def test_the_sidecar_is_in_place_before_the_table(tmp_path, monkeypatch):
    """A crash between the two renames (injected at the second) leaves the new sidecar beside the
    old table, never a table without its sidecar."""
    csv, side = tmp_path / "t.csv", tmp_path / "t.json"
    real = os.replace
    calls = []

    def replace(src, dst):
        calls.append(os.path.basename(dst))
        if len(calls) == 2:
            raise OSError(5, "Input/output error")
        real(src, dst)

    monkeypatch.setattr(os, "replace", replace)
    with pytest.raises(WriteFailed, match=r"t\.csv: cannot write"), \
            replacing(side, csv) as (tj, tc):
        tc.write_text("new csv")
        tj.write_text("new json")
    assert calls == ["t.json", "t.csv"]
    assert side.read_text() == "new json" and not csv.exists()
    assert not [p for p in os.listdir(tmp_path) if p.endswith(".part")]


def test_a_symlinked_output_is_written_through_and_stays_a_link(tmp_path):
    real = tmp_path / "real.csv"
    real.write_text("old")
    (tmp_path / "link.csv").symlink_to(real)
    with replacing(tmp_path / "link.csv") as (tmp,):
        tmp.write_text("new")
    assert (tmp_path / "link.csv").is_symlink() and real.read_text() == "new"
