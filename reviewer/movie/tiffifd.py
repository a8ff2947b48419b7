"""Minimal TIFF structure reader: the header and single IFDs, read with os.pread and np.frombuffer.

Used to index page-per-frame files cheaply (no tifffile page objects). Classic TIFF and BigTIFF.
Tag numbers and types from the TIFF 6.0 specification (Adobe 1992) and the BigTIFF proposal.
"""

from __future__ import annotations

import os
import struct
import threading
from dataclasses import dataclass

import numpy as np

from reviewer.movie.pixels import frame_size_problem

# TIFF field type -> (numpy code, size in bytes); TIFF 6.0 section 2 plus BigTIFF LONG8/SLONG8/IFD8.
_TYPES = {1: ("u1", 1), 2: ("u1", 1), 3: ("u2", 2), 4: ("u4", 4), 5: ("u4", 8), 6: ("i1", 1),
          7: ("u1", 1), 8: ("i2", 2), 9: ("i4", 4), 10: ("i4", 8), 11: ("f4", 4), 12: ("f8", 8),
          13: ("u4", 4), 16: ("u8", 8), 17: ("i8", 8), 18: ("u8", 8)}

WIDTH, LENGTH, BITS, COMPRESSION, PHOTOMETRIC = 256, 257, 258, 259, 262
STRIP_OFFSETS, SAMPLES, STRIP_BYTES, PLANAR = 273, 277, 279, 284
TILE_WIDTH, TILE_OFFSETS, TILE_BYTES, SAMPLE_FORMAT = 322, 324, 325, 339

_lock = threading.Lock()


def pread(fd: int, n: int, offset: int) -> bytes:
    """Read n bytes at offset (os.pread where available; a locked seek+read otherwise)."""
    if hasattr(os, "pread"):
        return os.pread(fd, n, offset)
    with _lock:  # pragma: no cover - non-POSIX fallback
        os.lseek(fd, offset, os.SEEK_SET)
        return os.read(fd, n)


@dataclass(frozen=True)
class Header:
    byteorder: str  # "<" or ">"
    bigtiff: bool
    first_ifd: int

    @property
    def count_size(self) -> int:
        return 8 if self.bigtiff else 2

    @property
    def entry_size(self) -> int:
        return 20 if self.bigtiff else 12

    @property
    def pointer_size(self) -> int:
        return 8 if self.bigtiff else 4

    @property
    def entry_format(self) -> str:
        return self.byteorder + ("HHQ8s" if self.bigtiff else "HHI4s")


def read_header(fd: int) -> Header | None:
    """The TIFF header, or None when the bytes are not a TIFF header."""
    head = pread(fd, 16, 0)
    if len(head) < 8 or head[:2] not in (b"II", b"MM"):
        return None
    bo = "<" if head[:2] == b"II" else ">"
    version = struct.unpack(bo + "H", head[2:4])[0]
    if version == 42:
        return Header(bo, False, struct.unpack(bo + "I", head[4:8])[0])
    if version == 43 and len(head) >= 16:
        return Header(bo, True, struct.unpack(bo + "Q", head[8:16])[0])
    return None


class Ifd:
    """One image file directory: its entries, and the offset of the next IFD (0 at the end)."""

    __slots__ = ("offset", "next", "entries", "n_entries", "_fd", "_hdr")

    def __init__(self, offset: int, nxt: int, entries: dict[int, tuple[int, int, bytes]],
                 n_entries: int, fd: int, hdr: Header) -> None:
        self.offset, self.next, self.entries, self.n_entries = offset, nxt, entries, n_entries
        self._fd, self._hdr = fd, hdr

    def ints(self, tag: int) -> np.ndarray | None:
        """Values of an integer tag as int64 (read from the file when stored out of line)."""
        entry = self.entries.get(tag)
        if entry is None or entry[0] not in _TYPES:
            return None
        typ, count, raw = entry
        code, size = _TYPES[typ]
        nbytes = size * count
        if nbytes > len(raw):
            offset = struct.unpack(self._hdr.byteorder + ("Q" if self._hdr.bigtiff else "I"), raw)[0]
            raw = pread(self._fd, nbytes, offset)
            if len(raw) < nbytes:
                return None
        values = np.frombuffer(raw[:nbytes], self._hdr.byteorder + code)
        if typ in (5, 10):  # rationals: keep numerators
            values = values[::2]
        return values.astype(np.int64)

    def first(self, tag: int, default: int | None = None) -> int | None:
        """The first value of an integer tag (fast path for the usual inline SHORT/LONG/LONG8)."""
        entry = self.entries.get(tag)
        if entry is None:
            return default
        typ, count, raw = entry
        fmt = _INLINE.get(typ)
        if fmt is not None and count >= 1 and (count * struct.calcsize(fmt) <= len(raw)):
            return struct.unpack_from(self._hdr.byteorder + fmt, raw)[0]
        v = self.ints(tag)
        return default if v is None or len(v) == 0 else int(v[0])


_INLINE = {1: "B", 3: "H", 4: "I", 16: "Q", 13: "I", 18: "Q"}


def read_table(fd: int, hdr: Header, offset: int, size: int) -> tuple[bytes, int] | None:
    """(raw entry table, next IFD offset) of the IFD at `offset`; None when it cannot be one."""
    if offset < 8 or offset + hdr.count_size > size:
        return None
    guess = hdr.count_size + 24 * hdr.entry_size + hdr.pointer_size
    buf = pread(fd, guess, offset)
    if len(buf) < hdr.count_size:
        return None
    n = struct.unpack_from(hdr.byteorder + ("Q" if hdr.bigtiff else "H"), buf)[0]
    if n == 0 or n > 4096:
        return None
    need = hdr.count_size + n * hdr.entry_size + hdr.pointer_size
    if need > len(buf):
        buf = pread(fd, need, offset)
        if len(buf) < need:
            return None
    nxt = struct.unpack_from(hdr.byteorder + ("Q" if hdr.bigtiff else "I"), buf, need - hdr.pointer_size)[0]
    return buf[hdr.count_size:need - hdr.pointer_size], nxt


def parse_ifd(fd: int, hdr: Header, offset: int, table: bytes, nxt: int) -> Ifd:
    entries = {tag: (typ, count, raw) for tag, typ, count, raw in struct.iter_unpack(hdr.entry_format, table)}
    return Ifd(offset, nxt, entries, len(table) // hdr.entry_size, fd, hdr)


def read_ifd(fd: int, hdr: Header, offset: int, size: int) -> Ifd | None:
    """The IFD at `offset`, or None when it does not fit in the file or looks corrupt."""
    got = read_table(fd, hdr, offset, size)
    return None if got is None else parse_ifd(fd, hdr, offset, *got)


@dataclass(frozen=True)
class Geometry:
    """What must match between frames: image size, samples, pixel type and storage."""

    height: int
    width: int
    samples: int
    bits: int
    sample_format: int
    compression: int
    planar: int
    tiled: bool

    @property
    def frame_bytes(self) -> int:
        """Bytes of one decoded frame (Python ints: never overflows, whatever the tags claim)."""
        return self.height * self.width * self.samples * self.bits // 8


@dataclass(frozen=True)
class PageInfo:
    geometry: Geometry
    data_offset: int  # first byte of the frame's pixels when stored plainly in one run, else -1
    data_end: int  # one past the last byte of the page's strips or tiles (0 when unknown)
    stored: int = 0  # bytes in the page's strips or tiles (their byte counts summed; 0 when unknown)

    @property
    def plain(self) -> bool:
        return self.data_offset >= 0


def page_info(ifd: Ifd) -> PageInfo | None:
    """Geometry and plain data offset of an IFD; None when it lacks the basic tags."""
    width, height = ifd.first(WIDTH), ifd.first(LENGTH)
    if not width or not height:
        return None
    samples = ifd.first(SAMPLES, 1) or 1
    bits_all = ifd.ints(BITS) if samples > 1 else None
    bits = ifd.first(BITS, 1) or 1
    geo = Geometry(int(height), int(width), int(samples), bits, ifd.first(SAMPLE_FORMAT, 1) or 1,
                   ifd.first(COMPRESSION, 1) or 1, ifd.first(PLANAR, 1) or 1,
                   ifd.first(TILE_WIDTH) is not None)
    start_tag, count_tag = (TILE_OFFSETS, TILE_BYTES) if geo.tiled else (STRIP_OFFSETS, STRIP_BYTES)
    entry = ifd.entries.get(start_tag)
    if entry is not None and entry[1] == 1:  # one strip (the usual case): plain ints, no arrays
        first, nbytes = ifd.first(start_tag), ifd.first(count_tag)
        if first is None or nbytes is None:
            return PageInfo(geo, -1, 0)
        end, total, joined = first + nbytes, nbytes, True
    else:
        starts, counts = ifd.ints(start_tag), ifd.ints(count_tag)
        if starts is None or counts is None or len(starts) != len(counts) or len(starts) == 0:
            return PageInfo(geo, -1, 0)
        first, end, total = int(starts[0]), int((starts + counts).max()), int(counts.sum())
        joined = bool(np.all(starts[1:] == starts[:-1] + counts[:-1]))
    uniform = bits_all is None or bool(np.all(bits_all == bits))
    need = geo.frame_bytes
    if (geo.compression == 1 and not geo.tiled and uniform and bits in (8, 16, 32, 64)
            and (samples == 1 or geo.planar == 1) and joined and total >= need):
        return PageInfo(geo, first, first + need, total)
    return PageInfo(geo, -1, end, total)


def numpy_dtype(geo: Geometry, byteorder: str) -> np.dtype | None:
    """File dtype of a plain page (with its byte order), or None when numpy has no such type."""
    kind = {1: "u", 2: "i", 3: "f"}.get(geo.sample_format)
    if kind is None or geo.bits not in (8, 16, 32, 64) or (kind == "f" and geo.bits == 8):
        return None
    return np.dtype(f"{byteorder}{kind}{geo.bits // 8}")


# Largest decoded/stored size ratio each TIFF compression can reach (a page that claims more is damaged).
# PackBits: 2 bytes repeat a byte 128 times (TIFF 6.0 section 9); Deflate: 1032:1 (zlib technical
# details, from memory); LZW: 12-bit codes for strings of up to 4096 bytes (TIFF 6.0 section 13).
# Others (JPEG, LZMA, Zstandard, ...) are only bounded by pixels.frame_limit().
MAX_RATIO = {1: 1, 32773: 64, 8: 1100, 32946: 1100, 5: 2800}


def size_problem(geo: Geometry, stored: int, file_size: int) -> str | None:
    """Why a page's claimed frame size cannot be true for the bytes it has, or None when it can."""
    need = geo.frame_bytes
    text = f"pages claim {geo.height}x{geo.width}x{geo.samples} {geo.bits}-bit frames ({need:,} bytes)"
    too_big = frame_size_problem(need)
    if too_big:
        return f"{text}: {too_big}"
    ratio = MAX_RATIO.get(geo.compression)
    if ratio is not None and stored and need > stored * ratio:
        return f"{text} but the first page stores only {stored:,} bytes"
    if ratio is not None and need > file_size * ratio:
        return f"{text}, more than a {file_size:,}-byte file can hold"
    return None
