"""Short-pulse (transient) statistic: something that darkens or brightens one spot for only a few
frames (a particle crossing) and then leaves.

It runs on the same tile sums as the step statistic (measured: tiles at every half-tile offset
caught one more small transient in ~330 true events but made the whole scan ~35 % slower). For a
pulse of d frames starting at t, with P the mean of the d frames, B the mean of the `BASE` frames
before and A of the `BASE` frames after,

    z_in = (P − B) / (σ·√(1/d + 1/BASE)),   z_out = (P − A) / (same)

and the pulse statistic is the smaller of the two when both have the same sign (0 otherwise): a
step moves only one of them, a pulse both. The per-frame maximum over tiles and durations is
calibrated like the step score, with its effective number of tests measured on simulated noise.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from reviewer.detect.statistics import effective_tests

DURATIONS = (2,)  # pulse lengths (frames; 1, 2 or 4); (1, 2, 3) cost 3x and found fewer
BASE = 8          # frames of baseline on each side
MIN_SCALE_VALUES = 400  # values needed before the robust scale replaces the shot-noise model
CELLS = 1 << 17   # tile values per sub-block (bounds the temporaries for large frames)


@dataclass
class PulseScores:
    pmax: np.ndarray   # (m,) max pulse |z| over tiles and durations
    x: np.ndarray      # (m,) float32 pixel centre of the best tile
    y: np.ndarray
    dur: np.ndarray    # (m,) int8 duration of the best pulse


def pulse_chunk(tiles: np.ndarray, lo: int, hi: int, tile: int, gain: float | None = None,
                robust: bool = True) -> PulseScores:
    """Pulse scores for buffer rows lo..hi-1 of tile sums (L, gy, gx) of `tile` px.
    Shot noise: var = gain × mean per tile (gain None: one common variance from frame
    differences)."""
    m = hi - lo
    n = len(tiles)
    if n < 2 * BASE + min(DURATIONS):  # too short for any pulse with baselines on both sides
        return PulseScores(np.zeros(m, np.float32), np.full(m, np.nan, np.float32),
                           np.full(m, np.nan, np.float32), np.zeros(m, np.int8))
    gy, gx = tiles.shape[1:]
    out = PulseScores(np.zeros(m, np.float32), np.full(m, np.nan, np.float32),
                      np.full(m, np.nan, np.float32), np.zeros(m, np.int8))
    if gy < 1 or gx < 1:
        return out
    dmax = max(DURATIONS)
    scale = None
    rows = max(64, CELLS // (gy * gx))
    for s0 in range(lo, hi, rows):
        s1 = min(hi, s0 + rows)
        b0, b1 = max(0, s0 - BASE), min(n, s1 + BASE + dmax)
        x = tiles[b0:b1].reshape(b1 - b0, -1)
        if s0 == lo:  # shot noise: var = gain × the local mean (None: one common variance)
            mean = x[:64].mean(axis=0)
            local = gain if gain is not None and np.all(mean > 0) else None
            if local is not None:
                inv = 1.0 / np.sqrt(np.maximum(gain * mean, 1e-12))
            else:
                d = np.abs(np.diff(x[:64], axis=0))
                inv = np.full(x.shape[1], np.sqrt(2.0) / max(1.4826 * float(np.median(d)), 1e-6))
        bestv = np.zeros(s1 - s0, np.float32)
        bestarg = np.zeros(s1 - s0, np.int64)
        bestd = np.zeros(s1 - s0, np.int8)
        width = max(1024, CELLS // max(b1 - b0, 1))  # tiles at a time: bounded temporaries
        for c0 in range(0, x.shape[1], width):
            c1 = min(x.shape[1], c0 + width)
            scale = _best_pulses(x[:, c0:c1], inv[c0:c1], s0, s1, b0, n, scale, robust,
                                 bestv, bestarg, bestd, c0, local)
        sl = slice(s0 - lo, s1 - lo)
        out.pmax[sl] = bestv
        rr, cc = np.divmod(bestarg, gx)
        has = bestv > 0
        out.x[sl] = np.where(has, (cc + 0.5) * tile, np.nan)
        out.y[sl] = np.where(has, (rr + 0.5) * tile, np.nan)
        out.dur[sl] = bestd
    return out


def _best_pulses(x, inv, s0, s1, b0, n, scale, robust, bestv, bestarg, bestd, offset,
                 gain=None):
    """The strongest pulse per pulse-start row s0..s1-1 over the tiles (columns) of x, whose row
    0 is buffer row b0; updates bestv / bestarg (tile index + offset) / bestd in place and returns
    the robust scale (set from the first tiles seen). With `gain`, each pulse's shot noise comes
    from its own baseline (the BASE frames each side: a tile whose level changed, after a stage
    jump say, is not judged by its old level); else from `inv` (1 / sd per tile)."""
    sums = {1: x}  # sums[q][r] = Σ x[r:r+q], by doubling (durations and BASE: powers of 2)
    for q in (2, 4, 8):
        sums[q] = sums[q // 2][: -(q // 2)] + sums[q // 2][q // 2:]
    base = sums[BASE]
    for d in DURATIONS:
        t0, t1 = max(s0, BASE), min(s1, n - BASE - d + 1)  # pulse start rows that fit
        j, k = t0 - b0, max(t1 - t0, 0)
        if k == 0:
            continue
        # in units of BASE-frame sums: pulse mean × BASE against the sums before and after
        p = sums[d][j: j + k] * np.float32(BASE / d)
        before, after = base[j - BASE: j - BASE + k], base[j + d: j + d + k]
        up = np.maximum(before, after)
        np.subtract(p, up, out=up)               # bright pulse: above both sides
        down = np.minimum(before, after)
        down -= p                                # dark pulse: below both sides
        if gain is not None:  # var of one frame's tile = gain × the baseline mean
            g = np.add(before, after)
            g *= np.float32(gain * (1.0 / d + 1.0 / BASE) * BASE / 2.0)  # (BASE × sd)²
            np.maximum(g, np.float32(1e-12), out=g)
            np.sqrt(g, out=g)
            np.reciprocal(g, out=g)
        else:
            g = (inv * (1.0 / (BASE * np.sqrt(1.0 / d + 1.0 / BASE)))).astype(np.float32)
        if robust and scale is None:  # robust scale of the pulse-entry z (1 for pure shot noise)
            sub = np.abs((p[::4] - before[::4]) * (g[::4] if g.ndim == 2 else g)).ravel()
            if np.count_nonzero(sub == 0) > 0.1 * sub.size:
                sub = sub[sub > 0]  # many exact zeros: held (blanked) frames
            scale = 1.0  # too few values for a stable median: trust the shot-noise model
            if sub.size >= MIN_SCALE_VALUES:
                scale = 1.4826 * float(np.partition(sub, sub.size // 2)[sub.size // 2]) or 1.0
        v = np.maximum(up, down, out=up)
        v *= g * np.float32(1.0 / (scale or 1.0))
        i = np.argmax(v, axis=1)
        val = v[np.arange(k), i]
        r = slice(t0 - s0, t0 - s0 + k)
        upd = val > bestv[r]
        bestv[r] = np.where(upd, val, bestv[r])
        bestarg[r] = np.where(upd, i + offset, bestarg[r])
        bestd[r] = np.where(upd, d, bestd[r])
    return scale


CALIBRATION_GRID = 32  # the null calibration runs on at most this many tiles a side
# _simulated_pulse_tests on the full calibration grid, computed once (fixed seed; checked against
# the simulation in tests/test_detect_sizes.py)
KNOWN_PULSE_TESTS = {(32, 32): 304.5219720778136}


def null_pulse_tests(gy: int, gx: int) -> float:
    """Effective number of independent tests per frame of the pulse maximum on a (gy, gx) tile
    grid: measured on a grid of at most CALIBRATION_GRID tiles a side and scaled by the number of
    tiles (one test per tile and duration), so its cost does not grow with the frame size."""
    cy, cx = min(gy, CALIBRATION_GRID), min(gx, CALIBRATION_GRID)
    k = KNOWN_PULSE_TESTS.get((cy, cx)) or _simulated_pulse_tests(cy, cx)
    return k * (gy * gx) / (cy * cx)


@lru_cache(maxsize=16)
def _simulated_pulse_tests(gy: int, gx: int) -> float:
    """Measured once on simulated white Gaussian noise (fixed seed) on a gy × gx grid."""
    rng = np.random.default_rng(54321)
    n = 2048
    x = (250.0 + np.sqrt(250.0) * rng.standard_normal((n, gy, gx))).astype(np.float32)
    ps = pulse_chunk(x, BASE, n - BASE - max(DURATIONS), 1, gain=1.0)
    return effective_tests(ps.pmax, 0.5)
