"""Scoring of one chunk of normalised tile sums: windowed step statistics per tile, pooled locally,
calibrated to a single-test z per frame."""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from reviewer.detect.reduce import SHAPES, best_box, centroid, pooled
from reviewer.detect.statistics import effective_tests, raw_level, step_weight

LOCATE_Z = 2.5  # frames whose calibrated z exceeds this get a location (cheap: only those frames)


@dataclass
class ChunkScores:
    smax: np.ndarray      # (m,) max |z| over windows, shapes and positions
    per_window: np.ndarray  # (m, n_windows) max |z| per window length
    best_window: np.ndarray  # (m,) int8 index into windows
    sign: np.ndarray      # (m,) int8 sign of the best box (+1 brighter after, −1 darker)
    x: np.ndarray         # (m,) float32 pixel centroid of the best box's change, NaN if not located
    y: np.ndarray
    frac: np.ndarray      # (m,) share of tiles with |z| > 3 at the shortest window
    k_eff: float          # effective number of independent tests per frame (from the median)


def noise_sd(xn: np.ndarray) -> np.ndarray:
    """Per-tile sd of one frame's tile sum. Shot noise (var = gain × mean) with the gain measured as
    the median over tiles of var/mean, where var comes from 1.4826·MAD of frame-to-frame differences
    / √2; data with non-positive means fall back to one common variance."""
    d = np.diff(xn[:257], axis=0)
    var = (1.4826 * np.median(np.abs(d), axis=0)) ** 2 / 2.0
    mu = xn.mean(axis=0)
    if np.all(mu > 0):
        gain = float(np.median(var / mu))
        sd = np.sqrt(np.maximum(gain * mu, 1e-12))
    else:
        sd = np.full(mu.shape, np.sqrt(max(float(np.median(var)), 1e-12)))
    return sd.astype(np.float32)


def step_maps(xn: np.ndarray, lo: int, hi: int, w: int, outer: int,
              inv_sd: np.ndarray) -> np.ndarray:
    """z of the trend-free step statistic (statistics.step_statistic) at buffer rows lo..hi-1 (rows
    whose windows do not fit are 0). xn: (L, gy, gx) normalised tile sums."""
    n, big = xn.shape[0], outer * w
    o = w + big
    out = np.zeros((hi - lo, *xn.shape[1:]), np.float32)
    a, b = max(lo, o), min(hi, n - o + 1)
    if b <= a:
        return out
    seg = xn[a - o: b + o - 1]  # rows needed: t - o .. t + o - 1
    cum = np.empty((len(seg) + 1, *seg.shape[1:]), np.float32)
    cum[0] = 0
    np.cumsum(seg - seg.mean(axis=0), axis=0, out=cum[1:])
    sw = cum[w:] - cum[:-w]      # sw[i] = sum of seg[i:i+w]
    c, factor = step_weight(w, outer)
    m = b - a  # output row j <-> buffer row a + j <-> seg row o + j
    t = (sw[o: o + m] - sw[o - w: o - w + m]) * np.float32(1.0 / w)
    if big:
        sl = cum[big:] - cum[:-big]
        t -= (sl[o + w: o + w + m] - sl[:m]) * np.float32(c / big)
    elif m >= 64:
        # slow trend (drift moving an edge through a tile): the tile's typical A − B over the chunk;
        # the median ignores the few frames near real steps
        t -= np.median(t[:: max(1, w // 2)], axis=0)
    out[a - lo: b - lo] = t * (inv_sd * np.float32(1.0 / factor))
    return out


def _z_maps(xn: np.ndarray, lo: int, hi: int, windows: tuple[int, ...], outer: int):
    """Yield (window index, z maps) with the per-window robust scale applied."""
    inv_sd = 1.0 / noise_sd(xn)
    for k, w in enumerate(windows):
        z = step_maps(xn, lo, hi, w, outer, inv_sd)
        sub = z[::4].ravel()
        sub = sub[sub != 0]
        scale = 1.4826 * float(np.median(np.abs(sub))) if sub.size > 100 else 1.0
        if scale > 0:
            z *= np.float32(1.0 / scale)
        yield k, z


def _best(z: np.ndarray) -> np.ndarray:
    best = np.zeros(len(z), np.float32)
    for a in pooled(z):
        np.maximum(best, a.max(axis=(1, 2)), out=best)
        np.maximum(best, -a.min(axis=(1, 2)), out=best)
    return best


def _maxima(xn, lo, hi, windows, outer) -> np.ndarray:
    return np.max([_best(z) for _, z in _z_maps(xn, lo, hi, windows, outer)], axis=0)


def score_chunk(xn: np.ndarray, lo: int, hi: int, windows: tuple[int, ...], tile: int,
                outer: int = 4) -> ChunkScores:
    """Scores for buffer rows lo..hi-1 of xn (L, gy, gx), which must hold (1 + outer)·max(w)
    rows of context on each side where the movie has them."""
    m = hi - lo
    per_window = np.zeros((m, len(windows)), np.float32)
    maps = []
    frac = np.zeros(m, np.float32)
    for k, z in _z_maps(xn, lo, hi, windows, outer):
        if k == 0:
            frac = (np.abs(z) > 3.0).mean(axis=(1, 2)).astype(np.float32)
        per_window[:, k] = _best(z)
        maps.append(z)
    best_window = np.argmax(per_window, axis=1).astype(np.int8)
    smax = per_window.max(axis=1)
    sign = np.zeros(m, np.int8)
    x = np.full(m, np.nan, np.float32)
    y = np.full(m, np.nan, np.float32)
    k_eff = null_tests(xn.shape[1], xn.shape[2], tuple(windows), outer)
    for i in np.flatnonzero(smax > raw_level(LOCATE_Z, k_eff)):
        z = maps[best_window[i]][i]
        s, r, c, v = best_box(z)
        sign[i] = 1 if v > 0 else -1
        x[i], y[i] = centroid(z, s, r, c, v, tile)
    return ChunkScores(smax, per_window, best_window, sign, x, y, frac, k_eff)


__all__ = ["SHAPES", "ChunkScores", "noise_sd", "score_chunk", "step_maps"]


@lru_cache(maxsize=16)
def null_tests(gy: int, gx: int, windows: tuple[int, ...], outer: int) -> float:
    """Effective number of independent tests per frame for this grid and these windows, measured
    once by running the same scoring on simulated white Gaussian noise (fixed seed). Measured on
    noise rather than on the movie so busy movies (events everywhere) do not bias the threshold."""
    rng = np.random.default_rng(12345)
    ctx = (1 + outer) * max(windows)
    n = max(1024, 12 * ctx)
    xn = (1000.0 + np.sqrt(1000.0) * rng.standard_normal((n + 2 * ctx, gy, gx))).astype(np.float32)
    smax = _maxima(xn, ctx, n + ctx, windows, outer)
    return effective_tests(smax, 0.5)
