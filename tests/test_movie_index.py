"""The frame-offset index of multi-page TIFF files: built once, saved in the cache, reused on reopen.
Offsets are checked against the page offsets tifffile reports for the same file (the reference)."""

from __future__ import annotations

import struct

import numpy as np
import pytest
import tifffile

from reviewer.movie import open_movie, pageindex
from reviewer.paths import cache_dir

N, H, W = 20, 16, 24


def frames(n=N) -> np.ndarray:
    return np.random.default_rng(2).integers(0, 65535, (n, H, W), dtype=np.uint16)


def write_ppf(path, data, **kw) -> None:
    """Page-per-frame: tifffile.TiffWriter.write once per frame, contiguous=False."""
    descriptions = kw.pop("descriptions", None)
    bigtiff = kw.pop("bigtiff", False)
    with tifffile.TiffWriter(path, bigtiff=bigtiff) as w:
        for i, f in enumerate(data):
            extra = {"description": descriptions[i], "metadata": None} if descriptions else {}
            w.write(f, contiguous=False, **kw, **extra)


def tifffile_offsets(path, what="data") -> np.ndarray:
    with tifffile.TiffFile(path) as tif:
        return np.array([p.dataoffsets[0] if what == "data" else p.offset for p in tif.pages])


def no_index_building(monkeypatch):
    def boom(*a, **kw):
        raise AssertionError("the index was rebuilt")

    monkeypatch.setattr(pageindex, "walk", boom)
    monkeypatch.setattr(pageindex, "try_stride", boom)


@pytest.mark.parametrize("bigtiff", [False, True])
def test_index_saved_and_reused(tmp_path, monkeypatch, bigtiff):
    data = frames()
    path = tmp_path / "ppf.tif"
    write_ppf(path, data, bigtiff=bigtiff)
    with open_movie(path) as m:
        assert "constant page stride" in m.layout
        np.testing.assert_array_equal(m.offsets, tifffile_offsets(path))
        saved = cache_dir(m.fingerprint) / "frames.npy"
    assert saved.is_file()
    index = np.load(saved)
    assert index.dtype == np.int64 and index.nbytes == 8 * N  # 8 bytes a frame
    no_index_building(monkeypatch)
    with open_movie(path) as m:
        assert "cached frame index" in m.layout
        np.testing.assert_array_equal(m.block(0, N), data)


def test_irregular_pages_are_walked(tmp_path, monkeypatch):
    data = frames()
    path = tmp_path / "irregular.tif"
    write_ppf(path, data, descriptions=[f"t={7 ** i}" for i in range(N)])  # IFD sizes vary
    with open_movie(path) as m:
        assert "IFD walk" in m.layout
        np.testing.assert_array_equal(m.offsets, tifffile_offsets(path))
        np.testing.assert_array_equal(m.block(0, N), data)
    no_index_building(monkeypatch)
    with open_movie(path) as m:
        np.testing.assert_array_equal(m.frame(13), data[13])


def test_compressed_pages_index_ifds(tmp_path):
    data = frames()
    path = tmp_path / "zlib_ppf.tif"
    write_ppf(path, data, compression="zlib")
    with open_movie(path) as m:
        np.testing.assert_array_equal(m.ifd_offsets, tifffile_offsets(path, "ifd"))
        np.testing.assert_array_equal(m.frame(17), data[17])


def test_contiguous_stack_needs_no_index(tmp_path):
    path = tmp_path / "ij.tif"
    tifffile.imwrite(path, frames(), imagej=True, metadata={"axes": "TYX"})
    with open_movie(path) as m:
        assert "contiguous" in m.layout
        assert not (cache_dir(m.fingerprint, create=False) / "frames.npy").exists()


def test_grown_file_gets_a_new_index(tmp_path):
    data = frames(25)
    path = tmp_path / "growing.tif"
    write_ppf(path, data[:20])
    with open_movie(path) as m:
        assert m.n_frames == 20
    with tifffile.TiffWriter(path, append=True) as w:  # the acquisition goes on
        for f in data[20:]:
            w.write(f, contiguous=False)
    with open_movie(path) as m:
        assert m.n_frames == 25
        np.testing.assert_array_equal(m.frame(24), data[24])


def test_loop_in_ifd_chain_ends(tmp_path):
    path = tmp_path / "loop.tif"
    write_ppf(path, frames(), descriptions=["x" * i for i in range(N)])
    last = int(tifffile_offsets(path, "ifd")[-1])
    with open(path, "r+b") as f:  # point the last IFD back at the first one
        f.seek(last)
        count = struct.unpack("<H", f.read(2))[0]
        f.seek(last + 2 + 12 * count)
        f.write(struct.pack("<I", 8))
    with open_movie(path) as m:
        assert m.n_frames == N


def test_progress_bar_while_walking(tmp_path, monkeypatch, capsys):
    path = tmp_path / "p.tif"
    write_ppf(path, frames(), descriptions=["y" * i for i in range(N)])
    monkeypatch.setattr(pageindex, "PROGRESS_MIN_BYTES", 0)
    with open_movie(path) as m:
        assert m.n_frames == N
    assert "pages indexed" in capsys.readouterr().err
