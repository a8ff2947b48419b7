"""Escape sequences that draw true pixels: the Kitty graphics protocol and DEC Sixel. No Textual here.

Kitty graphics protocol (as the kitty terminal's documentation specifies it): an APC sequence
``ESC _ G <key=value,...> ; <base64 payload> ESC \\``; ``a=T`` transmits and displays, ``f=24`` is
8-bit RGB, ``s``/``v`` the pixel width / height, ``c``/``r`` the cells the image is scaled into,
``i``/``p`` the image and placement ids (sending them again replaces the picture in place), ``C=1``
keeps the cursor still, ``q=2`` asks for no reply, ``z=-1`` draws under text (so glyphs written over it
stay visible). The payload is sent in chunks of at most 4096 base64 bytes, every one but the last a
multiple of 4, each but the last with ``m=1``.

Sixel (DEC, VT330/VT340 Programmer Reference Manual, vol. 2, "Sixel Graphics"): ``ESC P 0;1;0 q``,
raster attributes ``"1;1;W;H``, colour registers ``#n;2;R;G;B`` in percent, then bands of six pixel
rows: for each colour ``#n`` and one character per column, 63 + the six bits (top row = bit 0),
``!N`` repeating the next character N times, ``$`` back to the band's start, ``-`` to the next band;
``ESC \\`` ends it.
"""

from __future__ import annotations

import base64

import numpy as np

KITTY_CHUNK = 4096
KITTY_ID = 7231  # our image id (any number; one image per frame view)
SIXEL_LEVELS = 32  # grey levels (colour registers) sent in Sixel: each costs a pass per band


def kitty_image(rgb: np.ndarray, cols: int, rows: int, *, image_id: int = KITTY_ID,
                chunk: int = KITTY_CHUNK) -> str:
    """The escape sequence that shows an (h, w, 3) uint8 RGB image scaled into cols x rows cells
    at the cursor (which does not move)."""
    rgb = np.ascontiguousarray(rgb, dtype=np.uint8)
    if rgb.ndim != 3 or rgb.shape[2] != 3:
        raise ValueError(f"need an (h, w, 3) image, got {rgb.shape}")
    if chunk <= 0 or chunk % 4:
        raise ValueError("the chunk size must be a positive multiple of 4")
    h, w, _ = rgb.shape
    data = base64.standard_b64encode(rgb.tobytes()).decode("ascii")
    parts = [data[i:i + chunk] for i in range(0, len(data), chunk)] or [""]
    out = []
    for n, part in enumerate(parts):
        more = int(n < len(parts) - 1)
        if n == 0:
            keys = (f"a=T,f=24,s={w},v={h},c={cols},r={rows},i={image_id},p=1,C=1,q=2,z=-1,"
                    f"m={more}")
        else:
            keys = f"m={more},q=2"
        out.append(f"\x1b_G{keys};{part}\x1b\\")
    return "".join(out)


def kitty_delete(image_id: int = KITTY_ID) -> str:
    """Removes our image and its placements."""
    return f"\x1b_Ga=d,d=I,i={image_id},q=2\x1b\\"


def grey_levels(image: np.ndarray, levels: int = SIXEL_LEVELS) -> np.ndarray:
    """uint8 grey 0-255 -> register numbers 0..levels-1 (nearest level)."""
    return np.rint(np.asarray(image, dtype=np.float32) * ((levels - 1) / 255.0)).astype(np.int32)


def _sixel_rows(idx: np.ndarray, n_colours: int) -> np.ndarray:
    """For every band of six rows and every register: the six-bit column values, shape
    (bands, registers, width)."""
    h, w = idx.shape
    bands = -(-h // 6)
    bits = np.zeros((bands, n_colours, w), dtype=np.uint8)
    cols = np.arange(w)[None, :]
    for r in range(6):  # (band, register, column) is unique within one pixel row of each band
        rows = idx[r::6]
        bits[np.arange(rows.shape[0])[:, None], rows, cols] |= np.uint8(1 << r)
    return bits


def _encode_runs(chars: np.ndarray, row_of: np.ndarray) -> list[bytes]:
    """Sixel data with repeats (``!N`` for runs longer than three), per row: ``chars`` are the
    data characters of all rows end to end, ``row_of`` the row of each. Vectorised: runs never
    cross rows."""
    n = len(chars)
    if n == 0:
        return []
    start = np.ones(n, dtype=bool)
    start[1:] = (chars[1:] != chars[:-1]) | (row_of[1:] != row_of[:-1])
    pos = np.flatnonzero(start)
    length = np.diff(np.append(pos, n))
    value = chars[pos]
    long = length > 3
    digits = np.where(long, np.floor(np.log10(np.maximum(length, 1))).astype(np.int64) + 1, 0)
    size = np.where(long, 2 + digits, length)
    first = np.concatenate([[0], np.cumsum(size)[:-1]])
    out = np.empty(int(size.sum()), dtype=np.uint8)
    short = ~long
    reps = length[short]
    out[np.repeat(first[short], reps) + _ranges(reps)] = np.repeat(value[short], reps)
    lf, ll, ld = first[long], length[long], digits[long]
    out[lf] = ord("!")
    for j in range(int(ld.max()) if len(ld) else 0):  # digit j from the left, where there is one
        has = ld > j
        out[lf[has] + 1 + j] = ord("0") + (ll[has] // 10 ** (ld[has] - 1 - j)) % 10
    out[lf + 1 + ld] = value[long]
    row_runs = np.flatnonzero(np.diff(np.append(row_of[pos], -1)))  # last run of each row
    ends = (first + size)[row_runs]
    data = out.tobytes()
    return [data[a:b] for a, b in zip([0, *ends[:-1].tolist()], ends.tolist(), strict=True)]


def _ranges(lengths: np.ndarray) -> np.ndarray:
    """0..n-1 for each n in lengths, end to end."""
    if not len(lengths):
        return np.empty(0, dtype=np.int64)
    ends = np.cumsum(lengths)
    return np.arange(ends[-1]) - np.repeat(ends - lengths, lengths)


def sixel_image(indices: np.ndarray, palette: np.ndarray) -> str:
    """The Sixel sequence for an (h, w) image of colour register numbers, with ``palette`` the
    (n, 3) uint8 RGB of each register."""
    idx = np.asarray(indices)
    if idx.ndim != 2:
        raise ValueError(f"need a 2-D image of register numbers, got {idx.shape}")
    pal = np.asarray(palette, dtype=np.float64)
    h, w = idx.shape
    head = ['\x1bP0;1;0q', f'"1;1;{w};{h}']
    for n, (r, g, b) in enumerate(np.rint(pal * (100.0 / 255.0)).astype(int).tolist()):
        head.append(f"#{n};2;{r};{g};{b}")
    bits = _sixel_rows(idx.astype(np.intp), len(pal))
    band, colour = np.nonzero(bits.any(axis=2))  # the rows that draw something, in band order
    sel = bits[band, colour]  # (rows, w)
    last = w - np.argmax(sel[:, ::-1] != 0, axis=1)  # columns after the last set bit are left out
    keep = np.arange(w)[None, :] < last[:, None]
    chars = (sel[keep] + 63).astype(np.uint8)
    row_of = np.nonzero(keep)[0]
    bodies = _encode_runs(chars, row_of)
    out = ["".join(head)]
    for k, (b, c) in enumerate(zip(band.tolist(), colour.tolist(), strict=True)):
        newband = k + 1 == len(band) or band[k + 1] != b
        out.append(f"#{c}{bodies[k].decode('ascii')}{'-' if newband else '$'}")
    out.append("\x1b\\")
    return "".join(out)


def grey_sixel(image: np.ndarray, levels: int = SIXEL_LEVELS) -> str:
    """Sixel for a uint8 grey image, in ``levels`` grey registers."""
    ramp = np.rint(np.linspace(0, 255, levels)).astype(np.uint8)
    return sixel_image(grey_levels(image, levels), np.stack([ramp] * 3, axis=1))
