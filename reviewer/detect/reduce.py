"""Early reduction of raw frames to tile sums, and spatial pooling on the tile grid."""

from __future__ import annotations

import numpy as np

# Pooled tile shapes (rows, cols): single tiles, pairs, squares and strips so a change along a line
# (a growth front) and a compact blob (an island) both meet a window that holds most of it.
SHAPES: tuple[tuple[int, int], ...] = ((1, 1), (1, 2), (2, 1), (2, 2), (1, 4), (4, 1))
_GAIN = tuple(np.float32(1.0 / np.sqrt(h * w)) for h, w in SHAPES)


def _accumulator(dtype: np.dtype) -> np.dtype:
    dtype = np.dtype(dtype)
    if dtype.kind == "u" and dtype.itemsize <= 2:
        return np.dtype(np.uint32)
    if dtype.kind == "i" and dtype.itemsize <= 2:
        return np.dtype(np.int32)
    if dtype.kind in "ui":
        return np.dtype(np.float64)
    return np.dtype(np.float32) if dtype.itemsize <= 4 else np.dtype(np.float64)


def _row_sums(a: np.ndarray, factor: int, fits: bool = False,
              scratch: Scratch | None = None) -> np.ndarray:
    """(n, gy·factor, W) -> (n, gy, W): sums of `factor` consecutive rows. uint16 frames whose
    maximum leaves room (`fits`: factor × max < 2^16) are added in their own dtype (no widening
    copy: this is the one pass over every pixel, it runs near memory speed; a one-operand einsum
    adds the rows in one C loop, measured ~1.6x faster than a Python loop of strided adds); others
    widen first."""
    n, hh, w = a.shape
    v = a.reshape(n, hh // factor, factor, w)
    if fits:
        if factor == 1:
            return v[:, :, 0].copy()
        out = scratch.array("rows", (n, hh // factor, w), a.dtype) if scratch else None
        return np.einsum("nykc->nyc", v, out=out)
    if a.dtype.kind == "b":
        v = v.astype(np.uint8)
    return v.sum(axis=2, dtype=_accumulator(v.dtype))


def bin_block(block: np.ndarray, factor: int, gy: int, gx: int,
              scratch: Scratch | None = None) -> np.ndarray:
    """(n, H, W) raw frames -> (n, gy, gx) float32 sums of factor×factor pixels (rows first: the
    contiguous adds are the fast ones; edges that do not fill a block are dropped). No matrix
    product here: a multi-threaded BLAS spins against other work on a shared machine. Integer
    sums are exact in any order, so the uint16 fast paths give the same float32 values.
    With `scratch` the work and (on the uint16 paths) the result are its reused buffers, valid
    until the next call with it: for large results (fresh megabytes cost page faults every
    block, measured 3x the adds for 2×2 sums of 512² frames)."""
    n = block.shape[0]
    a = block[:, : gy * factor, : gx * factor]
    top = int(a.max()) if a.dtype == np.uint16 and a.size else -1
    rows = _row_sums(a, factor, top >= 0 and top * factor < 65536, scratch)
    cols = rows.reshape(n, gy, gx, factor)
    if factor % 2 == 0:  # halve the column groups with strided adds (faster than a short reduce)
        if rows.dtype == np.uint16 and top * factor * factor < 65536:  # whole tile fits uint16
            r = cols
            while r.shape[-1] % 2 == 0 and r.shape[-1] > 2:
                r = r[..., 0::2] + r[..., 1::2]
            if r.shape[-1] == 2:
                out = scratch.array("bins", (n, gy, gx), np.float32) if scratch else None
                return np.add(r[..., 0], r[..., 1], dtype=np.float32, out=out)
            return r.sum(axis=-1, dtype=np.uint32).astype(np.float32)
        r = np.add(cols[..., 0::2], cols[..., 1::2], dtype=np.float32)
        while r.shape[-1] % 2 == 0 and r.shape[-1] > 1:
            r = r[..., 0::2] + r[..., 1::2]
        return r.sum(axis=-1) if r.shape[-1] > 1 else r[..., 0]
    return cols.sum(axis=3, dtype=np.float32)


def pooled(z: np.ndarray) -> list[np.ndarray]:
    """Normalised box sums of unit-variance tile values z (n, gy, gx) for every shape in SHAPES
    (a box sum of m independent unit-variance values divided by √m has unit variance)."""
    n = z.shape[0]
    out: dict[tuple[int, int], np.ndarray] = {(1, 1): z}
    h2 = z[:, :, :-1] + z[:, :, 1:]
    v2 = z[:, :-1, :] + z[:, 1:, :]
    out[(1, 2)], out[(2, 1)] = h2, v2
    out[(2, 2)] = h2[:, :-1, :] + h2[:, 1:, :]
    out[(1, 4)] = h2[:, :, :-2] + h2[:, :, 2:]
    out[(4, 1)] = v2[:, :-2, :] + v2[:, 2:, :]
    res = []
    for shape, g in zip(SHAPES, _GAIN, strict=True):
        a = out[shape]
        if a.shape[1] == 0 or a.shape[2] == 0:
            a = np.zeros((n, 1, 1), np.float32)
        elif shape != (1, 1):
            a *= g
        res.append(a)
    return res


class Scratch:
    """Reusable float32 work buffers by name (fresh large arrays cost page faults on every chunk)."""

    def __init__(self) -> None:
        self._bufs: dict[str, np.ndarray] = {}
        self._arrays: dict[str, np.ndarray] = {}

    def get(self, name: str, rows: int, cols: int) -> np.ndarray:
        b = self._bufs.get(name)
        if b is None or b.shape[0] < rows or b.shape[1] < cols:
            b = np.empty((max(rows, 0 if b is None else b.shape[0]),
                          max(cols, 0 if b is None else b.shape[1])), np.float32)
            self._bufs[name] = b
        return b[:rows, :cols]

    def array(self, name: str, shape: tuple[int, ...], dtype) -> np.ndarray:
        """A reusable C-contiguous array of this shape and dtype (its buffer grows as needed)."""
        dtype = np.dtype(dtype)
        size = int(np.prod(shape))
        key = f"{name}:{dtype.str}"
        b = self._arrays.get(key)
        if b is None or b.size < size:
            b = self._arrays[key] = np.empty(size, dtype)
        return b[:size].reshape(shape)


def pooled_absmax(z: np.ndarray, scratch: Scratch | None = None) -> np.ndarray:
    """Per row of z (n, gy, gx): the largest |value| over every pooled shape and position (the same
    boxes and gains as pooled()). Every add runs over the whole chunk as one flat array (boxes that
    would wrap across a grid row or into the next frame are zeroed); shapes with the same gain are
    merged elementwise so each frame needs three reductions, not one per shape."""
    n, gy, gx = z.shape
    t = gy * gx
    size = n * t
    ws = scratch or Scratch()
    flat = np.ascontiguousarray(z).reshape(size)

    def shifted(name: str, src: np.ndarray, step: int) -> np.ndarray:
        out = ws.get(name, 1, size)[0]
        if step < size:
            np.add(src[: size - step], src[step:], out=out[: size - step])
        out[max(size - step, 0):] = 0
        return out

    h2 = shifted("h2", flat, 1)
    h2.reshape(n * gy, gx)[:, gx - 1] = 0
    v2 = shifted("v2", flat, gx)
    v2.reshape(n, gy, gx)[:, gy - 1] = 0
    q = shifted("q", h2, gx)
    q.reshape(n, gy, gx)[:, gy - 1] = 0
    h4 = shifted("h4", h2, 2)
    h4.reshape(n * gy, gx)[:, max(gx - 3, 0):] = 0
    v4 = shifted("v4", v2, 2 * gx)
    v4.reshape(n, gy, gx)[:, max(gy - 3, 0):] = 0
    single = np.abs(flat, out=ws.get("abs1", 1, size)[0])
    pairs = np.maximum(np.abs(h2, out=h2), np.abs(v2, out=v2), out=h2)
    quads = np.maximum(np.abs(q, out=q), np.abs(h4, out=h4), out=q)
    np.maximum(quads, np.abs(v4, out=v4), out=quads)
    best = single.reshape(n, t).max(axis=1)
    np.maximum(best, pairs.reshape(n, t).max(axis=1) * np.float32(1 / np.sqrt(2)), out=best)
    np.maximum(best, quads.reshape(n, t).max(axis=1) * np.float32(0.5), out=best)
    return best


def best_boxes(z: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """For each row of z (n, gy, gx): (shape index, row, col, signed value) of the strongest pooled
    box, vectorised over rows."""
    n = z.shape[0]
    best_v = np.zeros(n, np.float32)
    best_s = np.zeros(n, np.int64)
    best_r = np.zeros(n, np.int64)
    best_c = np.zeros(n, np.int64)
    rows = np.arange(n)
    for s, a in enumerate(pooled(z)):
        flat = a.reshape(n, -1)
        i = np.argmax(np.abs(flat), axis=1)
        v = flat[rows, i]
        better = np.abs(v) > np.abs(best_v)
        best_v[better] = v[better]
        best_s[better] = s
        best_r[better], best_c[better] = np.divmod(i[better], a.shape[2])
    return best_s, best_r, best_c, best_v


def best_box(z: np.ndarray) -> tuple[int, int, int, float]:
    """For one frame's tile z map (gy, gx): (shape index, row, col, signed value) of the strongest
    pooled box."""
    s, r, c, v = best_boxes(np.asarray(z, np.float32)[None])
    return int(s[0]), int(r[0]), int(c[0]), float(v[0])


def centroid(z: np.ndarray, shape_index: int, r: int, c: int, sign: float,
             tile: int) -> tuple[float, float]:
    """Pixel centroid (x, y) of the change: tile centres around the best box weighted by the
    part of z that has the box's sign."""
    hgt, wid = SHAPES[shape_index]
    gy, gx = z.shape
    r0, r1 = max(r - 1, 0), min(r + hgt + 1, gy)
    c0, c1 = max(c - 1, 0), min(c + wid + 1, gx)
    wts = np.clip(z[r0:r1, c0:c1] if sign > 0 else -z[r0:r1, c0:c1], 0, None) ** 2
    tot = float(wts.sum())
    if tot <= 0:
        return (c + wid / 2) * tile, (r + hgt / 2) * tile
    cy = float(wts.sum(axis=1) @ (np.arange(r0, r1) + 0.5)) / tot * tile
    cx = float(wts.sum(axis=0) @ (np.arange(c0, c1) + 0.5)) / tot * tile
    return cx, cy
