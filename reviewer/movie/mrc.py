"""MRC2014 movies and image stacks (Cheng et al. 2015, "MRC2014: Extensions to the MRC format header
for electron cryo-microscopy and tomography", J. Struct. Biol. 192:146-150): ``.mrc``, ``.mrcs``,
``.st``, ``.ali``, ``.map`` and their gzip-compressed ``.gz`` forms.

The 1024-byte header (and the NSYMBT-byte extended header after it) is read by mrcfile (optional extra
``mrc``); sections (NZ) are frames of NY x NX pixels. Plain files are read at byte offsets like
raw data; gzip files are decompressed as a stream (frames in order; going back starts again from the
beginning). Modes 0 (int8, or uint8 when the header says so), 1 (int16), 2 (float32), 6 (uint16) and
12 (float16) are pixel modes; the voxel size (Angstrom) gives the pixel size.
"""

from __future__ import annotations

import gzip
import threading
import warnings
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, Timing
from reviewer.movie.extra import need_module
from reviewer.movie.offsets import OffsetMovie, even_offsets
from reviewer.movie.pixels import output_dtype, to_frames

MRC_SUFFIXES = (".mrc", ".mrcs", ".st", ".ali", ".map")
HEADER_BYTES = 1024
GZIP_NOTICE = ("gzip-compressed MRC: frames are decompressed in order (going back re-reads from the "
               "start); unpack it with gunzip for random access")


def is_mrc(path: Path) -> bool:
    name = path.name.lower()
    name = name[:-3] if name.endswith(".gz") else name
    return name.endswith(MRC_SUFFIXES)


class GzipMovie(Movie):
    """Frames of one size at known offsets of a gzip-compressed stream."""

    def __init__(self, path: Path, start: int, frame_shape: tuple[int, int], file_dtype: np.dtype,
                 out_dtype: np.dtype, n: int, **kw) -> None:
        self._start, self._file_dtype = start, np.dtype(file_dtype)
        self._frame_bytes = frame_shape[0] * frame_shape[1] * self._file_dtype.itemsize
        self._gz = gzip.open(path, "rb")  # noqa: SIM115 - open while the movie is
        self._lock = threading.Lock()
        super().__init__(path=path, n_frames=n, shape=frame_shape, dtype=out_dtype, **kw)

    def _read(self, start: int, stop: int) -> np.ndarray:
        want = (stop - start) * self._frame_bytes
        with self._lock:
            self._gz.seek(self._start + start * self._frame_bytes)
            raw = self._gz.read(want)
        if len(raw) < want:
            bad = start + len(raw) // self._frame_bytes
            raise BadInput(f"{self.path}: frame {bad} cannot be read: the compressed data ends early")
        block = np.frombuffer(raw, self._file_dtype).reshape(stop - start, *self.shape)
        return to_frames(block, self.dtype, False)

    def close(self) -> None:
        self._gz.close()


def open_mrc(path: Path, fingerprint: str) -> Movie:
    mrcfile = need_module("mrcfile", path, "mrc", "MRC files")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # permissive mode warns; the checks below decide
            mrc = mrcfile.open(path, header_only=True, permissive=True)
        with mrc:
            h = mrc.header
            nx, ny, nz = int(h.nx), int(h.ny), int(h.nz)
            nsymbt, mode, ispg = int(h.nsymbt), int(h.mode), int(h.ispg)
            voxel = mrc.voxel_size
            dtype = mrcfile.utils.data_dtype_from_header(h)
    except (ValueError, OSError, EOFError) as exc:
        raise BadInput(f"{path}: not a readable MRC2014 file ({str(exc).splitlines()[0][:80]})") from None
    if mode not in (0, 1, 2, 6, 12):
        raise BadInput(f"{path}: MRC mode {mode} holds no plain pixel values (modes 0, 1, 2, 6, 12 do)")
    if min(nx, ny, nz) <= 0 or nsymbt < 0:
        raise BadInput(f"{path}: damaged MRC header (NX {nx}, NY {ny}, NZ {nz}, NSYMBT {nsymbt})")
    out, note = output_dtype(dtype, f"MRC mode {mode}")
    notices = [note] if note else []
    if ispg not in (0, 1) or (ispg == 1 and nz > 1):
        notices.append(f"MRC space group {ispg} (a volume): its {nz} sections are read as frames")
    start = HEADER_BYTES + nsymbt
    frame_bytes = nx * ny * dtype.itemsize
    ext = f", {nsymbt}-byte extended header" if nsymbt else ""
    pixel_nm = float(voxel.x) / 10.0 if float(voxel.x) > 0 else None
    if path.name.lower().endswith(".gz"):
        notices.append(GZIP_NOTICE)
        movie = GzipMovie(path, start, (ny, nx), dtype, out, nz,
                          layout=f"MRC2014 (gzip), {nz} frames, mode {mode}{ext}", timing=Timing(),
                          fingerprint=fingerprint, notices=notices)
    else:
        size = path.stat().st_size
        n = min(nz, max(0, (size - start) // frame_bytes))
        if n == 0:
            raise BadInput(f"{path}: truncated MRC file: no whole {ny}x{nx} frame")
        if n < nz:
            notices.append(f"truncated: {n} of {nz} frames readable")
        offsets = even_offsets(start, n, frame_bytes, path)
        movie = OffsetMovie(path, offsets, (ny, nx), dtype, out,
                            layout=f"MRC2014, {n} frames, mode {mode}{ext}, read by offset",
                            fingerprint=fingerprint, notices=notices)
    movie.pixel_size_nm = pixel_nm
    return movie
