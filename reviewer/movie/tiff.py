"""TIFF movies: ImageJ hyperstacks (also the single-IFD kind over 4 GB), contiguous stacks,
page-per-frame files, BigTIFF, OME-TIFF and compressed pages.

Plain (uncompressed) frames are read through a memory map at byte offsets; compressed frames are decoded
one page at a time by tifffile from the page's own IFD. The list of IFDs is never built by tifffile
(that walks every page); contiguous stacks need no index at all, other files get a cached offset index
(see `pageindex`).
"""

from __future__ import annotations

import json
import logging
import os
import threading
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import tifffile

from reviewer.errors import BadInput
from reviewer.movie.base import Movie, Timing
from reviewer.movie.offsets import OffsetMovie, even_offsets
from reviewer.movie.pageindex import frame_index
from reviewer.movie.pixels import RGB_NOTICE, output_dtype, to_frames
from reviewer.movie.scale import imagej_pixel_size_nm, ome_pixel_size_nm
from reviewer.movie.tiffifd import (
    PageInfo,
    numpy_dtype,
    page_info,
    read_header,
    read_ifd,
    size_problem,
)
from reviewer.movie.tiffplanes import choose, imagej_planes, ome_planes
from reviewer.movie.timing import imagej_timing, ome_timing


@contextmanager
def quiet_tifffile():
    """Keep tifffile's log messages off stderr (problems reach the user as notices or BadInput)."""
    log = logging.getLogger("tifffile")
    old = log.level
    log.setLevel(logging.CRITICAL + 1)
    try:
        yield
    finally:
        log.setLevel(old)


class DecodedTiffMovie(Movie):
    """Frames decoded page by page by tifffile, each page reached directly at its IFD offset."""

    def __init__(self, path: Path, ifd_offsets: np.ndarray, tif: tifffile.TiffFile, out_dtype: np.dtype,
                 rgb: bool, shape: tuple[int, int], **kw) -> None:
        self.ifd_offsets = ifd_offsets
        self._tif, self._rgb, self._lock = tif, rgb, threading.Lock()
        super().__init__(path=path, n_frames=len(ifd_offsets), shape=shape, dtype=out_dtype, **kw)

    def _page(self, i: int) -> np.ndarray:
        with self._lock, quiet_tifffile():
            fh = self._tif.filehandle
            fh.seek(int(self.ifd_offsets[i]))
            try:
                page = tifffile.TiffPage(self._tif, index=i)
                # shaped: (separate samples, depth, height, width, contiguous samples)
                arr = page.asarray().reshape(page.shaped)[:, 0]
                if arr.shape[1:3] != self.shape:
                    raise ValueError(f"page is {arr.shape[1:3]}, the first page {self.shape}")
                arr = np.moveaxis(arr, 0, 2).reshape(self.shape + ((-1,) if self._rgb else ()))
            except Exception as exc:  # noqa: BLE001 - any decoder failure is a bad file
                text = str(exc).splitlines()[0][:100] if str(exc) else exc.__class__.__name__
                raise BadInput(f"{self.path}: frame {i} cannot be decoded ({text})") from None
        return arr

    def _read(self, start: int, stop: int) -> np.ndarray:
        return to_frames(np.stack([self._page(i) for i in range(start, stop)]), self.dtype, self._rgb)

    def close(self) -> None:
        self._tif.close()


def _metadata(path: Path) -> tuple[tifffile.TiffFile | None, dict]:
    """tifffile's view of the first page (it reads only the first IFD): ImageJ, OME, shaped."""
    try:
        with quiet_tifffile():
            tif = tifffile.TiffFile(path)
            page = tif.pages.first
            resolution = page.tags.get("XResolution")
            meta = {"imagej": tif.imagej_metadata if tif.is_imagej else None,
                    "ome": tif.ome_metadata if tif.is_ome else None,
                    "shaped": page.description if page.is_shaped else None,
                    "x_resolution": resolution.value if resolution is not None else None}
    except Exception:  # noqa: BLE001 - tifffile cannot parse it; our own reader may still
        return None, {}
    return tif, meta


def _declared_frames(meta: dict, samples: int) -> tuple[int | None, bool, str]:
    """(frames the metadata announces, whether they are contiguous by convention, flavour)."""
    if meta.get("imagej"):
        return int(meta["imagej"].get("images", 1) or 1), True, "ImageJ TIFF"
    if meta.get("ome"):
        try:
            px = tifffile.xml2dict(meta["ome"])["OME"]["Image"]
            px = (px[0] if isinstance(px, list) else px)["Pixels"]
            return int(px["SizeT"]) * int(px.get("SizeZ", 1)) * int(px.get("SizeC", 1)) // samples, \
                False, "OME-TIFF"
        except (KeyError, TypeError, ValueError, IndexError):
            return None, False, "OME-TIFF"
    if meta.get("shaped"):
        try:
            shape = json.loads(meta["shaped"])["shape"]
            lead = shape[:-3] if samples > 1 else shape[:-2]
            return int(np.prod(lead)) if lead else 1, False, "TIFF"  # more series may follow
        except (ValueError, KeyError, TypeError):
            pass
    return None, False, "TIFF"


def _choose_run(path: Path, offsets: np.ndarray, runs: tuple[int, ...], series: int | None,
                notices: list[str]) -> tuple[np.ndarray, int]:
    """The frames of one run of same-sized pages (other pages between runs): the longest, or --series."""
    bounds = [*runs, len(offsets)]
    lengths = [b - a for a, b in zip(bounds[:-1], bounds[1:], strict=True)]
    if series is None:
        k = int(np.argmax(lengths))
        listing = "; ".join(f"{i}: {m} frames" for i, m in enumerate(lengths[:12]))
        more = f"; ... {len(lengths)} in all" if len(lengths) > 12 else ""
        notices.append(f"{len(lengths)} runs of pages of this size, separated by other pages "
                       f"({listing}{more}): reading run {k}, the longest (--series chooses another)")
    elif not 0 <= series < len(lengths):
        raise BadInput(f"{path}: --series {series} outside 0..{len(lengths) - 1}")
    else:
        k = series
    return offsets[bounds[k]:bounds[k + 1]], k


def _reference(fd: int, hdr, size: int, ifd0, info0):
    """(IFD, page info, its position) of the first page of the movie: the frame geometry most common
    among the first pages (a thumbnail or overview stored first is not the movie)."""
    seen = [(ifd0, info0)]
    ifd = ifd0
    while len(seen) < 16 and ifd.next:
        ifd = read_ifd(fd, hdr, ifd.next, size)
        info = page_info(ifd) if ifd is not None else None
        if info is None:
            break
        seen.append((ifd, info))
    counts: dict = {}
    for _, info in seen:
        counts[info.geometry] = counts.get(info.geometry, 0) + 1
    best = max(counts, key=lambda g: (counts[g], g.height * g.width))
    if counts[best] <= counts[info0.geometry]:
        return ifd0, info0, 0
    k = next(i for i, (_, info) in enumerate(seen) if info.geometry == best)
    return seen[k][0], seen[k][1], k


def _stored_timing(meta: dict, n: int, where: tuple[int, int, int] = (0, 0, 0)) -> Timing | None:
    timing = imagej_timing(meta.get("imagej"))
    if timing is None and meta.get("ome"):
        try:
            timing = ome_timing(tifffile.xml2dict(meta["ome"]), n, *where)
        except Exception:  # noqa: BLE001 - unreadable XML: no timing
            timing = None
    return timing


def open_tiff(path: Path, fingerprint: str, show_progress: bool = True, *, channel: int | None = None,
              z: int | None = None, series: int | None = None) -> Movie:
    """Open a TIFF file as a movie (timing from the file's metadata; see timing.resolve)."""
    size = path.stat().st_size
    fd = os.open(path, os.O_RDONLY)
    try:
        return _open(path, fd, size, fingerprint, show_progress, channel, z, series)
    finally:
        os.close(fd)


def _open(path: Path, fd: int, size: int, fingerprint: str, show_progress: bool,
          channel: int | None, z: int | None, series: int | None) -> Movie:
    hdr = read_header(fd)
    if hdr is None:
        raise BadInput(f"{path}: not a TIFF file (no TIFF header)")
    ifd0 = read_ifd(fd, hdr, hdr.first_ifd, size)
    if ifd0 is None:
        raise BadInput(f"{path}: truncated or damaged TIFF: the first image directory is unreadable")
    info0 = page_info(ifd0)
    if info0 is None:
        raise BadInput(f"{path}: damaged TIFF: the first page has no image size")
    ifd0, info0, first_page = _reference(fd, hdr, size, ifd0, info0)
    geo = info0.geometry
    if geo.samples not in (1, 3, 4):
        raise BadInput(f"{path}: pages with {geo.samples} samples per pixel are not supported")
    rgb = geo.samples > 1
    file_dtype = numpy_dtype(geo, hdr.byteorder) if info0.plain else None
    if info0.plain and file_dtype is None:
        info0 = PageInfo(geo, -1, info0.data_end, info0.stored)  # unusual type: tifffile decodes it
    problem = size_problem(geo, info0.stored, size)
    if problem:
        raise BadInput(f"{path}: damaged TIFF: {problem}")
    tif, meta = _metadata(path)
    declared, contiguous, flavour = _declared_frames(meta, geo.samples)
    notices = [RGB_NOTICE] if rgb else []
    big = ", BigTIFF" if hdr.bigtiff else ""
    frame_shape = (geo.height, geo.width, geo.samples) if rgb else (geo.height, geo.width)
    frame_bytes = int(np.prod(frame_shape)) * geo.bits // 8
    movie_kw = {"fingerprint": fingerprint}

    planes = None
    if meta.get("imagej"):
        planes = imagej_planes(meta["imagej"])
    elif meta.get("ome"):
        try:
            ome = tifffile.xml2dict(meta["ome"])
        except Exception:  # noqa: BLE001 - unreadable XML: the pages alone decide
            ome = None
        planes = ome_planes(ome, geo.height, geo.width, geo.samples, series, path) if ome else None
    if (channel is not None or z is not None) and planes is None:
        raise BadInput(f"{path}: --channel/--z: this TIFF holds no channels or z-planes")
    if first_page:
        notices.append(f"{first_page} page(s) of another size before the movie left out")

    offsets, series_run = None, None
    if info0.plain and contiguous and declared and declared > 1 and not first_page:
        first = info0.data_offset
        ifd1 = read_ifd(fd, hdr, ifd0.next, size) if ifd0.next else None
        info1 = page_info(ifd1) if ifd1 is not None else None
        if info1 is None or info1.data_offset == first + frame_bytes:
            n = min(declared, max(0, (size - first) // frame_bytes))
            offsets = even_offsets(first, n, frame_bytes, path)
            single = " single IFD," if ifd0.next == 0 else ""
            layout = f"{flavour}{big}, contiguous stack,{single} {n} frames read by offset"
            truncated = n < declared
    if offsets is None:
        index = frame_index(fd, hdr, size, info0, fingerprint, show_progress)
        offsets = index.offsets
        if (len(offsets) == 1 and index.chain_broken and info0.plain and not first_page
                and ifd0.next >= size and ifd0.next >= info0.data_offset + 2 * frame_bytes):
            # the directories came after the pixels and are cut off (e.g. a truncated OME-TIFF):
            # read the whole frames that follow the first one at its size
            whole = (min(size, ifd0.next) - info0.data_offset) // frame_bytes
            offsets = even_offsets(info0.data_offset, whole, frame_bytes, path)
            notices.append(f"the page directories after the pixels are cut off: {whole} whole "
                           "frames read as one contiguous run after the first page")
        if planes is None and len(index.runs) > 1:
            offsets, series_run = _choose_run(path, offsets, index.runs, series, notices)
        n = len(offsets)
        truncated = index.chain_broken or bool(declared and n < declared)
        if index.skipped > first_page:
            notices.append(f"{index.skipped} page(s) of another size or pixel type left out")
        how = {"stride": "offsets from a constant page stride", "walk": "offsets from an IFD walk",
               "cache": "cached frame index"}[index.method]
        steps = np.diff(offsets)
        kind = ("single-page" if n == 1 else "contiguous" if info0.plain and np.all(steps == frame_bytes)
                else "page-per-frame")
        comp = ("" if info0.plain else f", compressed (TIFF compression {geo.compression})"
                if geo.compression != 1 else ", decoded page by page")
        layout = f"{kind} {flavour}{big}{comp}, {n} pages, {how}"
    if series is not None and (planes is None or planes.series is None) and series_run is None:
        raise BadInput(f"{path}: --series: this TIFF holds one image series")
    axes, picked, timing_planes = "TYX" + ("S" if rgb else ""), {}, (0, 0, 0)
    if series_run is not None:
        picked["series"] = series_run
    if planes is not None:
        offsets, picked = choose(planes, offsets, z, channel, path, notices)
        declared, n, axes = planes.sizes["T"], len(offsets), planes.axes + ("S" if rgb else "")
        truncated = n < declared
        timing_planes = (planes.series or 0, picked.get("z", 0), picked.get("channel", 0))
        if planes.axes != "TYX" or planes.series_count > 1:
            layout = layout.replace(" frames read by offset", " planes read by offset")
            layout += f"; {n} time points of {axes}" + "".join(f", {k} {v}" for k, v in picked.items())
    if n == 0:
        raise BadInput(f"{path}: truncated TIFF: no whole frame readable")
    if truncated:
        if declared and declared > n:
            notices.append(f"truncated: {n} of {declared} frames readable")
        else:
            notices.append(f"truncated: {n} frames readable, the file ends before the next frame")
    if n == 1:
        notices.append("a single 2-D image: read as a 1-frame movie")
    movie_kw.update(layout=layout, timing=_stored_timing(meta, n, timing_planes) or Timing(),
                    notices=notices)
    pixel_nm = (ome_pixel_size_nm(meta.get("ome"), timing_planes[0])
                or imagej_pixel_size_nm(meta.get("imagej"), meta.get("x_resolution")))
    if info0.plain:
        try:
            out_dtype, note = output_dtype(file_dtype, "TIFF")
        except ValueError as exc:
            raise BadInput(f"{path}: {exc}") from None
        if note:
            notices.append(note)
        if rgb:
            out_dtype = np.dtype(np.float32)
        if tif is not None:
            tif.close()
        return _chosen(OffsetMovie(path, offsets, frame_shape, file_dtype, out_dtype, **movie_kw),
                       axes, picked, pixel_nm)
    if tif is None:
        raise BadInput(f"{path}: compressed TIFF pages that tifffile cannot open")
    page_dtype = numpy_dtype(geo, "=")
    if page_dtype is None:  # an unusual pixel type: ask tifffile what the movie's first page holds
        with quiet_tifffile():
            tif.filehandle.seek(ifd0.offset)
            page_dtype = tifffile.TiffPage(tif, index=first_page).dtype
    try:
        out_dtype, note = output_dtype(page_dtype, "TIFF") if not rgb else (np.dtype(np.float32), None)
    except (ValueError, TypeError) as exc:
        raise BadInput(f"{path}: {exc}") from None
    if note:
        notices.append(note)
    return _chosen(DecodedTiffMovie(path, offsets, tif, out_dtype, rgb, (geo.height, geo.width),
                                    **movie_kw), axes, picked, pixel_nm)


def _chosen(movie: Movie, axes: str, picked: dict, pixel_nm: float | None) -> Movie:
    movie.axes, movie.selection, movie.pixel_size_nm = axes, picked, pixel_nm
    return movie
