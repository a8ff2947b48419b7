"""Early reduction of raw frames to coarse grids (bins, tiles) and spatial pooling on the tile grid."""

from __future__ import annotations

import numpy as np

# Pooled tile shapes (rows, cols): single tiles, pairs, squares and strips so a change along a line
# (a growth front) and a compact blob (an island) both meet a window that holds most of it.
SHAPES: tuple[tuple[int, int], ...] = ((1, 1), (1, 2), (2, 1), (2, 2), (1, 4), (4, 1), (4, 4))


def _accumulator(dtype: np.dtype) -> np.dtype:
    dtype = np.dtype(dtype)
    if dtype.kind == "u" and dtype.itemsize <= 2:
        return np.dtype(np.uint32)
    if dtype.kind == "i" and dtype.itemsize <= 2:
        return np.dtype(np.int32)
    if dtype.kind in "ui":
        return np.dtype(np.float64)
    return np.dtype(np.float32) if dtype.itemsize <= 4 else np.dtype(np.float64)


def bin_block(block: np.ndarray, factor: int, gy: int, gx: int) -> np.ndarray:
    """(n, H, W) raw frames -> (n, gy, gx) float32 sums of factor×factor pixels (rows first: the
    contiguous adds are the fast ones)."""
    n = block.shape[0]
    a = block[:, : gy * factor, : gx * factor]
    if a.dtype.kind == "b":
        a = a.astype(np.uint8)
    acc = _accumulator(a.dtype)
    rows = a.reshape(n, gy, factor, gx * factor).sum(axis=2, dtype=acc)
    return rows.reshape(n, gy, gx, factor).sum(axis=3).astype(np.float32, copy=False)


def tiles_from_bins(bins: np.ndarray) -> np.ndarray:
    """(n, 2gy, 2gx) bins -> (n, gy, gx) tiles (2×2 bins each)."""
    return bins[:, 0::2, 0::2] + bins[:, 1::2, 0::2] + bins[:, 0::2, 1::2] + bins[:, 1::2, 1::2]


def pooled(z: np.ndarray) -> list[np.ndarray]:
    """Normalised box sums of unit-variance tile values z (n, gy, gx) for every shape in SHAPES
    (a box sum of m independent unit-variance values divided by √m has unit variance)."""
    out: dict[tuple[int, int], np.ndarray] = {(1, 1): z}
    h2 = z[:, :, :-1] + z[:, :, 1:]
    v2 = z[:, :-1, :] + z[:, 1:, :]
    q = h2[:, :-1, :] + h2[:, 1:, :]
    out[(1, 2)], out[(2, 1)], out[(2, 2)] = h2, v2, q
    out[(1, 4)] = h2[:, :, :-2] + h2[:, :, 2:]
    out[(4, 1)] = v2[:, :-2, :] + v2[:, 2:, :]
    q2 = q[:, :, :-2] + q[:, :, 2:]
    out[(4, 4)] = q2[:, :-2, :] + q2[:, 2:, :]
    res = []
    for shape in SHAPES:
        a = out[shape]
        if a.shape[1] == 0 or a.shape[2] == 0:
            a = np.zeros((z.shape[0], 1, 1), np.float32)
        elif shape != (1, 1):
            a = a * np.float32(1.0 / np.sqrt(shape[0] * shape[1]))
        res.append(a)
    return res


def best_box(z: np.ndarray) -> tuple[int, int, int, float]:
    """For one frame's tile z map (gy, gx): (shape index, row, col, signed value) of the strongest
    pooled box."""
    best = (0, 0, 0, 0.0)
    for s, a in enumerate(pooled(z[None])):
        a = a[0]
        i = int(np.argmax(np.abs(a)))
        r, c = divmod(i, a.shape[1])
        v = float(a[r, c])
        if abs(v) > abs(best[3]):
            best = (s, r, c, v)
    return best


def centroid(z: np.ndarray, shape_index: int, r: int, c: int, sign: float,
             tile: int) -> tuple[float, float]:
    """Pixel centroid (x, y) of the change: tile centres around the best box weighted by the
    part of z that has the box's sign."""
    hgt, wid = SHAPES[shape_index]
    gy, gx = z.shape
    r0, r1 = max(r - 1, 0), min(r + hgt + 1, gy)
    c0, c1 = max(c - 1, 0), min(c + wid + 1, gx)
    wts = np.clip(np.sign(sign) * z[r0:r1, c0:c1], 0, None) ** 2
    if wts.sum() <= 0:
        return (c + wid / 2) * tile, (r + hgt / 2) * tile
    yy, xx = np.mgrid[r0:r1, c0:c1]
    cy = float((wts * (yy + 0.5)).sum() / wts.sum()) * tile
    cx = float((wts * (xx + 0.5)).sum() / wts.sum()) * tile
    return cx, cy
