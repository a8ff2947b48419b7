"""Dim fronts: a growth layer moves an existing edge by a fraction of a pixel, so the change sits in
the few pixels across the edge, with a sign set by the edge's slope. A tile sum adds the noise of a
whole tile to it; the matched statistic weights each pixel by the local edge strength instead.

For a displacement u of an edge along its normal, the image changes by ΔI ≈ −u·|∇μ| (μ the mean
image); with Poisson noise (variance ∝ μ) the matched filter weights pixel p by

    g(p) = |∇μ_s(p)| / μ_s(p)        (μ_s: the mean image blurred by BLUR_PX)

and the front value of a tile is Σ_{p ∈ tile} g(p)·x(p). It is linear in the frame, so the scan's
step statistic runs on these values exactly as on tile sums (same windows, same pooled boxes along
a front: strips of tiles), with the shot-noise variance gain·Σ g²·μ per tile.

The template g must stay fixed over a window and follow the scene (fronts advance, the stage
drifts). Frames come in epochs of `epoch` frames; the template of an epoch is the gradient of that
epoch's own mean (so a layer inside the epoch is in it), and every frame is projected twice: onto
its epoch's template ("own") and onto the previous epoch's ("prev"). A frame scored with template
e reads epoch e's own values and epoch e+1's prev values; with epoch ≥ 2·reach every window around
a frame scored with template e = (t − reach) // epoch lies in epochs e and e+1. The rows are
delayed by up to one epoch (the epoch's frames are kept at front resolution until it ends: at most
FRONT_PIXELS per frame).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from reviewer.detect.reduce import Scratch, bin_block
from reviewer.detect.statistics import column_median

FRONT_PIXELS = 1 << 16  # front image at most this many pixels (frames binned b × b to fit)
EPOCH = 128  # frames per template (at least 2 × reach)
FRONT_MIN_W = 8  # the front values are scored with the windows this long or longer
BLUR_PX = 1.0  # blur of the mean image before its gradient (front pixels)
FRONT_SHARE = 1 / 16  # the template keeps this share of the pixels, the strongest edges
TREND_BLOCK = 16  # frames per block of the trend estimate (detrend)
BLANK_SHARE = 0.5  # a frame whose total is below this share of the bright end is blanked
HOLD = 24  # a blanked frame holds the mean front values of this many good frames before it
SAMPLE = 4  # the template is made from every SAMPLE-th frame of its epoch
KEEP_EPOCHS = 32  # variance sums kept for this many past epochs (scoring lags reading)


def front_bin(shape: tuple[int, int], tile: int) -> int | None:
    """The binning b (a power of 2, at most tile / 2) that brings the frame to FRONT_PIXELS or
    fewer, or None when no such b exists (the front statistic is off for those frames)."""
    h, w = shape
    b = 1
    while (h // b) * (w // b) > FRONT_PIXELS:
        b *= 2
    return b if b <= tile // 2 and tile % b == 0 else None


def front_images(block: np.ndarray, b: int, scratch: Scratch) -> np.ndarray:
    """(n, H, W) raw frames -> (n, H // b, W // b) sums of b × b pixels, the front resolution: for
    uint16 frames whose sums fit, uint16 sums by halving rows then columns into `scratch`'s reused
    buffers (valid until its next use; measured 1.7x faster than float32 bins of 512² frames, and
    half the bytes the epoch keeps and the projection gathers); else reduce.bin_block's float32.
    Integer sums are exact, so both give the same values."""
    n, h, w = block.shape
    if block.dtype != np.uint16 or not block.size or int(block.max()) * b * b >= 65536:
        return bin_block(block, b, h // b, w // b, scratch)
    a = block[:, : h // b * b, : w // b * b]
    k = 1
    while k < b:  # rows, then columns, each halved (contiguous adds first)
        r = scratch.array(f"front_rows{k}", (n, a.shape[1] // 2, a.shape[2]), np.uint16)
        a = np.add(a[:, 0::2], a[:, 1::2], out=r)
        c = scratch.array(f"front_cols{k}", (n, a.shape[1], a.shape[2] // 2), np.uint16)
        v = a.reshape(n, a.shape[1], a.shape[2] // 2, 2)
        a = np.add(v[..., 0], v[..., 1], out=c)
        k *= 2
    return a


def template(mean: np.ndarray) -> np.ndarray:
    """The matched weights g = |∇μ_s| / μ_s (float32, front pixels, largest 1) of an epoch's mean
    image; where the mean is not positive (offset data) the gradient over a typical level."""
    m = ndimage.gaussian_filter(np.asarray(mean, np.float32), BLUR_PX, mode="nearest")
    gy, gx = np.gradient(m)
    grad = np.hypot(gy, gx)
    typical = float(np.mean(np.abs(m))) or 1.0
    g = grad / np.maximum(m, 0.1 * typical)
    top = float(g.max())
    return (g / top if top > 0 else g).astype(np.float32)


@dataclass
class Sparse:
    """A template as its strongest pixels, grouped by tile: flat pixel indices, weights, the start
    of each tile's run and that tile's flat index."""

    idx: np.ndarray
    w: np.ndarray
    starts: np.ndarray
    tiles: np.ndarray


def sparse_template(g: np.ndarray, gy: int, gx: int, f: int) -> Sparse:
    """The FRONT_SHARE strongest pixels of g inside the tile grid (measured: the strongest
    sixteenth finds more dim layers than every pixel, the membrane's mottle only adds noise)."""
    h, w = g.shape
    flat = g[: gy * f, : gx * f]
    k = max(1, int(FRONT_SHARE * flat.size))
    sel = np.argpartition(flat.ravel(), -k)[-k:]
    sel = sel[flat.ravel()[sel] > 0]
    yy, xx = np.divmod(sel, gx * f)
    tile = (yy // f) * gx + xx // f
    order = np.lexsort((sel, tile))
    yy, xx, tile = yy[order], xx[order], tile[order]
    starts = np.flatnonzero(np.r_[True, tile[1:] != tile[:-1]]) if len(tile) else np.zeros(0, int)
    return Sparse(yy * w + xx, g[yy, xx].astype(np.float32), starts, tile[starts])


def project(x: np.ndarray, sp: Sparse, n_tiles: int) -> np.ndarray:
    """Σ weight × pixel over each tile's template pixels: (n, pixels) -> (n, n_tiles) float32."""
    out = np.zeros((len(x), n_tiles), np.float32)
    if len(sp.idx):
        # np.take gathers columns several times faster than x[:, idx] (measured 5-8x on 128-frame
        # epochs); then in place: a mixed-type multiply is slow (float32 images: the gather is
        # the copy)
        v = np.take(x, sp.idx, axis=1).astype(np.float32, copy=False)
        v *= sp.w
        sums = np.add.reduceat(v, sp.starts, axis=1)
        if len(sp.tiles) == n_tiles:  # every tile has template pixels: already in tile order
            return sums
        # one flat put (measured 2x faster than out[:, tiles] = sums at 128², 8x at 512²)
        np.put(out.reshape(-1), (np.arange(len(x))[:, None] * n_tiles + sp.tiles).ravel(), sums)
    return out


def _mean_rows(imgs: np.ndarray, rows: np.ndarray) -> np.ndarray:
    """The float32 mean image of the chosen frames; evenly spaced ones (every SAMPLE-th, no blank)
    are read through a strided view instead of gathered into a copy first (the same sum)."""
    idx = np.flatnonzero(rows)
    step = int(idx[1] - idx[0]) if len(idx) > 1 else 1
    if len(idx) > 1 and np.all(np.diff(idx) == step):
        return imgs[idx[0]: idx[-1] + 1: step].mean(axis=0, dtype=np.float32)
    return imgs[idx].mean(axis=0, dtype=np.float32)


class FrontDelay:
    """Front values for every frame, an epoch at a time: push() the frames' tile sums and front-
    resolution images as they come (non-finite pixels set to 0); it returns, per finished epoch,
    (start, tiles, front) for the epoch's frames, front (frames, 2, gy, gx) holding the own and the
    prev values, and keeps that epoch's variance sums (Σ g²·μ per tile, see inv_sd)."""

    def __init__(self, gy: int, gx: int, tile: int, b: int, reach: int, first: int = 0) -> None:
        self.gy, self.gx, self.b, self.f = gy, gx, b, tile // b
        self.epoch = max(EPOCH, 2 * reach)
        self.reach = reach
        self.start = first
        self.next = first  # the next frame to come
        self.tiles: list[np.ndarray] = []
        self.images: np.ndarray | None = None  # (epoch, h, w): this epoch's frames so far
        self.count = 0
        self.prev: Sparse | None = None  # the last epoch's template
        self.var: dict[int, np.ndarray] = {}
        self.empty: set[int] = set()  # epochs blanked mostly (scored from tiles only)
        self.levels: dict[int, float] = {}  # per epoch: the 90th percentile of frame totals

    def scoring_epoch(self, t: int) -> int:
        """The template a frame is scored with."""
        return max(0, (t - self.reach) // self.epoch)

    def aligned(self, upto: int, scored: int) -> int:
        """A chunk to be scored from `scored` up to `upto` (movie frames) ends on the last
        template boundary before upto instead, when that is still past `scored`."""
        a = self.reach + (upto - self.reach) // self.epoch * self.epoch
        return a if a > scored else upto

    def push(self, tiles: np.ndarray, images: np.ndarray) -> list[tuple]:
        """Take the next frames (in order, from frame `first` on); epochs are whole multiples of
        `epoch` frames in absolute frame numbers (the first one may be partial). `images` are
        copied (the reader may reuse its buffer)."""
        out = []
        i = 0
        while i < len(tiles):
            room = self.epoch - self.next % self.epoch
            take = min(room, len(tiles) - i)
            if not self.count:
                self.start = self.next
            self.tiles.append(tiles[i: i + take])
            if self.images is None or self.images.shape[1:] != images.shape[1:] \
                    or self.images.dtype != images.dtype:
                self.images = np.empty((self.epoch, *images.shape[1:]), images.dtype)
            self.images[self.count: self.count + take] = images[i: i + take]
            self.count += take
            self.next += take
            i += take
            if self.next % self.epoch == 0:
                out.append(self._finish())
        return out

    def flush(self) -> list[tuple]:
        return [self._finish()] if self.count else []

    def _finish(self) -> tuple:
        imgs = self.images[: self.count]
        tiles = np.concatenate(self.tiles) if len(self.tiles) > 1 else self.tiles[0]
        n = len(imgs)
        x = imgs.reshape(n, -1)
        t = self.gy * self.gx
        total = np.abs(tiles.reshape(n, -1).sum(axis=1, dtype=np.float64))
        total[~np.isfinite(total)] = 0
        e = self.start // self.epoch
        self.levels[e] = float(np.quantile(total, 0.9))  # the bright end: blanks do not set it
        ref = max(self.levels.values())
        good = total >= BLANK_SHARE * ref
        if 2 * np.count_nonzero(good) < n:  # mostly blanked: too few frames for a template
            self.empty.add(e)
        # earlier epochs that were darker throughout (blanked): their templates are unused too
        self.empty.update(k for k, v in self.levels.items() if v < BLANK_SHARE * ref)
        # the template comes from every 4th frame; a template made from a frame's counts leans
        # towards that frame's noise (its value stands out: a false step at every epoch's end),
        # so those frames' own values are taken down by their mean excess over the other frames
        # of the epoch (interleaved: the same scene, events included)
        mine = (self.start + np.arange(n)) % SAMPLE == 0
        pick = mine & good
        mean = _mean_rows(imgs, pick if pick.any() else good if good.any() else np.ones(n, bool))
        own = sparse_template(template(mean), self.gy, self.gx, self.f)
        prev = self.prev or own
        sq = Sparse(own.idx, own.w * own.w, own.starts, own.tiles)
        self.var[e] = project(mean.reshape(1, -1), sq, t)[0].reshape(self.gy, self.gx)
        both = Sparse(np.concatenate([own.idx, prev.idx]), np.concatenate([own.w, prev.w]),
                      np.concatenate([own.starts, prev.starts + len(own.idx)]),
                      np.concatenate([own.tiles, prev.tiles + t]))
        front = project(x, both, 2 * t).reshape(n, 2, t)  # own values, then prev values
        rest = ~mine & good
        if pick.any() and rest.any():  # their lean, measured against the interleaved others
            front[mine, 0] -= front[pick, 0].mean(axis=0) - front[rest, 0].mean(axis=0)
        if good.any() and not good.all():  # blanked frames hold good ones' values (same
            idx = np.flatnonzero(good)        # templates: the scan holds their tile sums alike)
            for i in np.flatnonzero(~good):
                k = int(np.searchsorted(idx, i))
                front[i] = front[idx[max(k - HOLD, 0): k] if k else idx[:HOLD]].mean(axis=0)
        for old in [k for k in self.var if k < e - KEEP_EPOCHS]:
            del self.var[old]
            self.levels.pop(old, None)
        self.prev = own
        start = self.start
        self.tiles, self.count = [], 0
        return start, tiles, front.reshape(n, 2, self.gy, self.gx)

    def series(self, own: np.ndarray, prev: np.ndarray, first: int, e: int) -> np.ndarray:
        """Front values under template e for buffer rows whose first row is frame `first`: epoch
        e's own values, epoch e+1's prev values (rows of other epochs: own, never read)."""
        rows = first + np.arange(len(own))
        later = (rows // self.epoch) == e + 1
        out = own.copy()
        out[later] = prev[later]
        return out

    def detrend(self, values: np.ndarray) -> np.ndarray:
        """Take each tile's linear trend out of a series (rows, gy, gx), in place: slow drift
        moves every edge, and the front values follow it. The slope is the median of the
        differences of consecutive TREND_BLOCK-frame means (a step spoils one or two of them)."""
        n = len(values) // TREND_BLOCK
        if n < 4:
            return values
        means = values[: n * TREND_BLOCK].reshape(n, TREND_BLOCK, -1).mean(axis=1)
        slope = column_median(np.diff(means, axis=0)) / TREND_BLOCK
        rows = np.arange(len(values), dtype=np.float32) - (len(values) - 1) / 2
        flat = values.reshape(len(values), -1)
        flat -= rows[:, None] * slope[None, :]
        return values

    def inv_sd(self, e: int, gain: float | None, values: np.ndarray) -> np.ndarray:
        """1 / sd of one frame's front value per tile under template e: shot noise gain·Σ g²μ,
        or (no gain: offset data) one common sd from the values' frame differences; 0 for tiles
        without template pixels (their values are 0 and stay out of the statistic)."""
        var = self.var.get(e)
        if var is None:
            var = np.ones((self.gy, self.gx), np.float32)
        has = var > 0
        if gain is not None and gain > 0:
            inv = 1.0 / np.sqrt(np.maximum(gain * var, 1e-12))
        else:
            d = np.abs(np.diff(values[: 257].reshape(min(len(values), 257), -1), axis=0))
            sd = 1.4826 * float(np.median(d[:, has.ravel()])) / np.sqrt(2.0) if has.any() \
                and len(d) else 1.0
            inv = np.full((self.gy, self.gx), 1.0 / max(sd, 1e-12))
        return np.where(has, inv, 0.0).astype(np.float32)

__all__ = ["EPOCH", "FRONT_PIXELS", "FrontDelay", "Sparse", "front_bin", "front_images", "project",
           "sparse_template", "template"]
