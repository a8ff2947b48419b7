"""Seeded fuzz of movie headers: damaged TIFF IFDs, .npy headers and raw descriptors must open and read
as a correct movie or raise BadInput, never another exception and never hang."""

from __future__ import annotations

import json
import signal
from contextlib import contextmanager

import numpy as np
import pytest
import tifffile

from reviewer.errors import BadInput
from reviewer.movie import open_movie

SEED = 20260
CASES = 200  # per container; each case opens one file and reads three frames


@contextmanager
def _deadline(seconds: int):
    """Fail (instead of hanging the suite) when one case takes longer than `seconds`."""
    def alarm(_sig, _frame):
        raise TimeoutError(f"no answer within {seconds} s")

    old = signal.signal(signal.SIGALRM, alarm)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def _open_and_read(path) -> str:
    """'bad' for BadInput, 'ok' for a movie whose frames read with the announced shape and dtype."""
    with _deadline(10):
        try:
            with open_movie(path, show_progress=False) as m:
                assert m.n_frames >= 1 and min(m.shape) >= 1
                for i in sorted({0, m.n_frames // 2, m.n_frames - 1}):
                    try:
                        f = m.frame(i)
                    except BadInput:
                        continue  # a frame that cannot be read is reported as BadInput: allowed
                    assert f.shape == m.shape and f.dtype == m.dtype
                    block = m.block(i, i + 2)
                    assert block.shape[1:] == m.shape
        except BadInput as exc:
            assert str(exc) and "\n" not in str(exc)
            return "bad"
    return "ok"


def _mutate(raw: bytes, region: tuple[int, int], rng: np.random.Generator) -> bytes:
    b = bytearray(raw)
    lo, hi = region
    for _ in range(int(rng.integers(1, 6))):
        at = int(rng.integers(lo, min(hi, len(b))))
        b[at] = int(rng.integers(0, 256)) if rng.random() < 0.7 else b[at] ^ 0x80
    if rng.random() < 0.15:
        b = b[: int(rng.integers(8, len(b)))]  # cut somewhere as well
    return bytes(b)


@pytest.mark.parametrize("compression", [None, "zlib", "packbits"])
def test_fuzzed_tiff_ifds(tmp_path, compression):
    rng = np.random.default_rng(SEED)
    src = tmp_path / "src.tif"
    frames = rng.integers(0, 4000, (6, 12, 10), dtype=np.uint16)
    with tifffile.TiffWriter(src) as w:  # page-per-frame, one IFD per frame (tifffile's writer)
        for f in frames:
            w.write(f, contiguous=False, compression=compression)
    raw = src.read_bytes()
    with tifffile.TiffFile(src) as tif:
        regions = [(0, 16)] + [(p.offset, p.offset + 2 + 12 * len(p.tags) + 4) for p in tif.pages]
    seen = set()
    for k in range(CASES):
        p = tmp_path / f"f{k}.tif"
        p.write_bytes(_mutate(raw, regions[int(rng.integers(len(regions)))], rng))
        seen.add(_open_and_read(p))
    assert seen <= {"ok", "bad"}


def test_fuzzed_npy_headers(tmp_path):
    rng = np.random.default_rng(SEED + 1)
    src = tmp_path / "src.npy"
    np.save(src, rng.integers(0, 4000, (5, 8, 6), dtype=np.uint16))
    raw = src.read_bytes()
    texts = [b"(-1, 8, 6)", b"(5, 8, -6)", b"(99999999999999, 8, 6)", b"(5, 8)", b"(5,)", b"()",
             b"(5, 8, 6, 7, 9)", b"'x'", b"(5, 0, 6)", b"[5, 8, 6]", b"(5.0, 8, 6)"]
    results = set()
    for k in range(CASES):
        p = tmp_path / f"f{k}.npy"
        if k < len(texts):  # shape values people and broken writers produce
            data = raw.replace(b"(5, 8, 6)", texts[k].ljust(9))
        else:
            data = _mutate(raw, (0, 128), rng)
        p.write_bytes(data)
        results.add(_open_and_read(p))
    assert results == {"ok", "bad"}


def test_fuzzed_raw_descriptors(tmp_path):
    rng = np.random.default_rng(SEED + 2)
    (tmp_path / "m.raw").write_bytes(rng.integers(0, 4000, 4 * 8 * 6, dtype="<u2").tobytes())
    values = [None, 0, -1, 1, 2, 8, 6, 1e308, float("nan"), "8", "uint16", "float128", "big", [8, 6],
              [4, 8, 6], [-4, 8, 6], [0, 8, 6], [4, 8, 6, 1], {}, True, 10**30, "<", "nonsense"]
    keys = ["shape", "dtype", "byte_order", "header_bytes", "fps", "height", "width", "file"]
    results = set()
    for _ in range(CASES):
        desc = {"shape": [4, 8, 6], "dtype": "uint16", "byte_order": "little", "fps": 100.0}
        for key in rng.choice(keys, size=int(rng.integers(1, 3)), replace=False):
            v = values[int(rng.integers(len(values)))]
            if v is None:
                desc.pop(str(key), None)
            else:
                desc[str(key)] = v
        (tmp_path / "m.raw.json").write_text(json.dumps(desc))
        results.add(_open_and_read(tmp_path / "m.raw"))
    assert results == {"ok", "bad"}


def _container(kind, path, frames):
    """The same small movie written by each container's own library."""
    if kind == "hdf5":
        h5py = pytest.importorskip("h5py")
        with h5py.File(path, "w") as f:
            f["m"] = frames
            f["m"].attrs["fps"] = 10.0
    elif kind == "mrc":
        mrcfile = pytest.importorskip("mrcfile")
        with mrcfile.new(path) as m:
            m.set_data(frames)
    elif kind == "npz":
        np.savez(path, m=frames)
    else:
        av = pytest.importorskip("av")
        with av.open(str(path), "w") as c:
            s = c.add_stream("ffv1", rate=10)
            s.width, s.height, s.pix_fmt = frames.shape[2], frames.shape[1], "gray"
            for f in frames.astype(np.uint8):
                for packet in s.encode(av.VideoFrame.from_ndarray(f, format="gray")):
                    c.mux(packet)
            for packet in s.encode():
                c.mux(packet)


@pytest.mark.parametrize(("kind", "name", "head"), [("hdf5", "m.h5", 2048), ("mrc", "m.mrc", 1024),
                                                    ("npz", "m.npz", 400), ("video", "m.mkv", 600)])
def test_fuzzed_container_headers(tmp_path, kind, name, head):
    rng = np.random.default_rng(SEED + 3)
    src = tmp_path / ("src_" + name)
    _container(kind, src, rng.integers(0, 200, (6, 10, 12), dtype=np.uint16))
    raw = src.read_bytes()
    results = set()
    for k in range(CASES // 3):
        p = tmp_path / f"f{k}_{name}"
        p.write_bytes(_mutate(raw, (0, head), rng))
        results.add(_open_and_read(p))
    assert "bad" in results  # damage was met, and every case was "ok" or one BadInput line
