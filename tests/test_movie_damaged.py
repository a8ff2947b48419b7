"""Damaged movie files: one BadInput line naming the file (and the frame), never a traceback; and a
fingerprint that changes whenever the bytes that decide a result change."""

from __future__ import annotations

import json
import os
import struct

import numpy as np
import pytest
import tifffile

from reviewer.cli import main
from reviewer.errors import BadInput
from reviewer.movie import fingerprint_file, open_movie


def _npy_with_header(path, header: str, version=(1, 0), payload=b"\0" * 400):
    """A .npy file with a hand-written header dict (layout from NumPy's format.py documentation)."""
    text = header.encode("latin1")
    fmt = "<H" if version == (1, 0) else "<I"
    pad = 64 - (8 + struct.calcsize(fmt) + len(text) + 1) % 64
    text += b" " * pad + b"\n"
    path.write_bytes(b"\x93NUMPY" + bytes(version) + struct.pack(fmt, len(text)) + text + payload)
    return path


def _one_line_exit_2(capsys, path, command="info"):
    code = main([command, str(path)] + (["--json"] if command == "info" else []))
    out, err = capsys.readouterr()
    lines = err.strip().splitlines()
    assert code == 2 and out == "", err
    assert len(lines) == 1 and str(path) in lines[0] and "Traceback" not in err, err
    return lines[0]


def test_npy_of_unknown_format_version(tmp_path, capsys):
    p = tmp_path / "v9.npy"
    np.save(p, np.zeros((3, 4, 5), np.uint16))
    raw = bytearray(p.read_bytes())
    raw[6] = 9  # major version byte of the .npy magic (NumPy format.py: b"\x93NUMPY" + major + minor)
    p.write_bytes(bytes(raw))
    assert "version 9.0" in _one_line_exit_2(capsys, p)


@pytest.mark.parametrize("shape", ["(-5, 4, 5)", "(5, -4, 5)"])
def test_npy_with_negative_sizes(tmp_path, capsys, shape):
    p = _npy_with_header(tmp_path / "neg.npy", f"{{'descr': '<u2', 'fortran_order': False, "
                                                f"'shape': {shape}, }}")
    assert "negative" in _one_line_exit_2(capsys, p)
    assert "negative" in _one_line_exit_2(capsys, p, "scan")


def test_npy_with_absurd_frame_count_reads_what_is_there(tmp_path):
    # 10^15 frames declared, 3 present: the whole frames are read, the user is told
    payload = np.arange(3 * 4 * 5, dtype="<u2").tobytes()
    p = _npy_with_header(tmp_path / "many.npy", "{'descr': '<u2', 'fortran_order': False, "
                                                "'shape': (1000000000000000, 4, 5), }", payload=payload)
    with open_movie(p) as m:
        assert m.n_frames == 3
        np.testing.assert_array_equal(m.block(0, 3), np.arange(60, dtype=np.uint16).reshape(3, 4, 5))
        assert any("truncated: 3 of 1000000000000000" in n for n in m.notices)


def test_npy_with_absurd_frame_size(tmp_path, capsys):
    p = _npy_with_header(tmp_path / "wide.npy", "{'descr': '<u2', 'fortran_order': False, "
                                                "'shape': (3, 10000000000, 10000000000), }")
    assert "no whole frame" in _one_line_exit_2(capsys, p)


def _patch_size(src, dst, height, width):
    """Copy a TIFF with every page's ImageWidth/ImageLength tags set to the given values."""
    raw = bytearray(src.read_bytes())
    with tifffile.TiffFile(src) as tif:
        for page in tif.pages:
            for code, value in ((256, width), (257, height)):
                tag = page.tags[code]
                struct.pack_into("<H" if tag.dtype == 3 else "<I", raw, tag.valueoffset, value)
    dst.write_bytes(bytes(raw))
    return dst


@pytest.mark.parametrize("compression", [None, "zlib", "packbits"])
@pytest.mark.parametrize("side", [60000, 20000])
def test_tiff_pages_claiming_huge_frames_refused_before_reading(tmp_path, capsys, compression, side):
    src = tmp_path / "small.tif"
    tifffile.imwrite(src, np.ones((5, 16, 16), np.uint16), contiguous=False, compression=compression)
    p = _patch_size(src, tmp_path / "huge.tif", side, side)
    line = _one_line_exit_2(capsys, p, "scan")
    assert f"{side}x{side}" in line


def test_undecodable_page_names_the_frame(tmp_path):
    p = tmp_path / "z.tif"
    frames = np.random.default_rng(0).integers(0, 4000, (6, 32, 32), dtype=np.uint16)
    tifffile.imwrite(p, frames, contiguous=False, compression="zlib")
    with tifffile.TiffFile(p) as tif:
        start, count = tif.pages[3].dataoffsets[0], tif.pages[3].databytecounts[0]
    raw = bytearray(p.read_bytes())
    raw[start:start + count] = bytes(count)  # frame 3's deflate stream zeroed: not decodable
    p.write_bytes(bytes(raw))
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.frame(2), frames[2])
        with pytest.raises(BadInput, match=r"z\.tif: frame 3 "):
            m.frame(3)
        with pytest.raises(BadInput, match=r"z\.tif: frame 3 "):
            m.block(0, 6)
        np.testing.assert_array_equal(m.frame(4), frames[4])


@pytest.mark.parametrize("compression", [None, "zlib"])
def test_file_truncated_while_open_names_the_frame(tmp_path, compression):
    p = tmp_path / "t.tif"
    frames = np.random.default_rng(1).integers(0, 4000, (8, 32, 32), dtype=np.uint16)
    with tifffile.TiffWriter(p) as w:
        for f in frames:
            w.write(f, contiguous=False, compression=compression)
    with tifffile.TiffFile(p) as tif:
        cut = int(tif.pages[5].dataoffsets[0]) + 10
    with open_movie(p) as m:
        os.truncate(p, cut)  # frame 5 cut, frames 6 and 7 gone
        np.testing.assert_array_equal(m.frame(1), frames[1])
        with pytest.raises(BadInput, match=r"t\.tif: .*frame 6"):
            m.frame(6)
        with pytest.raises(BadInput, match=r"t\.tif: .*frames? 5"):
            m.block(4, 8)


def _two_movies_same_size_and_mtime(tmp_path, change_at):
    a = tmp_path / "a.npy"
    data = np.random.default_rng(2).integers(0, 4000, (200, 128, 128), dtype=np.uint16)  # 6.25 MiB
    np.save(a, data)
    before = fingerprint_file(a)
    st = a.stat()
    raw = bytearray(a.read_bytes())
    raw[change_at(len(raw))] ^= 0xFF
    a.write_bytes(bytes(raw))
    os.utime(a, ns=(st.st_atime_ns, st.st_mtime_ns))
    assert a.stat().st_size == st.st_size and a.stat().st_mtime_ns == st.st_mtime_ns
    return before, fingerprint_file(a)


def test_fingerprint_sees_a_change_in_the_middle(tmp_path):
    before, after = _two_movies_same_size_and_mtime(tmp_path, lambda n: n // 2)
    assert before != after


def test_fingerprint_sees_a_corrected_raw_descriptor(tmp_path):
    data = tmp_path / "run.raw"
    data.write_bytes(np.arange(4 * 8 * 8, dtype="<u2").tobytes())
    desc = tmp_path / "run.raw.json"
    desc.write_text(json.dumps({"shape": [4, 8, 8], "dtype": "uint16", "fps": 100.0}))
    first = open_movie(data).fingerprint
    st = desc.stat()
    desc.write_text(json.dumps({"shape": [4, 8, 8], "dtype": "uint16", "fps": 200.0}))  # same size
    os.utime(desc, ns=(st.st_atime_ns, st.st_mtime_ns))
    second = open_movie(data)
    assert second.fps == 200.0 and second.fingerprint != first
    assert open_movie(desc).fingerprint == second.fingerprint  # either path names the same movie


def test_fingerprint_covers_the_times_csv(tmp_path):
    p = tmp_path / "m.npy"
    np.save(p, np.zeros((3, 4, 5), np.uint16))
    plain = open_movie(p).fingerprint
    (tmp_path / "m.npy.times.csv").write_text("frame,time_s\n0,0\n1,0.5\n2,1.0\n")
    timed = open_movie(p).fingerprint
    (tmp_path / "m.npy.times.csv").write_text("frame,time_s\n0,0\n1,0.6\n2,1.0\n")
    assert len({plain, timed, open_movie(p).fingerprint}) == 3


def test_hdf5_dataset_claiming_huge_frames(tmp_path, capsys):
    h5py = pytest.importorskip("h5py")
    p = tmp_path / "sparse.h5"
    with h5py.File(p, "w") as f:  # 3 x 200000 x 200000 declared, nothing written: a 2 KB file
        f.create_dataset("m", shape=(3, 200000, 200000), dtype="u2", chunks=(1, 1000, 1000),
                         compression="gzip")
    assert "GiB" in _one_line_exit_2(capsys, p, "scan")


def test_absurd_frame_count_of_tiny_frames_refused(tmp_path, capsys):
    data = tmp_path / "dots.raw"
    with open(data, "wb") as f:
        f.truncate(300_000_000)  # a sparse 300 MB file: 3*10^8 one-pixel frames
    (tmp_path / "dots.raw.json").write_text(json.dumps({"height": 1, "width": 1, "dtype": "uint8"}))
    assert "more than the 100,000,000 frames" in _one_line_exit_2(capsys, data)
