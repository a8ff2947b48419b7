"""TIFF files that hold more than a plain stack, written by tifffile (not by our code): hyperstacks,
OME images with C and Z, a thumbnail or overview first, several series, a truncated OME-TIFF, planar
RGB pages and compressed pages of varying size."""

from __future__ import annotations

import csv
import json

import numpy as np
import pytest
import tifffile

from reviewer.cli import main
from reviewer.errors import BadInput
from reviewer.movie import open_movie

T, Z, C, Y, X, STEP = 80, 3, 2, 24, 32, 40


def hyperstack(seed=0):
    """(T, Z, C, Y, X) Poisson planes; in z 1 / channel 1 a dark band appears at time point STEP."""
    lam = np.full((T, Z, C, Y, X), 40.0)
    lam[STEP:, 1, 1, 8:11, 4:28] *= 0.4
    return np.random.default_rng(seed).poisson(lam).astype(np.uint16)


def info_json(capsys, path, *options):
    assert main(["info", str(path), "--json", *options]) == 0, capsys.readouterr().err
    return json.loads(capsys.readouterr().out)


@pytest.mark.parametrize("flavour", ["imagej", "ome"])
def test_hyperstack_time_is_the_frame_axis(tmp_path, capsys, flavour):
    data = hyperstack()
    p = tmp_path / f"hs_{flavour}.tif"
    if flavour == "imagej":
        tifffile.imwrite(p, data, imagej=True, metadata={"axes": "TZCYX", "finterval": 0.004})
    else:
        tifffile.imwrite(p, data, ome=True, metadata={"axes": "TZCYX", "TimeIncrement": 0.004})
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["fps"]) == (T, Y, X, pytest.approx(250.0))
    assert d["axes"] == "TZCYX" and d["selection"] == {"z": 0, "channel": 0}
    assert any("3 z-planes" in n for n in d["notices"]) and any("2 channels" in n for n in d["notices"])
    for zz, cc in ((0, 0), (2, 1), (1, 0)):
        with open_movie(p, z=zz, channel=cc) as m:
            np.testing.assert_array_equal(m.block(0, T), data[:, zz, cc])
    out = tmp_path / "found.csv"
    assert main(["scan", str(p), "--z", "1", "--channel", "1", "-o", str(out)]) == 0
    with open(out, newline="") as f:
        assert any(abs(int(r["frame"]) - STEP) <= 1 for r in csv.DictReader(f))
    assert main(["info", str(p), "--channel", "5"]) == 2
    assert "--channel 5 outside 0..1" in capsys.readouterr().err


def test_ome_plane_delta_t_per_time_point(tmp_path):
    data = hyperstack()[:6, :1]  # T, Z=1, C=2
    times = np.array([0.0, 0.1, 0.25, 0.3, 0.5, 0.55])
    planes = {"TheT": [t for t in range(6) for _ in range(2)], "TheZ": [0] * 12,
              "TheC": [c for _ in range(6) for c in range(2)],
              "DeltaT": [float(times[t]) for t in range(6) for _ in range(2)]}
    p = tmp_path / "dt.ome.tif"
    tifffile.imwrite(p, data, ome=True, metadata={"axes": "TZCYX", "Plane": planes})
    with open_movie(p, channel=1) as m:
        assert m.n_frames == 6
        np.testing.assert_allclose(m.timing.times_s, times)
        np.testing.assert_array_equal(m.block(0, 6), data[:, 0, 1])


@pytest.mark.parametrize("compression", [None, "zlib"])
def test_thumbnail_first(tmp_path, capsys, compression):
    frames = hyperstack()[:, 0, 0]
    p = tmp_path / "thumb.tif"
    with tifffile.TiffWriter(p) as w:
        w.write(np.zeros((6, 8), np.uint8), compression=compression)  # a small preview as page 0
        for f in frames:
            w.write(f, contiguous=False, compression=compression)
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["dtype"]) == (T, Y, X, "uint16")
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, T), frames)


def test_overview_series_first_and_series_option(tmp_path, capsys):
    frames = hyperstack()[:, 0, 0]
    p = tmp_path / "multi.ome.tif"
    with tifffile.TiffWriter(p, ome=True) as w:
        w.write(np.zeros((60, 70), np.uint16), metadata={"axes": "YX"})  # overview image
        w.write(frames, metadata={"axes": "TYX", "TimeIncrement": 0.01})
        w.write(frames[:7, ::-1], metadata={"axes": "TYX"})  # a second, shorter position
    d = info_json(capsys, p)
    assert (d["frames"], d["height"], d["width"], d["fps"]) == (T, Y, X, 100.0)
    assert d["selection"] == {"series": 1}
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, T), frames)
    with open_movie(p, series=2) as m:
        assert m.n_frames == 7
        np.testing.assert_array_equal(m.block(0, 7), frames[:7, ::-1])
    with pytest.raises(BadInput, match="another frame size"):
        open_movie(p, series=0)
    with pytest.raises(BadInput, match="outside 0..2"):
        open_movie(p, series=3)


def test_truncated_ome_tiff_reads_the_whole_frames(tmp_path, capsys):
    frames = np.random.default_rng(1).integers(0, 4000, (200, 16, 20), dtype=np.uint16)
    p = tmp_path / "cut.ome.tif"
    tifffile.imwrite(p, frames, ome=True, metadata={"axes": "TYX"})  # IFDs and XML after the pixels
    with tifffile.TiffFile(p) as tif:
        start = tif.pages.first.dataoffsets[0]
    raw = p.read_bytes()
    p.write_bytes(raw[: start + 150 * 16 * 20 * 2 + 77])  # 150 whole frames and a piece
    d = info_json(capsys, p)
    assert d["frames"] == 150 and any("truncated" in n or "cut off" in n for n in d["notices"])
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, 150), frames[:150])


@pytest.mark.parametrize("compression", [None, "zlib", "packbits"])
def test_planar_rgb_pages(tmp_path, compression):
    rgb = np.random.default_rng(2).integers(0, 255, (5, 3, 12, 14), dtype=np.uint8)
    p = tmp_path / "planar.tif"
    with tifffile.TiffWriter(p) as w:
        for f in rgb:
            w.write(f, photometric="rgb", planarconfig="separate", compression=compression)
    # ITU-R BT.601 luma weights
    expect = np.tensordot(np.moveaxis(rgb, 1, 3).astype(np.float32),
                          np.array([0.299, 0.587, 0.114], np.float32), axes=([-1], [0]))
    with open_movie(p) as m:
        assert (m.n_frames, m.shape) == (5, (12, 14))
        np.testing.assert_allclose(m.block(0, 5), expect, rtol=1e-6)


def test_packbits_pages_of_nearly_constant_size(tmp_path):
    n = 66
    frames = np.zeros((n, 8, 64), np.uint8)
    frames[:, 0, 0] = 5
    for k in range(6, n - 1, 2):  # pairs of pages 2 bytes longer / 2 bytes shorter when compressed
        frames[k, 0, 1:3] = (6, 7)
        frames[k + 1, 0, 0] = 0
    frames[:, 4, 10] = np.arange(n) + 1  # each frame marked with its index
    p = tmp_path / "pb.tif"
    with tifffile.TiffWriter(p) as w:
        for f in frames:
            w.write(f, compression="packbits", contiguous=False)
    with open_movie(p) as m:
        assert m.n_frames == n
        np.testing.assert_array_equal(m.block(0, n), frames)


@pytest.mark.parametrize("contiguous", [True, False])
def test_runs_of_same_sized_pages_longest_first(tmp_path, capsys, contiguous):
    frames = hyperstack()[:70, 0, 0]
    p = tmp_path / "runs.tif"
    with tifffile.TiffWriter(p) as w:  # tifffile series: 10 frames, a small image, 60 frames
        if contiguous:
            w.write(frames[:10])
            w.write(np.zeros((8, 8), np.uint8))
            w.write(frames[10:])
        else:
            for f in frames[:10]:
                w.write(f, contiguous=False)
            w.write(np.zeros((8, 8), np.uint8))
            for f in frames[10:]:
                w.write(f, contiguous=False)
    d = info_json(capsys, p)
    assert d["frames"] == 60 and d["selection"] == {"series": 1}
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, 60), frames[10:])
    with open_movie(p, series=0) as m:
        np.testing.assert_array_equal(m.block(0, 10), frames[:10])


def test_each_plane_is_its_own_movie_for_caches_and_sessions(tmp_path, capsys):
    p = tmp_path / "hs.tif"
    tifffile.imwrite(p, hyperstack()[:20], imagej=True, metadata={"axes": "TZCYX"})
    prints = {open_movie(p, z=zz, channel=cc).fingerprint for zz in range(Z) for cc in range(C)}
    assert len(prints) == Z * C
    assert open_movie(p).fingerprint == open_movie(p, z=0, channel=0).fingerprint
    out = tmp_path / "c.csv"
    assert main(["scan", str(p), "--fps", "100", "--z", "1", "-o", str(out)]) == 0
    capsys.readouterr()
    assert main(["scan", str(p), "--fps", "100", "--z", "2", "-o", str(out)]) == 0
    assert "reused" not in capsys.readouterr().out  # z 2 was never scanned: not z 1's result
    assert main(["scan", str(p), "--fps", "100", "--z", "1", "-o", str(out)]) == 0
    assert "reused" in capsys.readouterr().out


@pytest.mark.parametrize("flavour", ["imagej", "ome"])
def test_stack_without_a_time_axis_reads_its_planes_as_frames(tmp_path, flavour):
    frames = hyperstack()[:, 0, 0]
    p = tmp_path / "plain.tif"
    # no axes given: tifffile stores the stack as ImageJ channels / OME SizeC (from memory of its
    # defaults; the test reads back what it wrote either way)
    tifffile.imwrite(p, frames, **{flavour: True})
    with open_movie(p) as m:
        assert m.n_frames == T and any("no time axis" in n for n in m.notices)
        np.testing.assert_array_equal(m.block(0, T), frames)
    z_stack = tmp_path / "z.tif"  # a time series saved as z-slices
    tifffile.imwrite(z_stack, frames[:20], imagej=True, metadata={"axes": "ZYX"})
    with open_movie(z_stack) as m:
        assert m.n_frames == 20 and any("20 slices are read as frames" in n for n in m.notices)
        np.testing.assert_array_equal(m.block(0, 20), frames[:20])


def test_plane_of_a_hyperstack_in_reused_blocks(tmp_path):
    data = hyperstack()[:30]
    p = tmp_path / "hs.tif"
    tifffile.imwrite(p, data, imagej=True, metadata={"axes": "TZCYX"})
    with open_movie(p, z=2, channel=1) as m:
        # other planes lie between this plane's frames: each block holds only this plane's pixels
        got = np.concatenate([b.copy() for _, b in m.iter_blocks(7, reuse=True)])
        np.testing.assert_array_equal(got, data[:, 2, 1])
