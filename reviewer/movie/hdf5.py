"""HDF5 movies through h5py (optional extra ``hdf5``). Which dataset, which axis is time and where
the timing is stored follow the rules in `arrays`. When the optional package hdf5plugin is installed
it is loaded, so that datasets compressed with Blosc, LZ4, Bitshuffle, Zstandard, ... can be read;
without it such a dataset is one line naming the missing filter."""

from __future__ import annotations

import importlib
from pathlib import Path

from reviewer.errors import BadInput
from reviewer.movie.arrays import (
    attribute_timing,
    frames_view,
    holdings,
    pick,
    time_array_timing,
)
from reviewer.movie.base import Movie
from reviewer.movie.extra import Lifted, need_module
from reviewer.movie.npy import DatasetMovie, frames_layout
from reviewer.movie.scale import attribute_pixel_size_nm

H5_SUFFIXES = (".h5", ".hdf5", ".hdf", ".he5", ".nxs")

# Registered HDF5 filter ids (The HDF Group's list of registered filter plugins; from memory).
FILTERS = {307: "bzip2", 32001: "Blosc", 32004: "LZ4", 32008: "Bitshuffle", 32013: "ZFP",
           32015: "Zstandard", 32017: "SZ", 32024: "SZ3", 32026: "Blosc2"}


def _load_plugins() -> bool:
    """Register hdf5plugin's compression filters with HDF5 when the package is installed."""
    try:
        importlib.import_module("hdf5plugin")
    except ImportError:
        return False
    return True


def _missing_filter(h5py, ds) -> str | None:
    """The name of a filter the dataset needs that this HDF5 library cannot apply, or None."""
    plist = ds.id.get_create_plist()
    for i in range(plist.get_nfilters()):
        code, _flags, _values, name = plist.get_filter(i)
        if not h5py.h5z.filter_avail(code):
            label = FILTERS.get(code) or name.decode("utf-8", "replace") or "unknown"
            return f"{label} (HDF5 filter id {code})"
    return None


def open_hdf5(path: Path, fingerprint: str, dataset: str | None = None,
              axes: str | None = None) -> Movie:
    h5py = need_module("h5py", path, "hdf5", "HDF5")
    plugins = _load_plugins()
    try:
        f = h5py.File(path, "r")
    except OSError as exc:
        raise BadInput(f"{path}: not a readable HDF5 file ({str(exc)[:80]})") from None
    try:
        return _open(h5py, f, path, fingerprint, dataset, axes, plugins)
    except BadInput:
        f.close()
        raise
    except Exception as exc:  # noqa: BLE001 - HDF5 reports damage as RuntimeError, KeyError, ...
        f.close()
        text = str(exc).strip("'\"").splitlines()[0][:100] if str(exc) else exc.__class__.__name__
        raise BadInput(f"{path}: damaged HDF5 file ({text})") from None


def _open(h5py, f, path: Path, fingerprint: str, dataset: str | None, axes: str | None,
          plugins: bool) -> Movie:
    found: dict[str, object] = {}

    def visit(name: str, obj) -> None:  # must return None: any other value ends the walk
        if isinstance(obj, h5py.Dataset):
            found[name] = obj

    f.visititems(visit)
    key, ds = pick(found, path, dataset, "dataset")
    if not isinstance(ds, h5py.Dataset):
        raise BadInput(f"{path}: {key} is not a dataset")
    missing = _missing_filter(h5py, ds)
    if missing:
        fix = ("hdf5plugin is installed but does not provide it" if plugins else
               "install the optional package hdf5plugin: pip install 'reviewer[hdf5]'")
        raise BadInput(f"{path}: dataset {key} is compressed with {missing}, which is not "
                       f"available; {fix}")
    notices: list[str] = [n for n in [holdings(found, key, "dataset")] if n]
    try:
        view, stored_axes = frames_view(ds, key, axes, notices)
    except ValueError as exc:
        raise BadInput(f"{path}: {exc}") from None
    data = Lifted(ds) if view is None else view
    shape, rgb, more = frames_layout(tuple(data.shape), path, f"dataset {key}")
    notices += more
    groups, name = [], key
    while "/" in name:
        name = name.rsplit("/", 1)[0]
        groups.append((f"group {name}", f[name].attrs))
    groups.append(("file", f.attrs))
    siblings = {k: v for k, v in found.items() if k != key and k.rsplit("/", 1)[0:-1] ==
                key.rsplit("/", 1)[0:-1]}
    scales = {}
    if "T" in stored_axes:  # HDF5 dimension scales attached to the time axis
        scales = {f"{s.name} (dimension scale)": s for s in ds.dims[stored_axes.index("T")].values()}
    timing = (attribute_timing([(f"dataset {key}", ds.attrs), *groups])
              or time_array_timing(scales, shape[0], any_name=True)
              or time_array_timing(siblings, shape[0]))
    layout = f"HDF5 dataset {key}, {shape[0]} frames, stored as {stored_axes} {tuple(ds.shape)}"
    movie = DatasetMovie(data, path, layout=layout, rgb=rgb, timing=timing, fingerprint=fingerprint,
                         notices=notices, closer=f.close)
    movie.axes, movie.selection = stored_axes, {"dataset": key}
    movie.pixel_size_nm = attribute_pixel_size_nm([ds.attrs, *(a for _, a in groups)])
    return movie
