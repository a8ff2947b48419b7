"""One movie with a known step, written by other software in the layouts labs send us; each must give
the frames, size and fps written (`reviewer info --json`), the written pixels, and `reviewer scan`
must find the step at its frame +-1.

Layouts covered elsewhere with the same scan check: ImageJ and OME hyperstacks with C and Z
(test_movie_tiff_layouts.py), H.264 video (test_movie_video.py), MRC with an extended header
(test_movie_more_formats.py)."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
import tifffile

from reviewer.cli import main
from reviewer.movie import open_movie

N, H, W, STEP, FPS = 90, 24, 32, 45, 200.0


def movie():
    lam = np.full((N, H, W), 40.0)
    lam[STEP:, 9:12, 4:28] *= 0.4  # a dark band appears at frame STEP
    return np.random.default_rng(11).poisson(lam).astype(np.uint16)


def _thumbnail_first(p, m):
    with tifffile.TiffWriter(p) as w:
        w.write(np.zeros((6, 8), np.uint8))
        for f in m:
            w.write(f, contiguous=False, metadata=None)
    return ["--fps", str(FPS)]


def _overview_series_first(p, m):
    with tifffile.TiffWriter(p, ome=True) as w:
        w.write(np.zeros((50, 60), np.uint16), metadata={"axes": "YX"})
        w.write(m, metadata={"axes": "TYX", "TimeIncrement": 1 / FPS})
    return []


def _packbits_pages(p, m):
    with tifffile.TiffWriter(p) as w:
        for f in m:
            w.write(f, compression="packbits", contiguous=False, metadata=None)
    return ["--fps", str(FPS)]


def _pillow_multipage(p, m):
    from PIL import Image

    frames = [Image.fromarray(f) for f in m]
    frames[0].save(p, save_all=True, append_images=frames[1:], compression="tiff_lzw")
    return ["--fps", str(FPS)]


def _imageio_tiff(p, m):
    iio = pytest.importorskip("imageio.v3")
    iio.imwrite(p, m)
    return ["--fps", str(FPS)]


def _npz(p, m):
    np.savez(p, movie=m, dark=np.zeros((3, H, W), np.uint16))
    return ["--fps", str(FPS)]


def _zarr_frames_last(p, m):
    zarr = pytest.importorskip("zarr")
    arr = zarr.open_array(str(p), mode="w", shape=(H, W, N), chunks=(H, W, 1), dtype=m.dtype)
    arr[...] = np.moveaxis(m, 0, 2)
    arr.attrs["frame_interval"] = 1000.0 / FPS
    arr.attrs["unit"] = "ms"
    return []


def _mrc(p, m):
    mrcfile = pytest.importorskip("mrcfile")
    with mrcfile.new(p) as f:
        f.set_data(m)
        f.set_image_stack()
    return ["--fps", str(FPS)]


def _planar_rgb(p, m):
    with tifffile.TiffWriter(p) as w:  # one RGB page per frame, planes stored one after another
        for f in m:
            w.write(np.stack([f, f, f]), photometric="rgb", planarconfig="separate",
                    contiguous=False, metadata=None)
    return ["--fps", str(FPS)]


def _truncated_ome(p, m):
    extra = np.zeros((10, H, W), m.dtype)
    tifffile.imwrite(p, np.concatenate([m, extra]), ome=True,
                     metadata={"axes": "TYX", "TimeIncrement": 1 / FPS})  # IFDs and XML at the end
    with tifffile.TiffFile(p) as tif:
        start = tif.pages.first.dataoffsets[0]
    p.write_bytes(p.read_bytes()[: start + N * H * W * 2 + 99])  # N whole frames and a piece
    return ["--fps", str(FPS)]  # the OME XML (and its timing) was in the part cut off


def _ome_ngff(p, m):
    zarr = pytest.importorskip("zarr")
    root = zarr.open_group(str(p), mode="w")
    root.create_array("0", data=m[:, None], chunks=(8, 1, H, W))
    root.create_array("1", data=m[:, None, ::2, ::2], chunks=(8, 1, H // 2, W // 2))
    # multiscales metadata as OME-NGFF 0.4 specifies it (ngff.openmicroscopy.org/0.4)
    root.attrs["multiscales"] = [{
        "version": "0.4",
        "axes": [{"name": "t", "type": "time", "unit": "second"},
                 {"name": "c", "type": "channel"},
                 {"name": "y", "type": "space", "unit": "nanometer"},
                 {"name": "x", "type": "space", "unit": "nanometer"}],
        "datasets": [{"path": str(level), "coordinateTransformations": [
            {"type": "scale", "scale": [1 / FPS, 1.0, 0.5 * 2**level, 0.5 * 2**level]}]}
            for level in (0, 1)]}]
    return []


def _zarr_nested(p, m):
    zarr = pytest.importorskip("zarr")
    root = zarr.open_group(str(p), mode="w")
    root.create_group("meta").create_array("dark", data=np.zeros((3, 4, 4), np.uint16))
    arr = root.create_group("run").create_group("camera").create_array("frames", data=m,
                                                                      chunks=(16, H, W))
    arr.attrs["fps"] = FPS
    return []


def _hdf5_small_first(p, m):
    h5py = pytest.importorskip("h5py")
    with h5py.File(p, "w") as f:
        f.create_dataset("a_dark", data=np.zeros((4, H, W), np.uint16))  # visited first
        d = f.create_group("entry").create_dataset("frames", data=m, chunks=(1, H, W))
        d.attrs["fps"] = np.array([FPS])  # a 1-element array, as some writers store it
    return []


def _hdf5_frames_last(p, m):
    h5py = pytest.importorskip("h5py")
    with h5py.File(p, "w") as f:
        d = f.create_dataset("stack", data=np.moveaxis(m, 0, 2), chunks=(H, W, 1))
        d.attrs["frame_rate"] = FPS
    return []


def _hdf5_time_dataset(p, m):
    h5py = pytest.importorskip("h5py")
    with h5py.File(p, "w") as f:
        f["scan/frames"] = m
        f["scan/timestamps"] = np.arange(N) * (1000.0 / FPS)  # per-frame times in ms
        f["scan/timestamps"].attrs["units"] = "ms"
    return []


def _hdf5_blosc(p, m):
    h5py = pytest.importorskip("h5py")
    hdf5plugin = pytest.importorskip("hdf5plugin")
    with h5py.File(p, "w") as f:
        d = f.create_dataset("m", data=m, chunks=(1, H, W), **hdf5plugin.Blosc())
        d.attrs["fps"] = FPS
    return []


WRITERS = [("thumb.tif", _thumbnail_first), ("overview.ome.tif", _overview_series_first),
           ("packbits.tif", _packbits_pages), ("pillow.tif", _pillow_multipage),
           ("imageio.tif", _imageio_tiff), ("m.npz", _npz), ("last.zarr", _zarr_frames_last),
           ("m.mrcs", _mrc), ("planar.tif", _planar_rgb), ("cut.ome.tif", _truncated_ome),
           ("image.ome.zarr", _ome_ngff), ("nested.zarr", _zarr_nested),
           ("first.h5", _hdf5_small_first), ("last.h5", _hdf5_frames_last),
           ("times.h5", _hdf5_time_dataset), ("blosc.h5", _hdf5_blosc)]


@pytest.mark.parametrize(("name", "write"), WRITERS, ids=[w[0] for w in WRITERS])
def test_written_movie_reads_and_scans(tmp_path, capsys, name, write):
    m = movie()
    if name == "pillow.tif":
        m = np.clip(m * 3, 0, 255).astype(np.uint8)  # Pillow writes 8-bit multi-page TIFF
    p = tmp_path / name
    options = write(p, m)
    assert main(["info", str(p), "--json", *options]) == 0, capsys.readouterr().err
    d = json.loads(capsys.readouterr().out)
    assert (d["frames"], d["height"], d["width"]) == (N, H, W)
    if name == "times.h5":  # per-frame times: no constant rate claimed, their median rate shown
        assert d["fps"] is None and d["median_fps"] == pytest.approx(FPS)
    else:
        assert d["fps"] == pytest.approx(FPS)
    with open_movie(p) as mv:
        if name == "planar.tif":  # read as ITU-R BT.601 luma; equal planes give the plane back
            np.testing.assert_allclose(mv.block(0, N), m, rtol=1e-6)
        else:
            assert d["dtype"] == str(m.dtype)
            np.testing.assert_array_equal(mv.block(0, N), m)
            np.testing.assert_array_equal(mv.frame(N - 1), m[-1])
    out = tmp_path / "found.csv"
    assert main(["scan", str(p), "-o", str(out), *options]) == 0, capsys.readouterr().err
    with open(out, newline="") as f:
        frames = [int(r["frame"]) for r in csv.DictReader(f)]
    assert any(abs(f - STEP) <= 1 for f in frames), frames
