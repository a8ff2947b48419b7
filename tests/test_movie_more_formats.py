"""MRC2014 stacks written by mrcfile, .npz archives written by NumPy, and a reader plug-in registered
through real package metadata (a dist-info folder with an entry_points.txt on sys.path)."""

from __future__ import annotations

import csv
import json
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from reviewer.cli import main
from reviewer.errors import BadInput
from reviewer.movie import open_movie

mrcfile = pytest.importorskip("mrcfile")

N, H, W, STEP = 100, 20, 28, 50


def step_movie(dtype=np.uint16, seed=6):
    lam = np.full((N, H, W), 40.0)
    lam[STEP:, 8:11, 4:24] *= 0.4
    return np.random.default_rng(seed).poisson(lam).astype(dtype)


def info_json(capsys, path, *options):
    assert main(["info", str(path), "--json", *options]) == 0, capsys.readouterr().err
    return json.loads(capsys.readouterr().out)


# MRC2014 modes (Cheng et al. 2015, J. Struct. Biol. 192:146, table 1): 0 int8, 1 int16,
# 2 float32, 6 uint16, 12 float16
@pytest.mark.parametrize(("dtype", "mode", "read_as"), [
    (np.int8, 0, "int16"), (np.int16, 1, "int16"), (np.float32, 2, "float32"),
    (np.uint16, 6, "uint16"), (np.float16, 12, "float32")])
def test_mrc_modes(tmp_path, capsys, dtype, mode, read_as):
    data = (step_movie() // 2).astype(dtype)
    p = tmp_path / "stack.mrcs"
    with mrcfile.new(p) as m:
        m.set_data(data)
        m.set_image_stack()
        m.voxel_size = 3.2  # Angstrom
    with mrcfile.open(p) as m:
        assert int(m.header.mode) == mode
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["dtype"]) == (N, H, W, read_as)
    assert d["pixel_size_nm"] == pytest.approx(0.32)
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, N), data.astype(read_as))


def test_mrc_extended_header_and_scan(tmp_path, capsys):
    data = step_movie()
    p = tmp_path / "movie.mrc"
    with mrcfile.new(p) as m:
        m.set_data(data)
        m.set_extended_header(np.zeros(4096, dtype=np.uint8))  # NSYMBT = 4096
    with open_movie(p) as m:
        assert "4096-byte extended header" in m.layout
        np.testing.assert_array_equal(m.frame(73), data[73])
    out = tmp_path / "found.csv"
    assert main(["scan", str(p), "--fps", "100", "-o", str(out)]) == 0
    with open(out, newline="") as f:
        assert any(abs(int(r["frame"]) - STEP) <= 1 for r in csv.DictReader(f))


def test_gzipped_mrc_is_read_in_order_with_a_notice(tmp_path, capsys):
    data = step_movie()[:30]
    p = tmp_path / "movie.mrc.gz"
    with mrcfile.new(p, compression="gzip") as m:
        m.set_data(data)
    d = info_json(capsys, p)
    assert d["frames"] == 30 and any("gzip" in n for n in d["notices"])
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, 30), data)
        np.testing.assert_array_equal(m.frame(4), data[4])  # going back works, from the start


def test_mrc_complex_mode_refused(tmp_path, capsys):
    p = tmp_path / "fft.mrc"
    with mrcfile.new(p) as m:
        m.set_data(np.zeros((3, 4, 4), np.complex64))  # mode 4
    assert main(["info", str(p)]) == 2
    assert "mode 4" in capsys.readouterr().err


@pytest.mark.parametrize("compressed", [False, True])
def test_npz(tmp_path, capsys, compressed):
    data = step_movie()
    p = tmp_path / "m.npz"
    (np.savez_compressed if compressed else np.savez)(p, dark=np.zeros((2, H, W)), frames=data)
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["dtype"]) == (N, H, W, "uint16")
    assert d["selection"] == {"dataset": "frames"}
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, N), data)
    assert info_json(capsys, p, "--dataset", "dark")["frames"] == 2


PLUGIN = '''
import numpy as np
from reviewer.movie import ArrayMovie, Timing

def open_blk(path):
    """A made-up format: 'BLK1', then n, h, w as uint32, then uint16 frames."""
    raw = path.read_bytes()
    if raw[:4] != b"BLK1":
        return None
    n, h, w = np.frombuffer(raw[4:16], "<u4")
    data = np.frombuffer(raw[16:], "<u2").reshape(int(n), int(h), int(w))
    return ArrayMovie(data, path, layout="BLK1 test format", timing=Timing(fps=25.0, source="BLK1"))
'''


@pytest.fixture
def plugin_on_path(tmp_path, monkeypatch):
    """A package 'blkreader' with its dist-info declaring a `reviewer.readers` entry point."""
    site = tmp_path / "site"
    (site / "blkreader").mkdir(parents=True)
    (site / "blkreader" / "__init__.py").write_text(textwrap.dedent(PLUGIN))
    info = site / "blkreader-1.0.dist-info"
    info.mkdir()
    (info / "METADATA").write_text("Metadata-Version: 2.1\nName: blkreader\nVersion: 1.0\n")
    (info / "entry_points.txt").write_text("[reviewer.readers]\n.blk = blkreader:open_blk\n")
    monkeypatch.syspath_prepend(str(site))
    return site


def _blk(path, data):
    path.write_bytes(b"BLK1" + np.array(data.shape, "<u4").tobytes() + data.astype("<u2").tobytes())
    return path


def test_entry_point_reader_is_used_for_its_suffix(tmp_path, capsys, plugin_on_path):
    data = step_movie()[:12]
    p = _blk(tmp_path / "run.blk", data)
    with open_movie(p) as m:
        assert m.n_frames == 12 and m.fps == 25.0 and "plug-in blkreader:open_blk" in m.layout
        np.testing.assert_array_equal(m.block(0, 12), data)
    # the command line in a fresh interpreter finds it through the installed metadata as well
    run = subprocess.run([sys.executable, "-c", "import sys; from reviewer.cli import main; "
                          "sys.exit(main(sys.argv[1:]))", "info", str(p), "--json"],
                         capture_output=True, text=True, timeout=60,
                         env={"PYTHONPATH": str(plugin_on_path), "PATH": "/usr/bin:/bin"})
    assert run.returncode == 0, run.stderr
    assert json.loads(run.stdout)["frames"] == 12


def test_plugin_declining_or_failing(tmp_path, capsys, plugin_on_path):
    p = tmp_path / "other.blk"
    p.write_bytes(b"NOPE" + bytes(40))  # the plug-in says "not mine": unknown format
    with pytest.raises(BadInput, match="unknown movie format"):
        open_movie(p)
    p.write_bytes(b"BLK1" + np.array([5, 4, 4], "<u4").tobytes() + bytes(10))  # too short
    with pytest.raises(BadInput, match=r"blkreader:open_blk .* failed"):
        open_movie(p)
