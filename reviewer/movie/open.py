"""`open_movie(path, fps=None, ...)`: pick the reader for a path and apply the timing rules.

Built-in readers first; then readers that installed packages register in the entry-point group
``reviewer.readers`` (see `plugins`)."""

from __future__ import annotations

import hashlib
import json
import os
import struct
from dataclasses import dataclass, fields
from pathlib import Path

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, fingerprint_file
from reviewer.movie.extra import is_zarr, open_zarr
from reviewer.movie.folder import FolderMovie, _read_image, fingerprint_folder, open_folder
from reviewer.movie.hdf5 import H5_SUFFIXES, open_hdf5
from reviewer.movie.mrc import is_mrc, open_mrc
from reviewer.movie.npy import open_npy, open_npz
from reviewer.movie.plugins import open_with_plugins
from reviewer.movie.raw import RAW_SUFFIXES, open_raw
from reviewer.movie.tiff import open_tiff
from reviewer.movie.timing import resolve
from reviewer.movie.video import VIDEO_SUFFIXES, open_video

TIFF_SUFFIXES = (".tif", ".tiff", ".btf", ".tf8", ".tf2")
# file names a reader here claims by their suffix (MRC files: see is_mrc; Zarr stores are folders)
FILE_SUFFIXES = TIFF_SUFFIXES + H5_SUFFIXES + RAW_SUFFIXES + VIDEO_SUFFIXES + (".npy", ".npz")
KNOWN = ("TIFF, .npy, .npz, .png, HDF5, MRC, video, raw + .json descriptor, a Zarr store or a "
         "folder of PNG/TIFF frames; many more with the optional extra 'formats' (RosettaSciIO)")


@dataclass(frozen=True)
class Choice:
    """What the user chose inside a file (command-line options; None: the reader decides)."""

    dataset: str | None = None  # --dataset: array path in HDF5 / Zarr / .npz
    axes: str | None = None  # --axes TYX|YXT for a 3-D array
    channel: int | None = None  # --channel C of a hyperstack / OME image
    z: int | None = None  # --z Z of a hyperstack / OME image
    series: int | None = None  # --series N of a multi-series TIFF

    def given(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self) if getattr(self, f.name) is not None}


# Which options each container understands.
_USES = {"tiff": {"channel", "z", "series"}, "hdf5": {"dataset", "axes"}, "npz": {"dataset"},
         "zarr": {"dataset", "axes", "channel", "z"}}


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


def _kind(p: Path) -> str | None:
    suffix = p.suffix.lower()
    if is_mrc(p):
        return "mrc"
    if suffix in TIFF_SUFFIXES:
        return "tiff"
    if suffix in H5_SUFFIXES:
        return "hdf5"
    if suffix in VIDEO_SUFFIXES:
        return "video"
    if suffix in (".npy", ".png", ".npz"):
        return suffix[1:]
    if suffix in RAW_SUFFIXES or suffix == ".json" or (p.parent / (p.name + ".json")).is_file():
        return "raw"
    return _sniff(p)


def _check_options(p: Path, kind: str, choice: Choice) -> None:
    unused = sorted(set(choice.given()) - _USES.get(kind, set()))
    if unused:
        names = ", ".join("--" + n for n in unused)
        raise BadInput(f"{p}: {names} does not apply to this {kind.upper()} movie")


def _open_file(p: Path, show_progress: bool, choice: Choice) -> Movie:
    if p.stat().st_size == 0:
        raise BadInput(f"{p}: empty file (0 bytes)")
    kind = _kind(p)
    if kind is not None:
        _check_options(p, kind, choice)
    if kind == "tiff":
        return open_tiff(p, fingerprint_file(p), show_progress, channel=choice.channel, z=choice.z,
                         series=choice.series)
    if kind == "npy":
        return open_npy(p, fingerprint_file(p))
    if kind == "video":
        return open_video(p, fingerprint_file(p), show_progress)
    if kind == "npz":
        return open_npz(p, fingerprint_file(p), choice.dataset)
    if kind == "mrc":
        return open_mrc(p, fingerprint_file(p))
    if kind == "hdf5":
        return open_hdf5(p, fingerprint_file(p), choice.dataset, choice.axes)
    if kind == "raw":
        return open_raw(p, fingerprint_file)
    if kind == "png":
        return FolderMovie(p, [p], _read_image(p), fingerprint_folder([p]))
    movie = open_with_plugins(p)
    if movie is not None:
        if choice.given():
            movie.close()
            _check_options(p, "plug-in", choice)
        return movie
    suffix = p.suffix.lower()
    raise BadInput(f"{p}: unknown movie format '{suffix or 'no suffix'}' (expected {KNOWN})")


def open_movie(path: str | os.PathLike, fps: float | None = None, *, show_progress: bool = True,
               dataset: str | None = None, axes: str | None = None, channel: int | None = None,
               z: int | None = None, series: int | None = None) -> Movie:
    """Open a movie read-only. `fps` overrides any timing stored with it; `dataset`, `axes`,
    `channel`, `z` and `series` choose inside containers that hold more than one movie.

    Raises BadInput("<path>: <what is wrong>") for anything that cannot be read as a movie.
    """
    p = Path(path).expanduser()
    choice = Choice(dataset, axes, channel, z, series)
    try:
        if not p.exists():
            raise BadInput(f"{p}: no such file or folder")
        if p.is_dir():
            if is_zarr(p):
                _check_options(p, "zarr", choice)
                movie = open_zarr(p, dataset, axes, channel, z)
            else:
                _check_options(p, "folder", choice)
                movie = open_folder(p)
        else:
            movie = _open_file(p, show_progress, choice)
    except BadInput:
        raise
    except PermissionError:
        raise BadInput(f"{p}: permission denied") from None
    except (OSError, ValueError, struct.error, OverflowError, MemoryError) as exc:
        text = str(exc).splitlines()[0][:100] if str(exc) else exc.__class__.__name__
        raise BadInput(f"{p}: unreadable movie ({text})") from exc
    except Exception as exc:  # noqa: BLE001 - the libraries under the readers (h5py, PyAV, zarr,
        # mrcfile, plug-ins) raise RuntimeError, KeyError, ... on damaged files: still one line
        text = str(exc).splitlines()[0][:100] if str(exc) else ""
        raise BadInput(f"{p}: unreadable or damaged movie ({exc.__class__.__name__}"
                       f"{': ' + text if text else ''})") from exc
    if movie.fingerprint and (movie.selection or movie.axes not in ("TYX", "TYXS")):
        # one file, several movies (planes, series, datasets, axis orders): each its own identity,
        # so that scans, indexes and sessions of one are never taken for another's
        chosen = json.dumps({"selection": movie.selection, "axes": movie.axes}, sort_keys=True)
        movie.fingerprint = hashlib.blake2b(f"{movie.fingerprint};{chosen}".encode(),
                                            digest_size=12).hexdigest()
    try:
        movie.timing = resolve(movie.path, movie.n_frames, movie.timing, fps, movie.notices)
    except BadInput:
        movie.close()
        raise
    return movie
