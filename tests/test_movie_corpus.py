"""One movie with a known step, written by other software in the layouts labs send us; each must give
the frames, size and fps written (`reviewer info --json`), the written pixels, and `reviewer scan`
must find the step at its frame +-1."""

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


WRITERS = [("thumb.tif", _thumbnail_first), ("overview.ome.tif", _overview_series_first),
           ("packbits.tif", _packbits_pages), ("pillow.tif", _pillow_multipage),
           ("imageio.tif", _imageio_tiff), ("m.npz", _npz), ("last.zarr", _zarr_frames_last),
           ("m.mrcs", _mrc)]


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
    assert d["dtype"] == str(m.dtype) and d["fps"] == pytest.approx(FPS)
    with open_movie(p) as mv:
        np.testing.assert_array_equal(mv.block(0, N), m)
        np.testing.assert_array_equal(mv.frame(N - 1), m[-1])
    out = tmp_path / "found.csv"
    assert main(["scan", str(p), "-o", str(out), *options]) == 0, capsys.readouterr().err
    with open(out, newline="") as f:
        frames = [int(r["frame"]) for r in csv.DictReader(f)]
    assert any(abs(f - STEP) <= 1 for f in frames), frames
