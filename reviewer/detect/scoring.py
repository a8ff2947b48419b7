"""Scoring of one chunk of normalised tile sums: windowed step statistics per tile, pooled locally,
calibrated to a single-test z per frame; located peaks get a position, an onset frame and, for
long-window-only detections, a check that they look like a step and not a drifting edge."""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from reviewer.detect.locate import TREND_MIN_W, locate, onset_shift
from reviewer.detect.reduce import SHAPES, Scratch, pooled_absmax
from reviewer.detect.statistics import column_median, effective_tests, step_weight

DECIMATE_MIN_W = 8  # windows this long are evaluated every 2nd frame (their peaks are ≥ w wide)
TREND_SPAN = 256  # frames over which a tile's trend is taken as constant
GAIN_TILES = 8192  # tiles sampled for the shot-noise gain
HELD_SHARE = 0.1  # more exact zeros than this in a scale sample: held frames, left out


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
    shift: np.ndarray     # (m,) int16 onset − frame for located frames (maximum-likelihood split)


def noise_gain(xn: np.ndarray) -> float | None:
    """Shot-noise gain (variance per unit mean of a tile sum) as the median over tiles of var/mean,
    var from 1.4826·MAD of frame-to-frame differences / √2; None when some mean is not positive."""
    head = xn[:257].reshape(min(len(xn), 257), -1)
    mu = head.mean(axis=0)
    if len(head) < 2 or not np.all(mu > 0):
        return None
    step = max(1, head.shape[1] // GAIN_TILES)  # a median over tiles: a spread sample will do
    mad = column_median(np.abs(np.diff(head[:, ::step], axis=0)), upper=True)
    var = (1.4826 * mad) ** 2 / 2.0
    return float(np.median(var / mu[::step]))


def noise_sd(xn: np.ndarray, gain: float | None = None) -> np.ndarray:
    """Per-tile sd of one frame's tile sum: shot noise, var = gain × mean (mean over the rows of xn,
    gain from noise_gain unless given); data with non-positive means fall back to one common
    variance."""
    g = noise_gain(xn) if gain is None else gain
    mu = xn.mean(axis=0)
    if g is not None and np.all(mu > 0):
        sd = np.sqrt(np.maximum(g * mu, 1e-12))
    elif len(xn) >= 2:
        d = np.diff(xn[:257], axis=0)
        var = (1.4826 * np.median(np.abs(d), axis=0)) ** 2 / 2.0
        sd = np.full(mu.shape, np.sqrt(max(float(np.median(var)), 1e-12)))
    else:
        sd = np.ones(mu.shape)
    return sd.astype(np.float32)


def _cumsum(xn: np.ndarray, a: int, b: int) -> np.ndarray:
    """Cumulative sum (leading zero row) of rows a..b-1 of xn, centred per tile (float32 keeps
    the differences exact enough once the mean is gone)."""
    seg = xn[a:b]
    cum = np.empty((len(seg) + 1, *seg.shape[1:]), np.float32)
    cum[0] = 0
    np.cumsum(seg - seg[: min(len(seg), 64)].mean(axis=0), axis=0, out=cum[1:])
    return cum


def _step(cum: np.ndarray, c0: int, a: int, b: int, w: int, outer: int) -> np.ndarray:
    """Unscaled step statistic (A − B, or the trend-free form of statistics.step_statistic) at
    buffer rows a..b-1; cum row k is the sum of buffer rows c0..c0+k-1."""
    m, j = b - a, a - c0
    t = cum[j + w: j + w + m] + cum[j - w: j - w + m]
    t -= cum[j: j + m]
    t -= cum[j: j + m]
    t *= np.float32(1.0 / w)
    big = outer * w
    if big:
        c, _ = step_weight(w, outer)
        t -= (cum[j + w + big: j + w + big + m] - cum[j + w: j + w + m]
              - cum[j - w: j - w + m] + cum[j - w - big: j - w - big + m]) * np.float32(c / big)
    return t


def _window_sums(seg: np.ndarray, windows: tuple[int, ...], ws: Scratch) -> dict[int, np.ndarray]:
    """Sums of w consecutive rows of seg (L, T) for every w in windows (out[w][i] = Σ seg[i:i+w]),
    built from power-of-two sums by doubling: a few adds of contiguous rows, no cumulative sum."""
    n, t = seg.shape
    pw = {1: seg}
    p = 1
    while 2 * p <= max(windows) and 2 * p <= n:
        prev = pw[p]
        pw[2 * p] = np.add(prev[:-p], prev[p:], out=ws.get(f"p{2 * p}", len(prev) - p, t))
        p *= 2
    out = {}
    for w in windows:
        if w in pw:
            out[w] = pw[w]
            continue
        if w > n:
            continue
        parts = [q for q in sorted(pw, reverse=True) if w & q]
        acc = ws.get(f"s{w}", n - w + 1, t)
        np.add(pw[parts[0]][: n - w + 1], pw[parts[1]][parts[0]: parts[0] + n - w + 1], out=acc)
        off = parts[0] + parts[1]
        for q in parts[2:]:
            acc += pw[q][off: off + n - w + 1]
            off += q
        out[w] = acc
    return out


def _maps(xn, lo, hi, windows, outer, inv_sd, robust=True, ws: Scratch | None = None,
          trend: bool = True):
    """Yield (window index, z maps (hi − lo, gy, gx)) for every window (`trend`: take each
    tile's slow trend out of the long windows, over TREND_SPAN frames)."""
    n, gy, gx = xn.shape
    ws = ws or Scratch()
    m = hi - lo
    inv = np.asarray(inv_sd, np.float32).reshape(-1)
    if outer:
        reach = (1 + outer) * max(windows)
        c0, c1 = max(0, lo - reach), min(n, hi + reach)
        cum = _cumsum(xn, c0, c1)
    else:
        big_w = max(windows)
        c0, c1 = max(0, lo - big_w), min(n, hi + big_w - 1)
        sums = _window_sums(xn[c0:c1].reshape(c1 - c0, -1), tuple(windows), ws)
    for k, w in enumerate(windows):
        o = (1 + outer) * w
        step = 2 if w >= DECIMATE_MIN_W and not outer else 1
        rows = -(-m // step)
        z = ws.get(f"z{k}", rows, gy * gx)
        a, b = max(lo, o), min(hi, n - o + 1)
        j0 = min(rows, -(-max(a - lo, 0) // step))
        j1 = max(j0, min(rows, -(-max(b - lo, 0) // step)))
        z[:j0] = 0
        z[j1:] = 0
        if j1 > j0:
            t = z[j0:j1]
            if outer:
                t[...] = _step(cum, c0, a, b, w, outer).reshape(b - a, -1)
            else:
                sw = sums[w]
                r0 = lo + step * j0 - c0
                r1 = r0 + step * (j1 - j0)
                np.subtract(sw[r0:r1:step], sw[r0 - w: r1 - w: step], out=t)
                if trend and step * (j1 - j0) >= 64 and w >= TREND_MIN_W:
                    # slow trend (drift moving an edge through a tile): the tile's typical A − B
                    # over TREND_SPAN frames; the median ignores the few frames near real steps
                    parts = max(1, step * (j1 - j0) // TREND_SPAN)
                    edges = np.linspace(0, j1 - j0, parts + 1).astype(int)
                    for e0, e1 in zip(edges[:-1], edges[1:], strict=True):
                        t[e0:e1] -= column_median(t[e0:e1: max(1, (e1 - e0) // 64)], upper=True)
            gain = inv * np.float32(1.0 / (w * step_weight(w, outer)[1]) if not outer
                                    else 1.0 / step_weight(w, outer)[1])
            if robust and t.size > 100:  # robust scale of the z values, from a subsample
                sub = np.abs(t[:: max(1, (j1 - j0) // 32)] * gain).ravel()
                if np.count_nonzero(sub == 0) > HELD_SHARE * sub.size:
                    sub = sub[sub > 0]  # many exact zeros: held (blanked) frames both sides
                scale = 1.4826 * float(np.partition(sub, sub.size // 2)[sub.size // 2]) \
                    if sub.size > 100 else 0.0
                if scale > 0:
                    gain = gain * np.float32(1.0 / scale)
            t *= gain
        yield k, z.reshape(rows, gy, gx), step


def _expand(v: np.ndarray, step: int, m: int) -> np.ndarray:
    """Per-frame series from values at every step-th frame: those frames keep theirs, the frames
    between take the mean of their neighbours (a long window's statistic changes little in a
    frame; never above both, so peaks stay on evaluated frames; onset_shift places the event)."""
    if step == 1:
        return v[:m]
    pm = 0.5 * (v + np.append(v[1:], v[-1:]))
    out = np.repeat(pm, step)[:m]
    out[0::step] = v[: len(out[0::step])]
    return out


def _maxima(xn, lo, hi, windows, outer) -> np.ndarray:
    inv_sd = 1.0 / noise_sd(xn)
    ws = Scratch()
    m = hi - lo
    return np.max([_expand(pooled_absmax(z, ws), step, m)
                   for _, z, step in _maps(xn, lo, hi, windows, outer, inv_sd, ws=ws)], axis=0)


def score_chunk(xn: np.ndarray, lo: int, hi: int, windows: tuple[int, ...], tile: int,
                outer: int = 0, inv_sd: np.ndarray | None = None,
                scratch: Scratch | None = None, k_eff: float | None = None,
                own_rows: int | None = None, trend: bool = True) -> ChunkScores:
    """Scores for buffer rows lo..hi-1 of xn (L, gy, gx), which must hold (1 + outer)·max(w)
    rows of context on each side where the movie has them. `frac` counts the first `own_rows`
    tile rows only (a band of a larger grid: its overlap with the next band is counted there);
    it is returned as a count then, not a share."""
    m = hi - lo
    per_window = np.zeros((m, len(windows)), np.float32)
    maps = []
    frac = np.zeros(m, np.float32)
    if inv_sd is None:
        inv_sd = 1.0 / noise_sd(xn)
    ws = scratch or Scratch()
    for k, z, step in _maps(xn, lo, hi, windows, outer, inv_sd, ws=ws, trend=trend):
        if k == 0:
            # share of tiles that changed, around the field's typical change (a local change
            # moves every other tile a little through the beam normalisation: not spread)
            own = z[:, : own_rows or z.shape[1]].reshape(len(z), -1)
            sub = own[:, :: max(1, own.shape[1] // 256)]
            centre = np.partition(sub, sub.shape[1] // 2, axis=1)[:, sub.shape[1] // 2: sub.shape[1] // 2 + 1]
            big = np.abs(np.subtract(own, centre, out=ws.get("abs", len(z), own.shape[1]))) > 3.0
            frac = np.count_nonzero(big, axis=1).astype(np.float32)
            frac = np.repeat(frac if own_rows else frac / np.float32(own.shape[1]), step)[:m]
        per_window[:, k] = _expand(pooled_absmax(z, ws), step, m)
        maps.append((z, step))
    best_window = np.argmax(per_window, axis=1).astype(np.int8)
    smax = per_window.max(axis=1)
    sign = np.zeros(m, np.int8)
    shift = np.zeros(m, np.int16)
    x = np.full(m, np.nan, np.float32)
    y = np.full(m, np.nan, np.float32)
    if k_eff is None:
        k_eff = null_tests(xn.shape[1], xn.shape[2], tuple(windows), outer)
    sign, x, y, shift = locate(xn, lo, per_window, best_window, maps, windows, tile, k_eff)
    smax = per_window.max(axis=1)
    return ChunkScores(smax, per_window, best_window, sign, x, y, frac, k_eff, shift)


BAND_CELLS = 1 << 20  # tile values per band and window array (bounds the work buffers)
OVERLAP = max(h for h, _ in SHAPES) - 1  # tile rows shared by neighbouring bands


def score_bands(xn: np.ndarray, lo: int, hi: int, windows: tuple[int, ...], tile: int,
                outer: int = 0, inv_sd: np.ndarray | None = None,
                scratch: Scratch | None = None, cells: int | None = None,
                trend: bool = True, k_eff: float | None = None) -> ChunkScores:
    """score_chunk in bands of tile rows for large grids, so the work buffers stay near `cells`
    values whatever the frame size. Bands overlap by OVERLAP rows, so every pooled box lies wholly
    in one band; per frame the per-window maxima are the bands' maxima and the location comes
    from the band with the strongest located score."""
    n, gy, gx = xn.shape
    if inv_sd is None:
        inv_sd = 1.0 / noise_sd(xn)
    span = (hi - lo) + 2 * (1 + outer) * max(windows)
    rows = max(2 * OVERLAP, (cells or BAND_CELLS) // max(span * gx, 1))
    if rows + OVERLAP >= gy:
        return score_chunk(xn, lo, hi, windows, tile, outer, inv_sd, scratch, trend=trend,
                           k_eff=k_eff)
    k_eff = k_eff or null_tests(gy, gx, tuple(windows), outer)
    inv = np.asarray(inv_sd, np.float32).reshape(gy, gx)
    out: ChunkScores | None = None
    best = None
    count = np.zeros(hi - lo, np.float32)
    for r0 in range(0, gy, rows):
        r1 = min(gy, r0 + rows + OVERLAP)
        cs = score_chunk(xn[:, r0:r1], lo, hi, windows, tile, outer, inv[r0:r1], scratch,
                         k_eff=k_eff, own_rows=min(rows, r1 - r0), trend=trend)
        count += cs.frac
        cs.y += np.float32(r0 * tile)
        located = np.where(np.isfinite(cs.x), cs.smax, -1.0)
        if out is None:
            out, best = cs, located
            continue
        take = located > best
        for name in ("sign", "x", "y", "shift", "best_window"):
            getattr(out, name)[take] = getattr(cs, name)[take]
        best = np.maximum(best, located)
        np.maximum(out.per_window, cs.per_window, out=out.per_window)
    assert out is not None
    unlocated = best < 0
    out.best_window[unlocated] = np.argmax(out.per_window[unlocated], axis=1)
    out.smax = out.per_window.max(axis=1)
    out.frac = count / np.float32(gy * gx)
    return out


__all__ = ["SHAPES", "ChunkScores", "noise_gain", "noise_sd", "onset_shift", "score_bands",
           "score_chunk"]


CALIBRATION_GRID = 32  # null calibrations run on at most this many tiles a side (fixed cost)
# _simulated_tests for the default windows on the full calibration grid and on the grids of 64² and
# 128² frames, computed once (fixed seed; tests/test_detect_sizes.py checks them against the
# simulation), so those scans skip it (~15 ms, 5 % of a 20,000-frame 128² scan)
KNOWN_TESTS = {(32, 32, (3, 10, 24), 0): 18647.647013948004,
               (16, 16, (3, 10, 24), 0): 3507.1210101017077,
               (8, 8, (3, 10, 24), 0): 577.8620787144739}


def box_count(gy: int, gx: int) -> int:
    """Number of pooled boxes (every shape of SHAPES at every position) on a gy × gx tile grid."""
    return sum(max(gy - h + 1, 0) * max(gx - w + 1, 0) for h, w in SHAPES)


def null_tests(gy: int, gx: int, windows: tuple[int, ...], outer: int) -> float:
    """Effective number of independent tests per frame for this grid and these windows: measured
    on simulated noise on a grid of at most CALIBRATION_GRID tiles a side and scaled by the number
    of pooled boxes (the maximum of many nearly independent boxes grows with their number; the
    box count carries the edges), so its cost does not grow with the frame size."""
    cy, cx = min(gy, CALIBRATION_GRID), min(gx, CALIBRATION_GRID)
    key = (cy, cx, tuple(windows), outer)
    k = KNOWN_TESTS.get(key) or _simulated_tests(*key)
    return k * box_count(gy, gx) / max(box_count(cy, cx), 1)


@lru_cache(maxsize=16)
def _simulated_tests(gy: int, gx: int, windows: tuple[int, ...], outer: int) -> float:
    """Effective number of independent tests per frame on a (small) gy × gx grid, measured once by
    running the same scoring on simulated white Gaussian noise (fixed seed). Measured on noise
    rather than on the movie so busy movies (events everywhere) do not bias the threshold."""
    rng = np.random.default_rng(12345)
    ctx = (1 + outer) * max(windows)
    n = max(1024, 12 * ctx)
    xn = (1000.0 + np.sqrt(1000.0) * rng.standard_normal((n + 2 * ctx, gy, gx))).astype(np.float32)
    smax = _maxima(xn, ctx, n + ctx, windows, outer)
    return effective_tests(smax, 0.5)
