"""NumPy `.npy` movies (memory-mapped, never loaded whole), and a Movie over any array-like dataset."""

from __future__ import annotations

import ast
import math
import struct
import warnings
import zipfile
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.arrays import holdings, pick
from reviewer.movie.base import Movie, Timing
from reviewer.movie.offsets import OffsetMovie, even_offsets
from reviewer.movie.pixels import (
    RGB_NOTICE,
    frame_limit,
    frame_size_problem,
    output_dtype,
    to_frames,
)

SINGLE_NOTICE = "a single 2-D image: read as a 1-frame movie"


def frames_layout(shape: tuple[int, ...], path: Path, what: str) -> tuple[tuple[int, ...], bool, list[str]]:
    """(n, h, w[, s]) shape of a 2-D/3-D/4-D array, whether it is colour, and notices."""
    notices: list[str] = []
    if len(shape) == 2 or (len(shape) == 3 and shape[-1] in (3, 4) and min(shape[:2]) > 4):
        notices.append(SINGLE_NOTICE)
        shape = (1, *shape)
    if len(shape) == 4 and shape[-1] in (3, 4):
        notices.append(RGB_NOTICE)
        return tuple(shape), True, notices
    if len(shape) != 3:
        raise BadInput(f"{path}: {what} has shape {tuple(shape)}; expected (frames, height, width)")
    if 0 in shape:
        raise BadInput(f"{path}: {what} is empty (shape {tuple(shape)})")
    return tuple(shape), False, notices


class DatasetMovie(Movie):
    """Frames sliced from a (n, h, w[, s]) array-like (np.memmap, h5py or zarr dataset)."""

    def __init__(self, data, path: Path, *, layout: str, rgb: bool = False, timing: Timing | None = None,
                 fingerprint: str = "", notices: list[str] | None = None, closer=None) -> None:
        self.data, self._rgb, self._closer = data, rgb, closer
        try:
            out, note = ((np.dtype(np.float32), None) if rgb
                         else output_dtype(data.dtype, layout.split(",")[0]))
        except (ValueError, TypeError) as exc:
            raise BadInput(f"{path}: {exc}") from None
        notices = list(notices or []) + ([note] if note else [])
        frame_bytes = math.prod(data.shape[1:]) * np.dtype(data.dtype).itemsize
        problem = frame_size_problem(frame_bytes)
        if problem:
            raise BadInput(f"{path}: frames of {tuple(data.shape[1:])} {data.dtype} values: {problem}")
        super().__init__(path=Path(path), n_frames=int(data.shape[0]),
                         shape=(int(data.shape[1]), int(data.shape[2])), dtype=out, layout=layout,
                         timing=timing or Timing(), fingerprint=fingerprint, notices=notices)

    def _read(self, start: int, stop: int) -> np.ndarray:
        return to_frames(np.asarray(self.data[start:stop]), self.dtype, self._rgb)

    def close(self) -> None:
        if self._closer is not None:
            self._closer()


# .npy format versions this reader knows (NumPy's format.py, "NEP 1"): header length field size and
# text encoding. Version 1.0: 2-byte length, latin-1; 2.0: 4-byte length; 3.0: 4-byte, UTF-8.
_VERSIONS = {(1, 0): ("<H", "latin1"), (2, 0): ("<I", "latin1"), (3, 0): ("<I", "utf8")}
MAX_HEADER = 1 << 16


def _header(path: Path) -> tuple[tuple[int, ...], bool, np.dtype, int]:
    """(shape, fortran order, dtype, data offset) from the header; BadInput when it is not one."""
    with open(path, "rb") as f:
        head = f.read(12)
        if len(head) < 10 or head[:6] != b"\x93NUMPY":
            raise BadInput(f"{path}: not a NumPy .npy file (no .npy magic bytes)")
        version = (head[6], head[7])
        if version not in _VERSIONS:
            raise BadInput(f"{path}: .npy format version {version[0]}.{version[1]} is not known "
                           "(known: 1.0, 2.0, 3.0)")
        fmt, encoding = _VERSIONS[version]
        start = 8 + struct.calcsize(fmt)
        (length,) = struct.unpack_from(fmt, head, 8) if len(head) >= start else (-1,)
        if not 0 < length <= MAX_HEADER:
            raise BadInput(f"{path}: damaged .npy header (header length {length})")
        f.seek(start)
        text = f.read(length)
    if len(text) < length:
        raise BadInput(f"{path}: truncated .npy header")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # e.g. invalid escapes in a damaged header's strings
            d = ast.literal_eval(text.decode(encoding))
        shape, fortran, descr = d["shape"], d["fortran_order"], d["descr"]
        dtype = np.lib.format.descr_to_dtype(descr)
    except (ValueError, SyntaxError, TypeError, KeyError, UnicodeDecodeError, MemoryError,
            RecursionError) as exc:
        raise BadInput(f"{path}: damaged .npy header ({exc.__class__.__name__})") from None
    if (not isinstance(shape, tuple) or not all(type(v) is int for v in shape)
            or not isinstance(fortran, bool)):
        raise BadInput(f"{path}: damaged .npy header (shape {shape!r})")
    if any(v < 0 for v in shape):
        raise BadInput(f"{path}: .npy header declares a negative size (shape {shape})")
    return tuple(shape), fortran, dtype, start + length


def open_npy(path: Path, fingerprint: str) -> Movie:
    shape, fortran, dtype, offset = _header(path)
    if dtype.hasobject or dtype.fields is not None or dtype.kind not in "iuf" or dtype.itemsize == 0:
        raise BadInput(f"{path}: .npy holds {dtype} values, not pixel values")
    shape, rgb, notices = frames_layout(shape, path, ".npy array")
    frame_shape = shape[1:]
    frame_bytes = math.prod(frame_shape) * dtype.itemsize  # Python ints: no overflow
    size = path.stat().st_size
    whole = max(0, (size - offset) // frame_bytes)
    layout = f"NumPy .npy, {shape[0]} frames, memory-mapped"
    if fortran:
        if whole < shape[0]:
            raise BadInput(f"{path}: truncated .npy (Fortran order, {size} bytes)")
        data = np.load(path, mmap_mode="r")
        data = data.reshape(shape)
        return DatasetMovie(data, path, layout=layout + " (Fortran order)", rgb=rgb,
                            fingerprint=fingerprint, notices=notices)
    n = min(shape[0], whole)
    if n == 0:
        raise BadInput(f"{path}: truncated .npy: no whole frame ({size} bytes)")
    if n < shape[0]:
        notices.append(f"truncated: {n} of {shape[0]} frames readable")
    try:
        out, note = (np.dtype(np.float32), None) if rgb else output_dtype(dtype, ".npy")
    except ValueError as exc:
        raise BadInput(f"{path}: {exc}") from None
    notices += [note] if note else []
    offsets = even_offsets(offset, n, frame_bytes, path)
    return OffsetMovie(path, offsets, frame_shape, dtype, out, layout=layout, fingerprint=fingerprint,
                       notices=notices)


def _npz_members(path: Path) -> dict[str, tuple[tuple[int, ...], np.dtype, int | None]]:
    """{array name: (shape, dtype, byte offset of its data in the .npz or None when compressed)}."""
    out = {}
    with zipfile.ZipFile(path) as z, open(path, "rb") as raw:
        for info in z.infolist():
            if not info.filename.endswith(".npy"):
                continue
            with z.open(info) as f:
                version = np.lib.format.read_magic(f)
                if version not in _VERSIONS:
                    raise BadInput(f"{path}: member {info.filename} has .npy version {version}")
                reader = (np.lib.format.read_array_header_1_0 if version == (1, 0)
                          else np.lib.format.read_array_header_2_0)
                shape, fortran, dtype = reader(f)
                header_len = f.tell()
            offset = None
            if info.compress_type == zipfile.ZIP_STORED and not fortran:
                raw.seek(info.header_offset)
                local = raw.read(30)  # ZIP local file header (PKWARE APPNOTE 4.3.7)
                name_len, extra_len = struct.unpack("<HH", local[26:30])
                offset = info.header_offset + 30 + name_len + extra_len + header_len
            out[info.filename[:-4]] = (tuple(shape), np.dtype(dtype), offset)
    return out


class _Member:
    """Shape and dtype of an .npz member without loading it (for choosing one)."""

    def __init__(self, shape, dtype) -> None:
        self.shape, self.dtype = shape, dtype


def open_npz(path: Path, fingerprint: str, dataset: str | None = None) -> Movie:
    """One array of a NumPy .npz archive (np.savez / np.savez_compressed): the largest 3-D one or
    `dataset`. Stored (uncompressed) members are read at byte offsets; compressed ones are loaded."""
    try:
        members = _npz_members(path)
    except (zipfile.BadZipFile, ValueError, OSError, EOFError, struct.error) as exc:
        raise BadInput(f"{path}: not a readable .npz archive ({str(exc).splitlines()[0][:80]})") from None
    listed = {k: _Member(s, d) for k, (s, d, _) in members.items()}
    key, member = pick(listed, path, dataset, "array")
    also = holdings(listed, key, "array")
    shape, dtype, offset = members[key]
    if dtype.kind not in "iuf":
        raise BadInput(f"{path}: array {key} holds {dtype} values, not pixel values")
    shape, rgb, notices = frames_layout(shape, path, f"array {key}")
    notices += [also] if also else []
    if offset is not None:
        frame_bytes = math.prod(shape[1:]) * dtype.itemsize
        out, note = (np.dtype(np.float32), None) if rgb else output_dtype(dtype, ".npz")
        offsets = even_offsets(offset, shape[0], frame_bytes, path)
        movie = OffsetMovie(path, offsets, shape[1:], dtype, out, fingerprint=fingerprint,
                            layout=f"NumPy .npz array {key}, {shape[0]} frames, read by offset",
                            notices=notices + ([note] if note else []))
    else:
        total = math.prod(shape) * dtype.itemsize
        if total > frame_limit():
            raise BadInput(f"{path}: array {key} is compressed and would take {total / 2**30:.1f} GiB "
                           "in memory; save it with np.savez (uncompressed) or as .npy to read it")
        with np.load(path, allow_pickle=False) as z:
            data = z[key].reshape(shape)
        notices.append(f"array {key} is compressed: loaded into memory ({data.nbytes / 2**20:.1f} MiB)")
        movie = DatasetMovie(data, path, layout=f"NumPy .npz array {key} (compressed), "
                             f"{shape[0]} frames", rgb=rgb, fingerprint=fingerprint, notices=notices)
    movie.selection = {"dataset": key}
    return movie
