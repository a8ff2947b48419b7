"""Movies in array containers written by h5py and zarr (not by our code): which array is the movie,
which axis is time, where the timing is, and what `reviewer info --json` / `reviewer scan` report."""

from __future__ import annotations

import csv
import json
import subprocess
import sys

import h5py
import numpy as np
import pytest
import zarr

from reviewer.cli import main
from reviewer.errors import BadInput
from reviewer.movie import open_movie

N, H, W, STEP = 120, 24, 32, 60


def step_movie(seed=3):
    """Poisson frames (40 counts/px) with a dark band appearing at frame STEP."""
    lam = np.full((N, H, W), 40.0)
    lam[STEP:, 10:13, 4:28] *= 0.4
    return np.random.default_rng(seed).poisson(lam).astype(np.uint16)


def info_json(capsys, path, *options):
    assert main(["info", str(path), "--json", *options]) == 0
    return json.loads(capsys.readouterr().out)


def scan_frames(capsys, path, *options):
    out = path.parent / (path.name + ".found.csv")
    assert main(["scan", str(path), "-o", str(out), *options]) == 0, capsys.readouterr().err
    capsys.readouterr()
    with open(out, newline="") as f:
        return [int(r["frame"]) for r in csv.DictReader(f)]


def test_hdf5_walks_every_dataset_and_takes_the_largest(tmp_path, capsys):
    movie = step_movie()
    p = tmp_path / "nested.h5"
    with h5py.File(p, "w") as f:
        f["calibration/dark"] = np.zeros((4, H, W), np.uint16)  # visited first, smaller
        f["entry/instrument/detector/data"] = movie
        f["entry/instrument/detector/data"].attrs["frame_rate"] = 250.0
        f["entry/title"] = "a string"
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["dtype"]) == (N, H, W, "uint16")
    assert d["fps"] == 250.0 and "entry/instrument/detector/data" in d["layout"]
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, N), movie)
    assert any(abs(f - STEP) <= 1 for f in scan_frames(capsys, p))
    d = info_json(capsys, p, "--dataset", "calibration/dark")
    assert d["frames"] == 4


def test_hdf5_frames_last_from_the_chunks_and_fps_in_a_one_element_array(tmp_path, capsys):
    movie = step_movie()
    p = tmp_path / "last.h5"
    with h5py.File(p, "w") as f:  # (height, width, frames), one frame per chunk
        ds = f.create_dataset("images", data=np.moveaxis(movie, 0, 2), chunks=(H, W, 1))
        ds.attrs["fps"] = np.array([400.0])
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["fps"], d["axes"]) == (N, H, W, 400.0, "YXT")
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.frame(77), movie[77])
        np.testing.assert_array_equal(m.block(10, 20), movie[10:20])
    assert any(abs(f - STEP) <= 1 for f in scan_frames(capsys, p))


def test_axes_option_overrides_the_guess(tmp_path, capsys):
    stored = np.random.default_rng(0).integers(0, 100, (20, 20, 90), dtype=np.uint16)
    p = tmp_path / "plain.h5"
    with h5py.File(p, "w") as f:
        f["m"] = stored  # contiguous: no chunks to go by; the sizes say frames last
    assert info_json(capsys, p)["frames"] == 90
    d = info_json(capsys, p, "--axes", "TYX")
    assert (d["frames"], d["height"], d["width"]) == (20, 20, 90)
    with open_movie(p, axes="TYX") as m:
        np.testing.assert_array_equal(m.frame(3), stored[3])


@pytest.mark.parametrize(("where", "key", "value", "unit", "fps"), [
    ("group", "frame_rate", 120.0, None, 120.0),
    ("file", "frame_interval", 2.5, "ms", 400.0),
    ("dataset", "FPS", np.array([50.0], np.float32), None, 50.0),
])
def test_hdf5_timing_attributes(tmp_path, capsys, where, key, value, unit, fps):
    p = tmp_path / "t.h5"
    with h5py.File(p, "w") as f:
        ds = f.create_dataset("run/movie", data=np.zeros((6, 8, 8), np.uint16))
        target = {"group": f["run"], "file": f, "dataset": ds}[where]
        target.attrs[key] = value
        if unit:
            target.attrs["unit"] = unit
    assert info_json(capsys, p)["fps"] == pytest.approx(fps)


def test_hdf5_per_frame_time_dataset(tmp_path, capsys):
    times = np.cumsum(np.r_[0.0, np.full(5, 0.01), np.full(4, 0.02)])  # variable frame rate
    p = tmp_path / "vfr.h5"
    with h5py.File(p, "w") as f:
        f["scan/frames"] = np.ones((10, 8, 8), np.uint16)
        f["scan/timestamps"] = times * 1000.0
        f["scan/timestamps"].attrs["units"] = "ms"
    with open_movie(p) as m:
        np.testing.assert_allclose(m.timing.times_s, times)
        assert "scan/timestamps" in m.timing.source


def test_equal_candidates_are_listed_in_one_line(tmp_path, capsys):
    p = tmp_path / "two.h5"
    with h5py.File(p, "w") as f:
        f["a"] = np.zeros((5, 8, 8), np.uint16)
        f["b"] = np.zeros((5, 8, 8), np.uint16)
    assert main(["info", str(p)]) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "a, b" in err and "--dataset" in err


def test_singleton_axis_is_dropped(tmp_path):
    movie = step_movie()[:10]
    p = tmp_path / "t1yx.h5"
    with h5py.File(p, "w") as f:
        f["m"] = movie[:, None]
    with open_movie(p) as m:
        assert (m.n_frames, m.shape, m.axes) == (10, (H, W), "T1YX")
        np.testing.assert_array_equal(m.block(0, 10), movie)


def test_blosc_through_hdf5plugin_and_one_line_without_it(tmp_path):
    hdf5plugin = pytest.importorskip("hdf5plugin")
    movie = step_movie()[:12]
    p = tmp_path / "blosc.h5"
    with h5py.File(p, "w") as f:
        f.create_dataset("m", data=movie, chunks=(1, H, W), **hdf5plugin.Blosc())
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, 12), movie)
    # a fresh interpreter in which hdf5plugin cannot be imported: the filter is missing
    code = ("import sys; sys.modules['hdf5plugin'] = None\n"
            "from reviewer.cli import main\nsys.exit(main(['info', sys.argv[1]]))")
    run = subprocess.run([sys.executable, "-c", code, str(p)], capture_output=True, text=True,
                         timeout=60)
    assert run.returncode == 2 and run.stdout == ""
    line = run.stderr.strip()
    assert "\n" not in line and str(p) in line and "Blosc" in line and "hdf5plugin" in line


def test_zarr_nested_group(tmp_path, capsys):
    movie = step_movie()
    p = tmp_path / "nested.zarr"
    root = zarr.open_group(str(p), mode="w")
    root.create_group("meta").create_array("tiny", data=np.zeros((3, 4, 4), np.uint8))
    arr = root.create_group("acq").create_group("cam").create_array("frames", data=movie,
                                                                   chunks=(8, H, W))
    arr.attrs["fps"] = 200.0
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["fps"]) == (N, H, W, 200.0)
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(50, 70), movie[50:70])


@pytest.mark.parametrize("version", ["0.4", "0.5"])
def test_ome_ngff_level_0_with_time_scale_and_channels(tmp_path, capsys, version):
    rng = np.random.default_rng(4)
    data = rng.integers(0, 1000, (9, 2, 16, 20), dtype=np.uint16)  # t, c, y, x
    p = tmp_path / "image.ome.zarr"
    root = zarr.open_group(str(p), mode="w", zarr_format=2 if version == "0.4" else 3)
    root.create_array("0", data=data, chunks=(1, 1, 16, 20))
    root.create_array("1", data=data[:, :, ::2, ::2], chunks=(1, 1, 8, 10))
    # multiscales metadata as OME-NGFF specifies it (ngff.openmicroscopy.org/0.4 and /0.5: in 0.5
    # the same object sits under the group attribute "ome", on Zarr v3)
    multiscales = [{
        "version": version,
        "axes": [{"name": "t", "type": "time", "unit": "millisecond"},
                 {"name": "c", "type": "channel"},
                 {"name": "y", "type": "space", "unit": "micrometer"},
                 {"name": "x", "type": "space", "unit": "micrometer"}],
        "datasets": [{"path": "0", "coordinateTransformations": [
                         {"type": "scale", "scale": [5.0, 1.0, 0.1, 0.1]}]},
                     {"path": "1", "coordinateTransformations": [
                         {"type": "scale", "scale": [5.0, 1.0, 0.2, 0.2]}]}]}]
    if version == "0.4":
        root.attrs["multiscales"] = multiscales
    else:
        root.attrs["ome"] = {"version": "0.5", "multiscales": multiscales}
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["fps"]) == (9, 16, 20, 200.0)
    assert d["axes"] == "TCYX" and d["selection"] == {"channel": 0}
    assert d["pixel_size_nm"] == pytest.approx(100.0)  # 0.1 micrometer
    assert any("2 channels" in n for n in d["notices"])
    with open_movie(p, channel=1) as m:
        np.testing.assert_array_equal(m.block(0, 9), data[:, 1])
    with pytest.raises(BadInput, match="--channel 2 outside 0..1"):
        open_movie(p, channel=2)


def test_hdf5_time_from_a_dimension_scale(tmp_path):
    times = np.r_[0.0, 0.5, 1.5, 2.0, 3.0]
    p = tmp_path / "scaled.h5"
    with h5py.File(p, "w") as f:  # h5py's dimension scales (HDF5 Dimension Scale specification)
        ds = f.create_dataset("stack", data=np.ones((8, 8, 5), np.uint16), chunks=(8, 8, 1))
        f["acquired_at"] = times
        f["acquired_at"].make_scale("time")
        ds.dims[2].attach_scale(f["acquired_at"])
    with open_movie(p) as m:
        assert m.n_frames == 5 and m.axes == "YXT"
        np.testing.assert_allclose(m.timing.times_s, times)
        assert "dimension scale" in m.timing.source
