"""Every reader against files written by the reference libraries (tifffile, numpy, Pillow): the pixel
values we read must equal the array the reference library wrote."""

from __future__ import annotations

import json
import struct

import numpy as np
import pytest
import tifffile
from PIL import Image

from reviewer.errors import BadInput
from reviewer.movie import open_movie
from reviewer.movie.pixels import BT601

N, H, W = 20, 16, 24


def stack(dtype=np.uint16, seed=0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    if np.dtype(dtype).kind == "f":
        return rng.normal(100, 10, (N, H, W)).astype(dtype)
    info = np.iinfo(dtype)
    return rng.integers(max(info.min, -30000), min(info.max, 60000), (N, H, W), endpoint=True).astype(dtype)


def read_all(movie) -> np.ndarray:
    return np.concatenate([b for _, b in movie.iter_blocks(7)])


def check_same(movie, ref: np.ndarray) -> None:
    assert movie.n_frames == len(ref) and movie.shape == ref.shape[1:]
    np.testing.assert_array_equal(read_all(movie), ref)
    np.testing.assert_array_equal(movie.frame(N // 2), ref[N // 2])
    np.testing.assert_array_equal(movie.frame(-1), ref[-1])
    np.testing.assert_array_equal(movie.block(3, 11), ref[3:11])


def write_page_per_frame(path, data, **kw) -> None:
    """One IFD per frame, as acquisition software streams them (tifffile.TiffWriter, one write a frame)."""
    bigtiff = kw.pop("bigtiff", False)
    with tifffile.TiffWriter(path, bigtiff=bigtiff) as w:
        for f in data:
            w.write(f, contiguous=False, **kw)


@pytest.mark.parametrize("dtype", [np.uint8, np.uint16, np.int16, np.uint32, np.float32])
def test_imagej_and_page_per_frame_tiff_by_tifffile(tmp_path, dtype):
    ref = stack(dtype)
    if dtype == np.float32:
        ref[2, 3, 4] = np.nan  # NaN must come through untouched
    ij = tmp_path / "ij.tif"
    tifffile.imwrite(ij, ref, imagej=dtype != np.uint32, metadata={"axes": "TYX"})  # ImageJ has no uint32
    ppf = tmp_path / "ppf.tif"
    write_page_per_frame(ppf, ref)
    for path in (ij, ppf):
        with open_movie(path) as m:
            assert m.dtype == np.dtype(dtype)
            check_same(m, ref)


def test_bigtiff_ome_and_compressed_tiff_by_tifffile(tmp_path):
    ref = stack()
    files = {"big.tif": dict(bigtiff=True), "ome.ome.tif": dict(ome=True, metadata={"axes": "TYX"}),
             "zlib.tif": dict(compression="zlib"), "lzw.tif": dict(compression="lzw"),
             "zpred.tif": dict(compression="zlib", predictor=True)}
    for name, kw in files.items():
        tifffile.imwrite(tmp_path / name, ref, **kw)
        with open_movie(tmp_path / name) as m:
            check_same(m, ref)
    write_page_per_frame(tmp_path / "ppf_big_zlib.tif", ref, bigtiff=True, compression="zlib")
    with open_movie(tmp_path / "ppf_big_zlib.tif") as m:
        assert "compressed" in m.layout and "BigTIFF" in m.layout
        check_same(m, ref)


def test_big_endian_tiff(tmp_path):
    ref = stack()
    tifffile.imwrite(tmp_path / "be.tif", ref, byteorder=">")  # tifffile writes Motorola order
    with open_movie(tmp_path / "be.tif") as m:
        assert m.dtype == np.dtype(np.uint16) and m.dtype.isnative
        check_same(m, ref)


def test_imagej_single_ifd_stack_read_by_offset(tmp_path):
    """ImageJ files over 4 GB hold one IFD for all frames; make a small one by ending the IFD chain
    of a tifffile ImageJ stack after the first IFD (tifffile itself then reads it by offset too)."""
    ref = stack()
    path = tmp_path / "single.tif"
    tifffile.imwrite(path, ref, imagej=True, metadata={"axes": "TYX", "finterval": 0.0025})
    with open(path, "r+b") as f:
        first = struct.unpack("<I", f.read(8)[4:])[0]
        f.seek(first)
        count = struct.unpack("<H", f.read(2))[0]
        f.seek(first + 2 + 12 * count)
        f.write(b"\0\0\0\0")
    with tifffile.TiffFile(path) as tif:
        assert len(tif.pages) == 1
        np.testing.assert_array_equal(tif.series[0].asarray(), ref)  # tifffile agrees with the file
    with open_movie(path) as m:
        assert "single IFD" in m.layout
        check_same(m, ref)
        assert m.fps == pytest.approx(400.0)


def test_truncated_imagej_stack_reads_whole_frames(tmp_path):
    ref = stack()
    path = tmp_path / "cut.tif"
    tifffile.imwrite(path, ref, imagej=True, metadata={"axes": "TYX"})
    with tifffile.TiffFile(path) as tif:
        start = tif.pages.first.dataoffsets[0]
    data = path.read_bytes()
    path.write_bytes(data[:start + 7 * H * W * 2 + 100])  # 7 whole frames and a bit
    with open_movie(path) as m:
        assert m.n_frames == 7
        assert "truncated: 7 of 20 frames readable" in m.notices
        np.testing.assert_array_equal(read_all(m), ref[:7])


def test_truncated_page_per_frame_tiff(tmp_path):
    ref = stack()
    path = tmp_path / "cut.tif"
    write_page_per_frame(path, ref)
    with tifffile.TiffFile(path) as tif:
        cut = tif.pages[12].dataoffsets[0] + 10  # inside the pixels of frame 12
    path.write_bytes(path.read_bytes()[:cut])
    with open_movie(path) as m:
        assert m.n_frames == 12
        assert any(n.startswith("truncated: 12 frames readable") for n in m.notices)
        np.testing.assert_array_equal(read_all(m), ref[:12])


def test_rgb_tiff_reads_as_bt601_luminance(tmp_path):
    rng = np.random.default_rng(3)
    rgb = rng.integers(0, 256, (4, H, W, 3), dtype=np.uint8)
    tifffile.imwrite(tmp_path / "rgb.tif", rgb, photometric="rgb")
    # ITU-R BT.601 luma weights (Rec. 601), computed here directly with numpy
    expect = rgb[..., 0] * 0.299 + rgb[..., 1] * 0.587 + rgb[..., 2] * 0.114
    with open_movie(tmp_path / "rgb.tif") as m:
        assert m.dtype == np.float32 and m.n_frames == 4
        assert any("BT.601" in n for n in m.notices)
        np.testing.assert_allclose(read_all(m), expect, rtol=1e-5)
    assert BT601.tolist() == pytest.approx([0.299, 0.587, 0.114])


def test_single_image_is_one_frame_movie(tmp_path):
    img = stack()[0]
    tifffile.imwrite(tmp_path / "one.tif", img)
    np.save(tmp_path / "one.npy", img)
    for name in ("one.tif", "one.npy"):
        with open_movie(tmp_path / name) as m:
            assert m.n_frames == 1
            assert any("1-frame movie" in n for n in m.notices)
            np.testing.assert_array_equal(m.frame(0), img)


def test_npy_memory_mapped_by_numpy(tmp_path):
    for dtype in (np.uint16, np.int16, np.float32, ">u2"):
        ref = stack(np.dtype(dtype).newbyteorder("="))
        path = tmp_path / "m.npy"
        np.save(path, ref.astype(dtype))  # numpy's own writer
        with open_movie(path) as m:
            assert "memory-mapped" in m.layout
            check_same(m, ref)
    np.save(tmp_path / "f.npy", np.asfortranarray(stack()))
    with open_movie(tmp_path / "f.npy") as m:
        check_same(m, stack())


def test_truncated_npy(tmp_path):
    ref = stack()
    path = tmp_path / "cut.npy"
    np.save(path, ref)
    path.write_bytes(path.read_bytes()[:-(H * W * 2 * 5 + 3)])
    with open_movie(path) as m:
        assert m.n_frames == 14 and "truncated: 14 of 20 frames readable" in m.notices
        np.testing.assert_array_equal(read_all(m), ref[:14])


def test_png_and_tiff_folders_natural_order(tmp_path):
    ref = stack()
    for kind in ("png", "tif"):
        folder = tmp_path / kind
        folder.mkdir()
        for i, f in enumerate(ref):
            name = folder / f"frame{i}.{kind}"  # frame2 must come before frame10
            if kind == "png":
                Image.fromarray(f).save(name)  # Pillow writes 16-bit greyscale PNG
            else:
                tifffile.imwrite(name, f)
        with open_movie(folder) as m:
            assert f"numbered {kind.upper() if kind == 'png' else 'TIFF'} frames" in m.layout
            check_same(m, ref)


def test_rgb_png_folder(tmp_path):
    rgb = np.random.default_rng(5).integers(0, 256, (3, H, W, 3), dtype=np.uint8)
    for i, f in enumerate(rgb):
        Image.fromarray(f, "RGB").save(tmp_path / f"f{i:03d}.png")
    with open_movie(tmp_path) as m:
        expect = rgb @ np.array([0.299, 0.587, 0.114])  # ITU-R BT.601 luma weights
        np.testing.assert_allclose(read_all(m), expect, rtol=1e-5)


def test_raw_with_descriptor(tmp_path):
    ref = stack()
    (tmp_path / "run.raw").write_bytes(b"HEAD" * 4 + ref.astype(">u2").tobytes())  # numpy tobytes
    desc = {"shape": [N, H, W], "dtype": "uint16", "byte_order": "big", "header_bytes": 16, "fps": 250}
    (tmp_path / "run.raw.json").write_text(json.dumps(desc))
    for path in ("run.raw", "run.raw.json"):
        with open_movie(tmp_path / path) as m:
            check_same(m, ref)
            assert m.fps == 250 and m.timing.source.startswith("descriptor")
    (tmp_path / "run.raw.json").write_text(json.dumps({"dtype": "uint16"}))
    with pytest.raises(BadInput, match="run.raw.json: bad raw movie descriptor"):
        open_movie(tmp_path / "run.raw")


def test_hdf5_dataset(tmp_path):
    h5py = pytest.importorskip("h5py")
    ref = stack()
    with h5py.File(tmp_path / "m.h5", "w") as f:  # h5py as the reference writer
        f["movie"] = ref
        f["movie"].attrs["fps"] = 100.0
    with open_movie(tmp_path / "m.h5") as m:
        check_same(m, ref)
        assert m.fps == 100.0


def test_zarr_array(tmp_path):
    zarr = pytest.importorskip("zarr")
    ref = stack()
    z = zarr.open(str(tmp_path / "m.zarr"), mode="w", shape=ref.shape, dtype=ref.dtype)
    z[:] = ref
    with open_movie(tmp_path / "m.zarr") as m:
        check_same(m, ref)


def test_missing_optional_package_is_bad_input(tmp_path, monkeypatch):
    import builtins

    real = builtins.__import__

    def no_h5py(name, *a, **kw):
        if name == "h5py":
            raise ImportError("no h5py")
        return real(name, *a, **kw)

    monkeypatch.setattr(builtins, "__import__", no_h5py)
    monkeypatch.setitem(__import__("sys").modules, "h5py", None)
    (tmp_path / "m.h5").write_bytes(b"\x89HDF\r\n\x1a\n" + b"\0" * 100)
    with pytest.raises(BadInput, match=r"m\.h5: reading HDF5 needs the optional package h5py"):
        open_movie(tmp_path / "m.h5")


def test_file_cut_after_open_is_bad_input_not_a_crash(tmp_path):
    ref = stack()
    path = tmp_path / "m.npy"
    np.save(path, ref)  # numpy's writer
    with open_movie(path) as m:
        with open(path, "r+b") as f:
            f.truncate(200)
        with pytest.raises(BadInput, match=r"m\.npy: frame 15 cannot be read: the file ends"):
            m.frame(15)


def test_multi_strip_and_rgb_npy(tmp_path):
    ref = stack()
    path = tmp_path / "strips.tif"
    write_page_per_frame(path, ref, rowsperstrip=4)  # tifffile: 4 strips a page
    with tifffile.TiffFile(path) as tif:
        assert len(tif.pages.first.dataoffsets) == 4
    with open_movie(path) as m:
        check_same(m, ref)
    rgb = np.random.default_rng(6).integers(0, 256, (5, H, W, 3), dtype=np.uint8)
    np.save(tmp_path / "rgb.npy", rgb)
    with open_movie(tmp_path / "rgb.npy") as m:
        expect = rgb @ np.array([0.299, 0.587, 0.114])  # ITU-R BT.601 luma weights
        assert m.n_frames == 5 and m.dtype == np.float32
        np.testing.assert_allclose(m.block(0, 5), expect, rtol=1e-5)
