"""Frame-offset index of a multi-page TIFF, built once and kept in the cache.

The index is an int64 array, one entry (8 bytes) per frame: the offset of the frame's pixels for plain
(uncompressed, one run of bytes) pages, or the offset of the frame's IFD for pages that need decoding.
It is saved as ``frames.npy`` (+ ``frames.json``) in ``reviewer.paths.cache_dir(fingerprint)``.

Building it: read the first four IFDs; if IFD and data offsets advance by constant strides, check that
model against IFDs sampled through the middle and at the predicted last page, and compute the offsets
arithmetically. Otherwise walk the IFD chain reading only each IFD's entry table.
"""

from __future__ import annotations

import json
import struct
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from reviewer.movie.tiffifd import (
    STRIP_OFFSETS,
    Header,
    PageInfo,
    page_info,
    parse_ifd,
    read_ifd,
    read_table,
)
from reviewer.paths import cache_dir
from reviewer.progress import Progress

INDEX_VERSION = 2  # 2: runs of pages kept
MAX_RUNS = 1000  # runs of same-sized pages remembered (more: the rest count as one run)
N_SAMPLES = 16  # IFDs checked in the middle of the file before trusting a constant stride
PROGRESS_MIN_BYTES = 256 << 20  # files smaller than this are walked without a progress bar


@dataclass
class PageIndex:
    offsets: np.ndarray  # int64, one per frame
    kind: str  # "data" (pixel offsets) or "ifd" (IFD offsets, decode each page)
    chain_broken: bool = False  # the IFD chain points past the end of the file (truncated)
    skipped: int = 0  # pages of another geometry left out
    runs: tuple[int, ...] = (0,)  # first frame of each run of pages not interrupted by other pages
    method: str = "walk"  # "stride", "walk" or "cache"


def _matches(info: PageInfo | None, ref: PageInfo) -> bool:
    return info is not None and info.geometry == ref.geometry


def _entry(info: PageInfo, ifd_offset: int, kind: str) -> int:
    return info.data_offset if kind == "data" else ifd_offset


def try_stride(fd: int, hdr: Header, size: int, ref: PageInfo, kind: str) -> PageIndex | None:
    """Offsets from a constant page stride, when the first IFDs, sampled middle IFDs and the last
    predicted IFD agree with it; None when they do not (walk instead)."""
    ifds = [read_ifd(fd, hdr, hdr.first_ifd, size)]
    while len(ifds) < 4 and ifds[-1] is not None and ifds[-1].next:
        ifds.append(read_ifd(fd, hdr, ifds[-1].next, size))
    if len(ifds) < 4 or any(i is None for i in ifds):
        return None
    infos = [page_info(i) for i in ifds]
    if not all(_matches(i, ref) for i in infos):
        return None
    o = [i.offset for i in ifds]
    d = [_entry(inf, i.offset, kind) for inf, i in zip(infos, ifds, strict=True)]
    s_ifd, s_dat = o[2] - o[1], d[2] - d[1]
    if s_ifd <= 0 or s_dat <= 0 or o[3] - o[2] != s_ifd or d[3] - d[2] != s_dat:
        return None
    # Compressed pages: a constant stride holds only while every page stores the same number of
    # bytes at the same place relative to its IFD; each checked IFD must show exactly that.
    strips = (infos[1].stored, infos[1].data_end - o[1])
    if kind == "ifd" and any((i.stored, i.data_end - oo) != strips
                             for i, oo in zip(infos[1:], o[1:], strict=True)):
        return None
    frame_bytes = ref.geometry.height * ref.geometry.width * ref.geometry.samples * ref.geometry.bits // 8
    ifd_bytes = hdr.count_size + ifds[1].n_entries * hdr.entry_size + hdr.pointer_size
    last_end = frame_bytes if kind == "data" else ifd_bytes
    # largest k (k >= 1) with IFD k and its pixels inside the file
    k_max = min((size - ifd_bytes - o[1]) // s_ifd, (size - last_end - d[1]) // s_dat) + 1
    if k_max < 4:
        return None

    def model_ifd(k: int):
        """IFD k if it sits where the stride model puts it and matches it, else None."""
        ifd = read_ifd(fd, hdr, o[1] + (k - 1) * s_ifd, size)
        info = page_info(ifd) if ifd is not None else None
        if (not _matches(info, ref) or _entry(info, ifd.offset, kind) != d[1] + (k - 1) * s_dat
                or info.data_end > size or info.data_end == 0
                or (kind == "ifd" and (info.stored, info.data_end - ifd.offset) != strips)):
            return None
        return ifd

    lo, hi = 3, k_max  # IFD lo fits the model; find the last one that does (metadata may follow)
    if model_ifd(hi) is not None:
        lo = hi
    while hi - lo > 1:
        mid = (lo + hi) // 2
        lo, hi = (mid, hi) if model_ifd(mid) is not None else (lo, mid)
    last = lo
    last_ifd = model_ifd(last)
    if last_ifd is None or last < 4:
        return None
    if last_ifd.next:
        after = read_ifd(fd, hdr, last_ifd.next, size)
        after_info = page_info(after) if after is not None else None
        if after_info is not None and after_info.data_end <= size:
            return None  # the chain goes on with a whole page: the model does not describe it
    samples = np.unique(np.linspace(4, last - 1, N_SAMPLES).astype(np.int64)) if last > 4 else []
    for k in samples:
        ifd = model_ifd(int(k))
        if ifd is None or ifd.next != o[1] + int(k) * s_ifd:
            return None
    offsets = np.empty(last + 1, dtype=np.int64)
    offsets[0] = d[0]
    offsets[1:] = d[1] + np.arange(last, dtype=np.int64) * s_dat
    return PageIndex(offsets, kind, chain_broken=last_ifd.next != 0, method="stride")


# Tags whose values decide where and how a frame is stored (TIFF 6.0): they must equal the template's.
_GEOMETRY_TAGS = {256, 257, 258, 259, 262, 273, 277, 278, 279, 284, 317, 322, 323, 324, 325, 339}


def _template(hdr: Header, table: bytes):
    """(table, byte ranges that must match, strip-offset position, its struct format) for IFDs like
    this one: same entries, free to differ only in the strip offset and in pointers to out-of-line
    values of tags that do not describe the pixels (e.g. a per-frame description)."""
    size_of = {1: 1, 2: 1, 3: 2, 4: 4, 5: 8, 6: 1, 7: 1, 8: 2, 9: 4, 10: 8, 11: 4, 12: 8, 13: 4,
               16: 8, 17: 8, 18: 8}
    field = hdr.pointer_size
    value_at = 12 if hdr.bigtiff else 8
    free, strip = [], None
    for k, (tag, typ, count, _raw) in enumerate(struct.iter_unpack(hdr.entry_format, table)):
        pos = k * hdr.entry_size + value_at
        if tag == STRIP_OFFSETS:
            fmt = {3: "H", 4: "I", 16: "Q"}.get(typ)
            if count != 1 or fmt is None:
                return None
            strip = (pos, hdr.byteorder + fmt)
            free.append(pos)
        elif tag not in _GEOMETRY_TAGS and count * size_of.get(typ, 1) > field:
            free.append(pos)
    if strip is None:
        return None
    segments, start = [], 0
    for pos in free:
        segments.append((start, pos))
        start = pos + field
    segments.append((start, len(table)))
    return table, segments, strip[0], strip[1]


def walk(fd: int, hdr: Header, size: int, ref: PageInfo, kind: str,
         show_progress: bool = True) -> PageIndex:
    """Follow the IFD chain, reading each entry table once. Pages of another geometry are skipped."""
    out = np.empty(1024, dtype=np.int64)
    seen = np.empty(1024, dtype=np.int64)  # IFD offsets visited, to catch loops in the chain
    n = visited = skipped = 0
    runs, gap = [0], False
    offset, previous = hdr.first_ifd, -1
    broken = False
    g = ref.geometry
    est = max(1, size // (g.height * g.width * g.samples * max(1, g.bits // 8) + 64))
    bar = Progress(est, label="pages indexed", enabled=show_progress and size > PROGRESS_MIN_BYTES)
    same = None  # (entry table of a plain one-strip frame, position and format of its strip offset)
    need = g.height * g.width * g.samples * g.bits // 8
    while offset:
        if offset <= previous and bool(np.any(seen[:visited] == offset)):
            break  # a loop in the chain
        got = read_table(fd, hdr, offset, size)
        if got is None:
            broken = True
            break
        table, nxt = got
        if visited == len(seen):
            seen = np.resize(seen, 2 * visited)
        seen[visited] = offset
        visited += 1
        entry = None
        if same is not None and len(table) == len(same[0]):
            ref_table, segments, p, fmt = same  # fast path: equal to the template where it matters
            if all(table[a:b] == ref_table[a:b] for a, b in segments):
                entry = struct.unpack_from(fmt, table, p)[0]
                if entry + need > size:
                    broken = True  # pixels cut off by the end of the file
                    break
        if entry is None:
            info = page_info(parse_ifd(fd, hdr, offset, table, nxt))
            if info is not None and info.data_end > size:
                broken = True  # pixels cut off by the end of the file
                break
            if _matches(info, ref) and (kind == "ifd" or info.data_offset >= 0):
                entry = _entry(info, offset, kind)
                if kind == "data":  # this IFD becomes the template for the fast path
                    same = _template(hdr, table)
        if entry is not None:
            if gap and n and len(runs) < MAX_RUNS:
                runs.append(n)
            gap = False
            if n == len(out):
                out = np.resize(out, 2 * n)
            out[n] = entry
            n += 1
        else:
            skipped += 1
            gap = True
        if (visited & 4095) == 0:
            bar.total = max(bar.total, n)
            bar.update(n)
        previous, offset = offset, nxt
    bar.total = n
    bar.update(n)
    bar.close()
    return PageIndex(out[:n].copy(), kind, chain_broken=broken, skipped=skipped, method="walk",
                     runs=tuple(runs))


def _paths(fingerprint: str) -> tuple[Path, Path]:
    folder = cache_dir(fingerprint)
    return folder / "frames.npy", folder / "frames.json"


def load(fingerprint: str, kind: str) -> PageIndex | None:
    """The saved index of this file, or None when there is none (or it does not fit)."""
    try:
        npy, meta_path = _paths(fingerprint)
        if not npy.is_file() or not meta_path.is_file():
            return None
        meta = json.loads(meta_path.read_text())
        offsets = np.load(npy, allow_pickle=False)
    except (OSError, ValueError):
        return None
    if (meta.get("version") != INDEX_VERSION or meta.get("kind") != kind
            or offsets.dtype != np.int64 or offsets.ndim != 1 or len(offsets) != meta.get("frames")):
        return None
    runs = tuple(int(r) for r in meta.get("runs", [0]))
    return PageIndex(offsets, kind, bool(meta.get("chain_broken")), int(meta.get("skipped", 0)),
                     method="cache", runs=runs)


def save(fingerprint: str, index: PageIndex) -> Path | None:
    """Write the index to the cache (atomically); None when the cache is not writable."""
    try:
        npy, meta_path = _paths(fingerprint)
        tmp = npy.with_suffix(".tmp.npy")
        np.save(tmp, index.offsets)
        tmp.replace(npy)
        meta = {"version": INDEX_VERSION, "kind": index.kind, "frames": int(len(index.offsets)),
                "chain_broken": index.chain_broken, "skipped": index.skipped, "runs": list(index.runs),
                "built_by": index.method}
        meta_path.write_text(json.dumps(meta))
    except OSError:
        return None
    return npy


def frame_index(fd: int, hdr: Header, size: int, ref: PageInfo, fingerprint: str,
                show_progress: bool = True) -> PageIndex:
    """The saved index if there is one; otherwise build it (stride, else walk) and save it."""
    kind = "data" if ref.plain else "ifd"
    if fingerprint:
        cached = load(fingerprint, kind)
        if cached is not None:
            return cached
    index = try_stride(fd, hdr, size, ref, kind) or walk(fd, hdr, size, ref, kind, show_progress)
    if fingerprint:
        save(fingerprint, index)
    return index
