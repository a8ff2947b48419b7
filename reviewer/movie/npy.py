"""NumPy `.npy` movies (memory-mapped, never loaded whole), and a Movie over any array-like dataset."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, Timing
from reviewer.movie.offsets import OffsetMovie
from reviewer.movie.pixels import RGB_NOTICE, output_dtype, to_frames

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
            out, note = (np.dtype(np.float32), None) if rgb else output_dtype(data.dtype, layout)
        except (ValueError, TypeError) as exc:
            raise BadInput(f"{path}: {exc}") from None
        notices = list(notices or []) + ([note] if note else [])
        super().__init__(path=Path(path), n_frames=int(data.shape[0]),
                         shape=(int(data.shape[1]), int(data.shape[2])), dtype=out, layout=layout,
                         timing=timing or Timing(), fingerprint=fingerprint, notices=notices)

    def _read(self, start: int, stop: int) -> np.ndarray:
        return to_frames(np.asarray(self.data[start:stop]), self.dtype, self._rgb)

    def close(self) -> None:
        if self._closer is not None:
            self._closer()


def _header(path: Path) -> tuple[tuple[int, ...], bool, np.dtype, int]:
    with open(path, "rb") as f:
        version = np.lib.format.read_magic(f)
        if version == (1, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_1_0(f)
        elif version == (2, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_2_0(f)
        else:
            shape, fortran, dtype = np.lib.format._read_array_header(f, version)  # noqa: SLF001
        return tuple(shape), bool(fortran), np.dtype(dtype), f.tell()


def open_npy(path: Path, fingerprint: str) -> Movie:
    try:
        shape, fortran, dtype, offset = _header(path)
    except (ValueError, OSError, SyntaxError, TypeError, EOFError) as exc:
        raise BadInput(f"{path}: not a NumPy .npy file ({str(exc).splitlines()[0][:80]})") from None
    if dtype.hasobject or dtype.fields is not None:
        raise BadInput(f"{path}: .npy holds {dtype} values, not pixel values")
    shape, rgb, notices = frames_layout(shape, path, ".npy array")
    frame_shape = shape[1:]
    frame_bytes = int(np.prod(frame_shape)) * dtype.itemsize
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
    offsets = offset + np.arange(n, dtype=np.int64) * frame_bytes
    return OffsetMovie(path, offsets, frame_shape, dtype, out, layout=layout, fingerprint=fingerprint,
                       notices=notices)
