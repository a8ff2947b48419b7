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
SIXEL_LEVELS = 64  # grey levels (colour registers) sent in Sixel


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


def _runs(chars: np.ndarray) -> str:
    """One sixel row with repeats: ``!N`` for runs longer than three."""
    starts = np.flatnonzero(np.diff(chars, prepend=-1))
    lengths = np.diff(np.append(starts, len(chars)))
    out = []
    for c, n in zip(chars[starts].tolist(), lengths.tolist(), strict=True):
        ch = chr(c)
        out.append(ch * n if n <= 3 else f"!{n}{ch}")
    return "".join(out)


def sixel_image(indices: np.ndarray, palette: np.ndarray) -> str:
    """The Sixel sequence for an (h, w) image of colour register numbers, with ``palette`` the
    (n, 3) uint8 RGB of each register."""
    idx = np.asarray(indices)
    if idx.ndim != 2:
        raise ValueError(f"need a 2-D image of register numbers, got {idx.shape}")
    pal = np.asarray(palette, dtype=np.float64)
    h, w = idx.shape
    out = ['\x1bP0;1;0q', f'"1;1;{w};{h}']
    for n, (r, g, b) in enumerate(np.rint(pal * (100.0 / 255.0)).astype(int).tolist()):
        out.append(f"#{n};2;{r};{g};{b}")
    weights = (1 << np.arange(6))[:, None]
    for y in range(0, h, 6):
        band = idx[y:y + 6]
        lines = []
        for c in np.unique(band).tolist():
            bits = ((band == c) * weights[: band.shape[0]]).sum(axis=0)
            last = int(np.flatnonzero(bits)[-1]) + 1  # columns after the last set bit are left out
            lines.append(f"#{c}" + _runs((bits[:last] + 63).astype(np.int64)))
        out.append("$".join(lines) + "-")
    out.append("\x1b\\")
    return "".join(out)


def grey_sixel(image: np.ndarray, levels: int = SIXEL_LEVELS) -> str:
    """Sixel for a uint8 grey image, in ``levels`` grey registers."""
    ramp = np.rint(np.linspace(0, 255, levels)).astype(np.uint8)
    return sixel_image(grey_levels(image, levels), np.stack([ramp] * 3, axis=1))
