"""Optional containers: Zarr (zarr), including OME-NGFF multiscale images, and the helpers the other
optional readers share. Packages are imported only when such a movie is opened; without them the
user gets one line saying which extra to install. HDF5 is in `hdf5`.

The array read follows the rules in `arrays` (every array of nested groups is a candidate). For an
OME-NGFF image (a group whose attributes hold ``multiscales``, OME-NGFF 0.4/0.5) the finest level
(``datasets[0]``) is the movie, its ``axes`` name the time axis, and the time scale of its
coordinate transformations gives the frame interval.
"""

from __future__ import annotations

import hashlib
import importlib
from pathlib import Path

import numpy as np

from reviewer.errors import BadInput
from reviewer.movie.arrays import (
    AxesView,
    attribute_timing,
    frames_view,
    holdings,
    pick,
    time_array_timing,
)
from reviewer.movie.base import Movie, Timing, companions, fingerprint_file
from reviewer.movie.npy import DatasetMovie, frames_layout
from reviewer.movie.scale import attribute_pixel_size_nm
from reviewer.movie.timing import _seconds

# OME-NGFF space units (UCUM names the specification lists) in nanometres
NGFF_NM = {"nanometer": 1.0, "micrometer": 1e3, "angstrom": 0.1, "millimeter": 1e6,
           "picometer": 1e-3, "meter": 1e9}


def need_module(module: str, path: Path, extra: str, what: str):
    try:
        return importlib.import_module(module)
    except ImportError:
        raise BadInput(f"{path}: reading {what} needs the optional package {module} "
                       f"(pip install 'reviewer[{extra}]')") from None


class Lifted:
    """A single 2-D image seen as a 1-frame stack."""

    def __init__(self, ds) -> None:
        self.ds, self.shape, self.dtype = ds, (1, *ds.shape), ds.dtype

    def __getitem__(self, sl):
        return np.asarray(self.ds[...])[None][sl]


def is_zarr(path: Path) -> bool:
    return path.suffix.lower() == ".zarr" or any(
        (path / n).exists() for n in (".zarray", ".zgroup", "zarr.json"))


def fingerprint_zarr(path: Path) -> str:
    """Identity of a Zarr store: its metadata files, and names, sizes and mtimes of its chunks."""
    h = hashlib.blake2b(digest_size=12)
    for p in sorted(path.rglob("*")):
        if p.is_file():
            st = p.stat()
            h.update(f"{p.relative_to(path)}:{st.st_size}:{st.st_mtime_ns};".encode())
            if p.name in (".zarray", ".zgroup", ".zattrs", "zarr.json"):
                h.update(p.read_bytes()[:1 << 16])
    for extra in companions(path):
        h.update(fingerprint_file(extra).encode())
    return h.hexdigest()


def _arrays(root) -> dict[str, object]:
    """Every array of a Zarr group, nested groups included, by path."""
    if hasattr(root, "members"):
        try:
            return {k: v for k, v in root.members(max_depth=None) if hasattr(v, "shape")}
        except TypeError:
            pass
    found: dict[str, object] = {}
    root.visititems(lambda k, v: found.__setitem__(k, v) if hasattr(v, "shape") else None)
    return found


def _multiscales(root) -> dict | None:
    attrs = dict(root.attrs)
    ms = attrs.get("multiscales") or (attrs.get("ome") or {}).get("multiscales")
    return ms[0] if isinstance(ms, list) and ms and isinstance(ms[0], dict) else None


def _ngff(root, path: Path, ms: dict, channel: int | None, z: int | None, selection: dict):
    """(array-like with frames first, key, stored axes, timing, notices) of an OME-NGFF image."""
    try:
        level = ms["datasets"][0]
        key = str(level["path"])
        arr = root[key]
        names = [a["name"] if isinstance(a, dict) else str(a) for a in ms["axes"]]
    except (KeyError, IndexError, TypeError) as exc:
        raise BadInput(f"{path}: damaged OME-NGFF multiscales metadata ({exc})") from None
    names = [str(n).lower() for n in names]
    if len(names) != len(arr.shape) or "x" not in names or "y" not in names:
        raise BadInput(f"{path}: OME-NGFF axes {names} do not fit level 0 of shape {arr.shape}")
    notices: list[str] = []
    index: list = []
    for name, size in zip(names, arr.shape, strict=True):
        if name in ("t", "y", "x"):
            index.append(slice(None))
            continue
        wanted = channel if name == "c" else z if name == "z" else None
        pos = _choose(path, name, int(size), wanted, notices)
        selection[{"c": "channel", "z": "z"}.get(name, name)] = pos
        index.append(pos)
    kept = [n for n in names if n in ("t", "y", "x")]
    if "t" not in kept:
        view = Lifted(_Indexed(arr, tuple(index)))
        notices.append("OME-NGFF image without a time axis: read as a 1-frame movie")
    else:
        index[names.index("t")] = None
        order = (kept.index("t"), kept.index("y"), kept.index("x"))
        view = AxesView(arr, tuple(index), order)
    units = {str(a.get("name")).lower(): a.get("unit") for a in ms["axes"] if isinstance(a, dict)}
    scale = next((tr["scale"] for tr in level.get("coordinateTransformations") or []
                  if isinstance(tr, dict) and tr.get("type") == "scale"), None)
    timing, pixel_nm = Timing(), None
    if scale is not None and "t" in names:
        unit = units.get("t") or "s"
        step = _seconds(scale[names.index("t")], {"second": "s", "millisecond": "ms",
                                                  "microsecond": "us"}.get(unit, unit))
        if step:
            timing = Timing(fps=1.0 / step, source="OME-NGFF time scale")
    nm = NGFF_NM.get(str(units.get("x") or "").lower())
    if scale is not None and nm and float(scale[names.index("x")]) > 0:
        pixel_nm = float(scale[names.index("x")]) * nm
    return view, key, "".join(n.upper() for n in names), timing, notices, pixel_nm


class _Indexed:
    def __init__(self, arr, index) -> None:
        self.arr, self.index = arr, index
        self.shape = tuple(s for s, i in zip(arr.shape, index, strict=True) if not isinstance(i, int))
        self.dtype = arr.dtype

    def __getitem__(self, sl):
        return np.asarray(self.arr[self.index])[sl]


def _choose(path: Path, name: str, size: int, wanted: int | None, notices: list[str]) -> int:
    """Which plane of a non-time axis (channel, z) is read; the first with a notice by default."""
    label = {"c": "channel", "z": "z-plane"}.get(name, f"{name} position")
    option = {"c": "--channel", "z": "--z"}.get(name)
    if wanted is None:
        if size > 1:
            hint = f" ({option} chooses another)" if option else ""
            notices.append(f"{size} {label}s: reading {label} 0{hint}")
        return 0
    if not 0 <= wanted < size:
        raise BadInput(f"{path}: {option or name} {wanted} outside 0..{size - 1}")
    return wanted


def open_zarr(path: Path, dataset: str | None = None, axes: str | None = None,
              channel: int | None = None, z: int | None = None) -> Movie:
    zarr = need_module("zarr", path, "zarr", "Zarr")
    try:
        root = zarr.open(str(path), mode="r")
    except Exception as exc:  # noqa: BLE001 - zarr raises many kinds
        raise BadInput(f"{path}: not a readable Zarr store ({str(exc)[:80]})") from None
    notices: list[str] = []
    selection: dict = {}
    ms = None if hasattr(root, "shape") or dataset else _multiscales(root)
    if ms is not None:
        data, key, stored, timing, notices, pixel_nm = _ngff(root, path, ms, channel, z, selection)
        kind = "OME-NGFF level"
    else:
        pixel_nm = None
        if hasattr(root, "shape"):
            key, arr, found = "/", root, {}
        else:
            found = _arrays(root)
            key, arr = pick(found, path, dataset, "array")
            notices += [n for n in [holdings(found, key, "array")] if n]
        try:
            view, stored = frames_view(arr, key, axes, notices)
        except ValueError as exc:
            raise BadInput(f"{path}: {exc}") from None
        data = Lifted(arr) if view is None else view
        siblings = {k: v for k, v in found.items() if k != key
                    and k.rsplit("/", 1)[:-1] == key.rsplit("/", 1)[:-1]}
        timing = (attribute_timing([(f"array {key}", arr.attrs), ("store", getattr(root, "attrs", {}))])
                  or time_array_timing(siblings, data.shape[0]) or Timing())
        pixel_nm = attribute_pixel_size_nm([arr.attrs, getattr(root, "attrs", {})])
        kind = "Zarr array"
        if key != "/":
            selection["dataset"] = key
    shape, rgb, more = frames_layout(tuple(data.shape), path, f"array {key}")
    movie = DatasetMovie(data, path, layout=f"{kind} {key}, {shape[0]} frames, stored as {stored}",
                         rgb=rgb, timing=timing, fingerprint=fingerprint_zarr(path),
                         notices=notices + more)
    movie.axes, movie.selection, movie.pixel_size_nm = stored, selection, pixel_nm
    return movie
