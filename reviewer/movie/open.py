"""`open_movie(path, fps=None)`: pick the reader for a path and apply the timing rules."""

from __future__ import annotations

import os
import struct
from pathlib import Path

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, fingerprint_file
from reviewer.movie.extra import H5_SUFFIXES, is_zarr, open_hdf5, open_zarr
from reviewer.movie.folder import FolderMovie, _read_image, fingerprint_folder, open_folder
from reviewer.movie.npy import open_npy
from reviewer.movie.raw import RAW_SUFFIXES, open_raw
from reviewer.movie.tiff import open_tiff
from reviewer.movie.timing import resolve

TIFF_SUFFIXES = (".tif", ".tiff", ".btf", ".tf8", ".tf2")
KNOWN = "TIFF, .npy, .png, HDF5, raw + .json descriptor, or a folder of PNG/TIFF frames"


def _sniff(path: Path) -> str | None:
    with open(path, "rb") as f:
        head = f.read(8)
    if head[:4] in (b"II*\0", b"MM\0*", b"II+\0", b"MM\0+"):
        return "tiff"
    if head[:6] == b"\x93NUMPY":
        return "npy"
    if head[:8] == b"\x89HDF\r\n\x1a\n":
        return "hdf5"
    return None


def _open_file(p: Path, show_progress: bool) -> Movie:
    if p.stat().st_size == 0:
        raise BadInput(f"{p}: empty file (0 bytes)")
    suffix = p.suffix.lower()
    kind = {".npy": "npy", ".png": "png"}.get(suffix)
    if suffix in TIFF_SUFFIXES:
        kind = "tiff"
    elif suffix in H5_SUFFIXES:
        kind = "hdf5"
    elif suffix in RAW_SUFFIXES or suffix == ".json" or (p.parent / (p.name + ".json")).is_file():
        kind = "raw"
    if kind is None:
        kind = _sniff(p)
    if kind == "tiff":
        return open_tiff(p, fingerprint_file(p), show_progress)
    if kind == "npy":
        return open_npy(p, fingerprint_file(p))
    if kind == "hdf5":
        return open_hdf5(p, fingerprint_file(p))
    if kind == "raw":
        return open_raw(p, fingerprint_file)
    if kind == "png":
        return FolderMovie(p, [p], _read_image(p), fingerprint_folder([p]))
    raise BadInput(f"{p}: unknown movie format '{suffix or 'no suffix'}' (expected {KNOWN})")


def open_movie(path: str | os.PathLike, fps: float | None = None, *,
               show_progress: bool = True) -> Movie:
    """Open a movie read-only. `fps` overrides any timing stored with it.

    Raises BadInput("<path>: <what is wrong>") for anything that cannot be read as a movie.
    """
    p = Path(path).expanduser()
    try:
        if not p.exists():
            raise BadInput(f"{p}: no such file or folder")
        if p.is_dir():
            movie = open_zarr(p) if is_zarr(p) else open_folder(p)
        else:
            movie = _open_file(p, show_progress)
    except BadInput:
        raise
    except PermissionError:
        raise BadInput(f"{p}: permission denied") from None
    except (OSError, ValueError, struct.error, OverflowError, MemoryError) as exc:
        text = str(exc).splitlines()[0][:100] if str(exc) else exc.__class__.__name__
        raise BadInput(f"{p}: unreadable movie ({text})") from exc
    try:
        movie.timing = resolve(movie.path, movie.n_frames, movie.timing, fps, movie.notices)
    except BadInput:
        movie.close()
        raise
    return movie
