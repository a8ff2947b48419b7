"""Optional containers: HDF5 (h5py) and Zarr (zarr). The packages are imported only when such a
movie is opened; without them the user gets one line saying which extra to install.

The dataset read is the only 3-D (or colour 4-D) dataset in the file, else the one named ``movie``,
``frames`` or ``data``. A numeric ``fps`` attribute on the dataset gives the frame rate.
"""

from __future__ import annotations

import hashlib
import importlib
from pathlib import Path

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, Timing, companions, fingerprint_file
from reviewer.movie.npy import DatasetMovie, frames_layout

H5_SUFFIXES = (".h5", ".hdf5", ".hdf", ".he5")
PREFERRED = ("movie", "frames", "data")


def _need(module: str, path: Path, extra: str, what: str):
    try:
        return importlib.import_module(module)
    except ImportError:
        raise BadInput(f"{path}: reading {what} needs the optional package {module} "
                       f"(pip install 'reviewer[{extra}]')") from None


def _pick(candidates: dict[str, object], path: Path) -> tuple[str, object]:
    movies = {k: v for k, v in candidates.items() if len(getattr(v, "shape", ())) in (3, 4)}
    if len(movies) == 1:
        return next(iter(movies.items()))
    for name in PREFERRED:
        for key, value in movies.items():
            if key.rsplit("/", 1)[-1] == name:
                return key, value
    if not movies:
        raise BadInput(f"{path}: no 3-D image dataset found")
    raise BadInput(f"{path}: several 3-D datasets ({', '.join(sorted(movies))[:120]}); "
                   f"name the movie one of {', '.join(PREFERRED)}")


def _timing(attrs, name: str) -> Timing:
    try:
        fps = float(attrs.get("fps"))
    except (TypeError, ValueError):
        return Timing()
    return Timing(fps=fps, source=f"{name} attribute fps") if fps > 0 else Timing()


def _movie(ds, key: str, path: Path, kind: str, fingerprint: str, closer) -> Movie:
    shape, rgb, notices = frames_layout(tuple(ds.shape), path, f"dataset {key}")
    data = ds if len(ds.shape) == len(shape) else _Lifted(ds)
    return DatasetMovie(data, path, layout=f"{kind} dataset {key}, {shape[0]} frames", rgb=rgb,
                        timing=_timing(ds.attrs, kind), fingerprint=fingerprint, notices=notices,
                        closer=closer)


class _Lifted:
    """A single 2-D image seen as a 1-frame stack."""

    def __init__(self, ds) -> None:
        self.ds, self.shape, self.dtype = ds, (1, *ds.shape), ds.dtype

    def __getitem__(self, sl):
        import numpy as np

        return np.asarray(self.ds[...])[None][sl]


def open_hdf5(path: Path, fingerprint: str) -> Movie:
    h5py = _need("h5py", path, "hdf5", "HDF5")
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise BadInput(f"{path}: not a readable HDF5 file ({str(exc)[:80]})") from None
    found: dict[str, object] = {}
    f.visititems(lambda k, v: found.setdefault(k, v) if isinstance(v, h5py.Dataset) else None)
    try:
        key, ds = _pick(found, path)
    except BadInput:
        f.close()
        raise
    return _movie(ds, key, path, "HDF5", fingerprint, f.close)


def is_zarr(path: Path) -> bool:
    return path.suffix.lower() == ".zarr" or any(
        (path / n).exists() for n in (".zarray", ".zgroup", "zarr.json"))


def fingerprint_zarr(path: Path) -> str:
    h = hashlib.blake2b(digest_size=12)
    for p in sorted(path.rglob("*")):
        if p.name in (".zarray", ".zgroup", ".zattrs", "zarr.json"):
            st = p.stat()
            h.update(f"{p.relative_to(path)}:{st.st_size}:{st.st_mtime_ns};".encode())
    for extra in companions(path):
        h.update(fingerprint_file(extra).encode())
    return h.hexdigest()


def open_zarr(path: Path) -> Movie:
    zarr = _need("zarr", path, "zarr", "Zarr")
    try:
        root = zarr.open(str(path), mode="r")
    except Exception as exc:  # noqa: BLE001 - zarr raises many kinds
        raise BadInput(f"{path}: not a readable Zarr store ({str(exc)[:80]})") from None
    if hasattr(root, "shape"):
        key, ds = "/", root
    else:
        key, ds = _pick(dict(root.arrays()), path)  # arrays at the top level of a group
    return _movie(ds, key, path, "Zarr", fingerprint_zarr(path), None)
