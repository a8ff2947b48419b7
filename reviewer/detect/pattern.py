"""Changes of pattern that keep the local mean: a lattice patch that turns, fringes that shift.

Tile sums cannot see them (the mean of a tile stays), so frames are also read at b×b-binned
resolution (b = 2, more for frames over PATTERN_PIXELS). With w-frame windows after (A) and before
(B) frame t, per bin p

    d_p = A_p − B_p,   S_p = A_p + B_p,   E[d_p² | S_p] = g·S_p under Poisson counts (gain g)

(given S_p = s, A_p is binomial(s, ½) when nothing changed: E[(2A − s)²] = s exactly), so every bin
adds a χ²₁-like term d_p²/(g·S_p). Per pattern tile T (CELL × CELL bins, from one bin in) the
part explained by the tile's own level change (d ∝ S: an island, the beam) is taken out,

    Q_T = Σ_T d²/S − (Σ_T d)² / Σ_T S   ~ g·χ²(CELL² − 1) when nothing changed,

and 2×2 tiles are pooled (χ² with 4·(CELL² − 1) degrees of freedom). Whole-field motion is modelled
before: a sub-pixel drift gives d ≈ −δ·∇S, a focus change d ∝ ∇²S, a beam change d ∝ S; the four
coefficients are fitted per frame by weighted least squares (weights 1/S) on every few rows,
and where they explain more than MODEL_CHI2 (a χ²(3) far in its tail) the fitted field is
subtracted from d before Q is formed. The gain is measured, not assumed: the median over frames of
the per-frame median tile Q, divided by the χ² median. Per frame the scan keeps the largest Q of
each box shape, where, and the median tile Q (a change over the whole field raises it); features()
turns them into a calibrated z (`pattern`) like the step statistic's score.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy import special

from reviewer.detect.reduce import bin_block
from reviewer.detect.statistics import calibrate_max, effective_tests

PATTERN_PIXELS = 1 << 20  # binned frame at most this many bins (bigger frames binned more)
CELL = 4  # bins per side of a pattern tile
DOF = (CELL * CELL - 1, 4 * (CELL * CELL - 1))  # single tiles, 2×2 tiles
SUB = 1 << 16  # bin-frames processed at a time (fits a core's cache: measured fastest at 128²)
RESYNC = 512  # window sums recomputed from the frames this often (float rounding stays bounded)
SAMPLE = 8  # the whole-field model is fitted on every SAMPLE-th row of bins (at most)
MEDIAN_TILES = 1024  # the per-frame median tile Q is taken over at most about this many tiles
MODEL_CHI2 = 30.0  # the model is subtracted where it explains more than this (χ²(3): p ≈ 1e-6)
WIDE = 2.0  # a frame whose median tile Q is this many times the null median changed everywhere
PATTERN_SHARE = 0.25  # share of the false-alarm budget for the pattern test (measured:
#                       bench_detect_lattice.py, bench_false_alarms.py --patterns)


def pattern_bin(shape: tuple[int, int]) -> int:
    """The binning b (2, 4, ...) that brings a frame to PATTERN_PIXELS bins or fewer."""
    h, w = shape
    b = 2
    while (h // b) * (w // b) > PATTERN_PIXELS:
        b *= 2
    return b


def chi2_median(dof: float) -> float:
    """Median of χ²(dof) (the regularised incomplete gamma function inverted at ½)."""
    return float(2.0 * special.gammaincinv(dof / 2.0, 0.5))


def log_sf(x: np.ndarray, dof: float) -> np.ndarray:
    """log P(χ²(dof) > x): exact (scipy.special.chdtrc) while it is above 1e-300; beyond, the
    asymptotic series of the upper incomplete gamma function, Γ(a, y) ≈ y^(a−1)·e^(−y)·(1 +
    (a−1)/y + (a−1)(a−2)/y²) with a = dof/2, y = x/2 (Abramowitz & Stegun 6.5.32), which does
    not underflow."""
    x = np.maximum(np.asarray(x, np.float64), 0.0)
    with np.errstate(divide="ignore"):
        exact = np.log(special.chdtrc(dof, x))
    a, y = dof / 2.0, np.maximum(x / 2.0, 1.0)
    far = (a - 1) * np.log(y) - y - special.gammaln(a) \
        + np.log1p((a - 1) / y + (a - 1) * (a - 2) / (y * y))
    return np.where(exact > np.log(1e-300), exact, far)


def tile_q(d: np.ndarray, s: np.ndarray, cell: int = CELL, origin: int = 0) -> np.ndarray:
    """Q per tile of cell × cell bins: Σ d²/s − (Σ d)²/Σ s, for (m, H, W) differences d and sums s
    (s > 0), tiles from bin (origin, origin) on; bins outside whole tiles are left out.
    (m, (H − origin) // cell, (W − origin) // cell) out."""
    m, hh, ww = d.shape
    gy, gx = (hh - origin) // cell, (ww - origin) // cell
    d = d[:, origin: origin + gy * cell, origin: origin + gx * cell]
    s = s[:, origin: origin + gy * cell, origin: origin + gx * cell]
    q = d * d
    q /= s

    st = bin_block(s, cell, gy, gx)
    level = bin_block(d, cell, gy, gx)
    level *= level
    level /= np.where(st > 0, st, np.float32(1))
    out = bin_block(q, cell, gy, gx)
    out -= level
    return out


def _sampled(s: np.ndarray, step: int) -> tuple[np.ndarray, tuple]:
    """The regressors S, ∂S/∂y, ∂S/∂x and ∇²S (central differences) on every step-th inner row
    of (m, H, W) window sums, inner columns only, as one (m, 4, rows, cols) array, and the index
    of those bins."""
    hh = s.shape[1]
    rows = slice(1, hh - 1, step)
    mid, up, down = s[:, rows], s[:, 0: hh - 2: step], s[:, 2::step]
    out = np.empty((len(s), 4, mid.shape[1], s.shape[2] - 2), np.float32)
    inner = (slice(None), slice(None), slice(1, -1))
    out[:, 0] = mid[inner]
    np.subtract(down[inner], up[inner], out=out[:, 1])
    np.subtract(mid[:, :, 2:], mid[:, :, :-2], out=out[:, 2])
    lap = out[:, 3]
    np.add(down[inner], up[inner], out=lap)
    lap -= 4 * out[:, 0]
    lap += mid[:, :, 2:]
    lap += mid[:, :, :-2]
    return out, (slice(None), rows, slice(1, -1))


def field_model(d: np.ndarray, s: np.ndarray, step: int) -> tuple[np.ndarray, np.ndarray]:
    """Per frame of (m, H, W) d and s (s > 0): the coefficients (m, 4) of the whole-field model
    d ≈ β₀·S + β₁·∂S/∂y + β₂·∂S/∂x + β₃·∇²S (weights 1/S, fitted on every step-th row), and the
    energy the motion part (β₁..β₃) explains beyond the level, in units of g (≈ χ²(3) when
    nothing moved)."""
    m = len(d)
    if s.shape[1] < 3 or s.shape[2] < 3:
        return np.zeros((m, 4)), np.zeros(m)
    reg, at = _sampled(s, step)
    reg = reg.reshape(m, 4, -1)
    weighted = reg / reg[:, :1]  # G_k / S
    gram = np.einsum("nkp,nlp->nkl", weighted, reg).astype(np.float64)
    rhs = np.einsum("nkp,np->nk", weighted, d[at].reshape(m, -1)).astype(np.float64)
    k = reg.shape[1]
    gram += np.eye(k)[None] * 1e-9 * np.trace(gram, axis1=1, axis2=2)[:, None, None]
    beta = np.linalg.solve(gram, rhs[..., None])[..., 0]
    level = rhs[:, 0] ** 2 / np.maximum(gram[:, 0, 0], 1e-30)
    return beta, np.einsum("nk,nk->n", beta, rhs) - level


def remove_field(d: np.ndarray, s: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """d minus the fitted motion part of the whole-field model (field_model's β₁..β₃; the level
    part β₀·S changes no tile's Q), in place, on the inner bins (the edge bins only serve as
    neighbours: the pattern tiles start one bin in). The differences of _sampled written as
    shifted views of S."""
    b1, b2, b3 = (beta[:, k].astype(np.float32)[:, None, None] for k in (1, 2, 3))
    inner = d[:, 1:-1, 1:-1]
    for c, view in ((b1 + b3, s[:, 2:, 1:-1]), (b3 - b1, s[:, :-2, 1:-1]),
                    (b2 + b3, s[:, 1:-1, 2:]), (b3 - b2, s[:, 1:-1, :-2]),
                    (-4 * b3, s[:, 1:-1, 1:-1])):
        inner -= c * view
    return d


class PatternTrack:
    """Per-frame pattern features from frames pushed in order (push bins and returns them, so the
    caller can make its tile sums from the bins). Frame t is scored once frames t − w .. t + w have
    come; the first w and last w + 1 frames keep Q = 0."""

    def __init__(self, n: int, shape: tuple[int, int], window: int,
                 alloc: Callable[[str, object, object], np.ndarray]) -> None:
        self.n, self.w = n, max(1, int(window))
        self.b = pattern_bin(shape)
        self.hh, self.ww = shape[0] // self.b, shape[1] // self.b
        # pattern tiles from bin (1, 1) on: every bin in a tile has its four neighbours, so the
        # whole-field model's differences are central everywhere they are used
        self.gy, self.gx = max(self.hh - 2, 0) // CELL, max(self.ww - 2, 0) // CELL
        bins = max(self.hh * self.ww, 1)  # outputs per sub-block: 4 or more up to 512² bins
        self.per = max(SUB // bins, 4 if bins <= 1 << 18 else 1)
        self.step = int(np.clip(self.hh // 8, 2, SAMPLE))  # rows: at least ~8 in the fit
        self.spread = max(1, self.gy * self.gx // MEDIAN_TILES)
        # the ring of binned frames: room for 4 sub-blocks, so few reads wrap round (a wrapped
        # read is a copy); one frame at a time needs no more than the windows
        self.cap = 2 * self.w + (4 * self.per if self.per > 1 else 1)
        self.ring = np.zeros((self.cap, self.hh, self.ww), np.float32)
        self.seen = 0  # frames pushed
        self.next = self.w  # next frame to score
        self.dsum: np.ndarray | None = None  # D and S of frame `next` (window sums)
        self.ssum: np.ndarray | None = None
        self.since = 0
        self.qmax = alloc("qmax", (n, len(DOF)), np.float32)
        self.qarg = alloc("qarg", (n, len(DOF)), np.int32)
        self.qmed = alloc("qmed", n, np.float32)
        self.model = alloc("qmodel", n, np.float32)  # energy of the whole-field model (units of g)

    def bin(self, block: np.ndarray) -> np.ndarray:
        return bin_block(block, self.b, self.hh, self.ww)

    def push(self, block: np.ndarray, finite: np.ndarray | None = None) -> np.ndarray:
        """Take the next raw frames (non-finite pixels already set to 0, `finite` their mask when
        there were any); returns their bins. A bin with a non-finite pixel holds the mean of the
        w frames before in the ring (a hole in the data is no change of pattern; one frame held
        would carry its noise into w frames of a window)."""
        bins = self.bin(block)
        if not (self.gy and self.gx):  # frames smaller than one pattern tile: nothing to score
            return bins
        holes = None if finite is None else self.bin(~finite) > 0
        for i, frame in enumerate(bins):  # the ring holds the last cap frames: score first
            if holes is not None and holes[i].any() and self.seen:
                k = min(self.w, self.seen)
                held = self._rows(self.seen - k, k).mean(axis=0)
                frame = np.where(holes[i], held, frame)
            self.ring[self.seen % self.cap] = frame
            self.seen += 1
            if self.seen - self.next - self.w >= self.per:
                self._score(self.per)
        return bins

    def flush(self) -> None:
        """Score what the last frames allow (after the last push)."""
        while self.gy and self.gx and self.seen - self.next - self.w >= 1:
            self._score(min(self.per, self.seen - self.next - self.w))

    def _rows(self, first: int, count: int) -> np.ndarray:
        i = first % self.cap
        if i + count <= self.cap:
            return self.ring[i: i + count]
        return self.ring[(first + np.arange(count)) % self.cap]

    def _resync(self) -> None:
        t, w = self.next, self.w
        after = self._rows(t, w).sum(axis=0, dtype=np.float64)
        before = self._rows(t - w, w).sum(axis=0, dtype=np.float64)
        self.dsum = (after - before).astype(np.float32)
        self.ssum = (after + before).astype(np.float32)
        self.since = 0

    def _score(self, m: int) -> None:
        """Score frames next .. next + m − 1 (frames up to next + m + w − 1 are in the ring)."""
        t0, w = self.next, self.w
        if self.dsum is None or self.since >= RESYNC:
            self._resync()
        new, mid, old = self._rows(t0 + w, m), self._rows(t0, m), self._rows(t0 - w, m)
        inc_s = new - old
        inc_d = new + old
        inc_d -= mid
        inc_d -= mid  # x(t + w) − 2·x(t) + x(t − w): D(t + 1) − D(t)
        d = np.empty((m, self.hh, self.ww), np.float32)
        s = np.empty_like(d)
        d[0], s[0] = self.dsum, self.ssum
        for j in range(1, m):  # a running sum (cumsum along frames is slower in numpy)
            np.add(d[j - 1], inc_d[j - 1], out=d[j])
            np.add(s[j - 1], inc_s[j - 1], out=s[j])
        self.dsum = d[-1] + inc_d[-1]
        self.ssum = s[-1] + inc_s[-1]
        self.since += m
        # bins with no counts (or offset data): the variance of a typical bin
        floor = np.maximum(0.05 * s.reshape(m, -1).mean(axis=1), 1e-6).astype(np.float32)
        np.maximum(s, floor[:, None, None], out=s)
        beta, explained = field_model(d, s, self.step)
        moved = explained > MODEL_CHI2
        if moved.any():
            d[moved] = remove_field(d[moved], s[moved], beta[moved])
        q = tile_q(d, s, origin=1)
        sl = slice(t0, t0 + m)
        self.model[sl] = explained
        self.qmed[sl] = np.median(q.reshape(m, -1)[:, :: self.spread], axis=1)
        boxes = [q]
        if self.gy >= 2 and self.gx >= 2:
            boxes.append(q[:, 1:, 1:] + q[:, :-1, 1:] + q[:, 1:, :-1] + q[:, :-1, :-1])
        for k, box in enumerate(boxes):
            flat = box.reshape(m, -1)
            i = np.argmax(flat, axis=1)
            self.qmax[sl, k] = flat[np.arange(m), i]
            self.qarg[sl, k] = i
        self.next += m

    def features(self, alloc, scalar) -> dict[str, np.ndarray]:
        """The calibrated pattern score (a two-sided z like `score`) and its place (px) per frame,
        the measured gain and the effective number of tests."""
        n, w = self.n, self.w
        valid = np.zeros(n, bool)
        valid[w: min(self.next, n)] = True
        med = self.qmed[valid]
        gain = float(np.median(med)) / chi2_median(DOF[0]) if len(med) else 1.0
        gain = gain if gain > 0 else 1.0
        out = {name: alloc(name, n, np.float32) for name in ("pattern", "qx", "qy")}
        out["qx"][:], out["qy"][:] = np.nan, np.nan
        single = np.zeros(n)  # the best single-test z (two-sided, as the step statistic's)
        best = np.zeros(n, np.int64)
        for k, dof in enumerate(DOF[: self.qmax.shape[1] if self.gy >= 2 and self.gx >= 2
                                    else 1]):
            z = -special.ndtri_exp(log_sf(self.qmax[:, k] / gain, dof) - np.log(2.0))
            better = z > single
            single[better], best[better] = z[better], k
        single[~valid] = 0.0
        k_eff = effective_tests(single[valid]) if valid.any() else 1.0
        out["pattern"][:] = np.where(valid, calibrate_max(single, k_eff), 0.0)
        cell = CELL * self.b
        for k in range(self.qmax.shape[1]):
            at = valid & (best == k)
            cols = self.gx - k  # a 2×2 box grid is one column narrower
            r, c = np.divmod(self.qarg[at, k].astype(np.int64), max(cols, 1))
            out["qx"][at] = (c + 0.5 * (k + 1)) * cell + self.b  # (tiles start one bin in)
            out["qy"][at] = (r + 0.5 * (k + 1)) * cell + self.b
        out["qwide"] = alloc("qwide", n, np.float32)
        out["qwide"][:] = np.where(valid, self.qmed / (gain * chi2_median(DOF[0])), 0.0)
        out["q_gain"] = scalar("q_gain", gain)
        out["k_pattern"] = scalar("k_pattern", k_eff)
        out["q_window"] = scalar("q_window", float(w))
        return out


def pattern_events(f: dict[str, np.ndarray], z_thr: float, blocked: np.ndarray,
                   found: list[dict], separation: int, near: float) -> list[dict]:
    """Local `step` candidates where the pattern score exceeds z_thr: one per ±(w + separation)
    frames, on frames not blocked by a whole-field disturbance and not changed all over
    (qwide ≥ WIDE), and none where a candidate of the other statistics starts at the same place
    within that reach, unless those are weaker steps: they are then this change seen less
    sharply (marked `echo`, dropped), and its frame is the pattern test's."""
    if "pattern" not in f:
        return []
    pz, qx, qy = f["pattern"], f["qx"], f["qy"]
    n = len(pz)
    reach = int(f["q_window"]) + separation if "q_window" in f else 8 + separation
    ok = (pz > z_thr) & np.isfinite(qx) & ~blocked.reshape(n, -1).any(axis=1)
    ok &= f["qwide"] < WIDE
    idx = np.flatnonzero(ok)
    kept: list[int] = []
    for t in idx[np.argsort(-pz[idx], kind="stable")]:
        if all(abs(int(t) - k) > reach for k in kept):
            kept.append(int(t))
    out = []
    for t in sorted(kept):
        cover = [e for e in found if e["kind"] != "echo" and abs(e["frame"] - t) <= reach
                 and np.hypot(e["x"] - qx[t], e["y"] - qy[t]) <= near]
        if any(e["kind"] != "step" or e["score"] >= pz[t] for e in cover):
            continue
        for e in cover:
            e["kind"] = "echo"
        out.append(dict(frame=t, frame_end=None, kind="step", score=float(pz[t]),
                        x=float(qx[t]), y=float(qy[t])))
    return out
