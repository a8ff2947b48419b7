"""Location of the frames that may become candidates: the strongest pooled box of the window that
peaks there gives a position, a sign and an onset frame; long-window-only peaks must look like a
step and not like a drifting edge (else that window's series is zeroed over the peak's plateau)."""

from __future__ import annotations

import numpy as np

from reviewer.detect.reduce import SHAPES, best_boxes, centroid
from reviewer.detect.statistics import raw_level

TREND_MIN_W = 8  # shorter windows skip the trend check (a trend adds ∝ w^1.5 to z)
TREND_Z = 3.0  # a box drifts when a w-block difference beside the split exceeds this many sd
STEP_LIKE_SD = 1.5  # long-window-only detections must be this close to a step's short-window echo
LOCATE_Z = 2.5  # frames whose calibrated z exceeds this get a location (cheap: only those frames)


def _peaks(per_window: np.ndarray, level: float) -> np.ndarray:
    """Per frame, the window whose series has its strongest local peak above level there (−1)."""
    m = len(per_window)
    loc_z = np.zeros(m, np.float32)
    loc_k = np.full(m, -1, np.int64)
    for k in range(per_window.shape[1]):
        pw = per_window[:, k]
        peak = pw > np.maximum(level, loc_z)
        peak[1:] &= pw[1:] >= pw[:-1]
        peak[:-1] &= pw[:-1] >= pw[1:]
        loc_z[peak], loc_k[peak] = pw[peak], k
    return loc_k


def locate(xn, lo, per_window, best_window, maps, windows, tile, k_eff):
    """(sign, x, y, shift) per frame of the chunk; updates per_window (trend peaks zeroed) and
    best_window (the window that located the frame) in place."""
    m = len(per_window)
    sign = np.zeros(m, np.int8)
    shift = np.zeros(m, np.int16)
    x = np.full(m, np.nan, np.float32)
    y = np.full(m, np.nan, np.float32)
    level = raw_level(LOCATE_Z, k_eff)
    loc_k = _peaks(per_window, level)
    idx = np.flatnonzero(loc_k >= 0)
    if len(idx):
        best_window[idx] = loc_k[idx]
        z = np.stack([maps[loc_k[i]][0][i // maps[loc_k[i]][1]] for i in idx])
        shp, rr, cc, vv = best_boxes(z)
        sign[idx] = np.where(vv > 0, 1, -1)
        for j, i in enumerate(idx):
            sh, r, c, v = int(shp[j]), int(rr[j]), int(cc[j]), float(vv[j])
            x[i], y[i] = centroid(z[j], sh, r, c, v, tile)
            k = int(loc_k[i])
            shift[i] = onset_shift(xn, lo + i, SHAPES[sh], r, c, 1 if v > 0 else -1, windows[k])
            if k == len(windows) - 1 and k > 0 and windows[k] >= TREND_MIN_W:
                zs, st = maps[k - 1]
                near = [box_value(zs[q], sh, r, c)
                        for q in range(max(i - 2, 0) // st, min(i + 2, m - 1) // st + 1)]
                if (not step_like(v, near, windows[k - 1], windows[k])
                        and trending(xn, lo + i, SHAPES[sh], r, c, v, windows[k])):
                    # a trend's signature, not a step's: zero the peak and the frames of its
                    # plateau (±w/2, not above it), else a neighbour becomes the next peak
                    h = windows[k] // 2
                    seg = per_window[max(i - h, 0): i + h + 1, k]
                    seg[seg <= per_window[i, k]] = 0.0
    return sign, x, y, shift


def box_value(z: np.ndarray, shape_index: int, r: int, c: int) -> float:
    """The pooled (normalised) value of one box of a tile z map (gy, gx)."""
    h, w = SHAPES[shape_index]
    return float(z[r: r + h, c: c + w].sum()) / np.sqrt(h * w)


def step_like(z_long: float, z_short: list[float], w_short: int, w_long: int) -> bool:
    """Whether a long window's step z on one box is backed by the next shorter window on the same
    box as a step would be. For a step, both windows straddle the same split: z_short given z_long
    is normal with mean ρ·z_long and variance 1 − ρ², ρ = √(w_short / w_long). A slow trend gives
    z ∝ w^1.5 instead, far less at the shorter window. The best of the few frames around the peak
    is used (a weak step's peak may sit a frame or two off); fails when it lies more than
    STEP_LIKE_SD sd below the step's expectation."""
    rho = np.sqrt(w_short / w_long)
    best = max((np.sign(z_long) * v for v in z_short), default=0.0)
    return best - rho * abs(z_long) >= -STEP_LIKE_SD * np.sqrt(1.0 - rho * rho)


def trending(xn: np.ndarray, row: int, shape: tuple[int, int], r: int, c: int, z: float,
             w: int) -> bool:
    """Whether one box's summed tiles drift on either side of a long-window step: with blocks of w
    frames P2 P1 | N1 N2 around the split, P1 − P2 or N2 − N1 (free of the step itself) exceeds
    TREND_Z times the sd of a w-block difference (taken from the box's own step z). Unknown (near
    the movie's ends) counts as trending."""
    a, b = row - 2 * w, row + 2 * w
    if a < 0 or b > len(xn):
        return True
    ser = xn[a:b, r: r + shape[0], c: c + shape[1]].reshape(4, w, -1).sum(axis=(1, 2),
                                                                         dtype=np.float64) / w
    p2, p1, n1, n2 = ser
    plain = n1 - p1
    if plain * z <= 0:
        return True
    sd = abs(plain / z)  # sd of a difference of two w-frame means, from the box's own z
    return max(abs(p1 - p2), abs(n2 - n1)) > TREND_Z * sd


def onset_shift(xn: np.ndarray, row: int, shape: tuple[int, int], r: int, c: int, sign: int,
                w: int) -> int:
    """Maximum-likelihood frame of a single mean change of the given sign in the summed tiles of
    one box, searched over rows row − w .. row + w (Gaussian, equal variances: the split k of N
    samples maximising k(N − k)/N · (mean after − mean before)²); returned relative to row."""
    a, b = max(row - w, 0), min(row + w + 1, len(xn))
    if b - a < 2:
        return 0
    ser = xn[a:b, r: r + shape[0], c: c + shape[1]].reshape(b - a, -1).sum(axis=1,
                                                                          dtype=np.float64)
    n = len(ser)
    cum = np.cumsum(ser)
    k = np.arange(1, n)
    diff = (cum[-1] - cum[:-1]) / (n - k) - cum[:-1] / k
    stat = k * (n - k) / n * diff * diff
    stat[sign * diff <= 0] = -1.0
    return int(a + 1 + int(np.argmax(stat)) - row)
