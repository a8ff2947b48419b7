"""The one sequential pass: read the movie in blocks, reduce each frame to tile sums at once, score
frames a chunk at a time with bounded memory, and keep compact per-frame features."""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from reviewer.detect.drift import phase_shift
from reviewer.detect.reduce import bin_block, tiles_from_bins
from reviewer.detect.scoring import score_chunk
from reviewer.detect.settings import DetectSettings
from reviewer.detect.statistics import (
    calibrate_max,
    robust_sigma,
    step_statistic,
    step_weight,
)
from reviewer.errors import BadInput


class ScanCancelled(Exception):
    """The scan was stopped by its cancel event; nothing was saved."""


@dataclass
class ScanResult:
    features: dict[str, np.ndarray]   # per-frame arrays, "score" first
    candidates: pd.DataFrame           # frame, frame_end, time_s, kind, score, x, y (by frame)
    settings: dict                     # DetectSettings.to_dict()
    meta: dict = field(default_factory=dict)  # frames, shape, tile, k_eff, seconds, ...


def _geometry(shape: tuple[int, int], tile: int, path: str) -> tuple[int, int, int]:
    h, w = shape
    tile = max(2, min(tile, min(h, w) // 2) // 2 * 2)
    if h < 4 or w < 4:
        raise BadInput(f"{path}: frames of {h}x{w} px are too small to scan (need at least 4x4)")
    return tile, h // tile, w // tile


class _Scanner:
    """Carried state between blocks: the last 4·max(w) frames of tile sums and bins, level reference."""

    def __init__(self, n: int, shape: tuple[int, int], s: DetectSettings, path: str) -> None:
        self.s = s
        self.n = n
        self.tile, self.gy, self.gx = _geometry(shape, s.tile, path)
        self.ctx = (1 + s.outer) * max(s.windows)
        self.xn = np.empty((0, self.gy, self.gx), np.float32)
        self.bins = np.empty((0, 2 * self.gy, 2 * self.gx), np.float32)
        self.base = 0          # absolute index of buffer row 0
        self.scored = 0        # frames scored so far
        self.recent: deque[float] = deque(maxlen=64)
        self.ref0 = 0.0
        self.last_good: np.ndarray | None = None
        self.tile_ref: np.ndarray | None = None
        self.pending: list[tuple[np.ndarray, np.ndarray]] = []
        self.n_pending = 0
        self.k_medians: list[float] = []
        self.prev_mean: np.ndarray | None = None
        self.drift = np.zeros(2)
        f32 = np.float32
        self.f = {name: np.zeros(n, f32) for name in ("smax", "x", "y", "frac", "level", "jump",
                                                      "drift_y", "drift_x")}
        self.f["x"][:] = np.nan
        self.f["y"][:] = np.nan
        self.f["zw"] = np.zeros((n, len(s.windows)), f32)
        self.f["best_window"] = np.zeros(n, np.int8)
        self.f["sign"] = np.zeros(n, np.int8)
        self.f["blank"] = np.zeros(n, np.uint8)

    def feed(self, start: int, block: np.ndarray) -> None:
        bins = bin_block(block, self.tile // 2, 2 * self.gy, 2 * self.gx)
        tiles = tiles_from_bins(bins)
        if self.tile_ref is None:
            self.tile_ref = np.maximum(np.median(tiles, axis=0), 1e-6)
        # beam level: median over tiles of the ratio to a reference image (a local change, even a
        # large one, moves the median little; a beam change moves every tile)
        level = np.median((tiles / self.tile_ref).reshape(len(tiles), -1), axis=1)
        if not self.recent:
            self.recent.extend(np.sort(level)[len(level) // 4: 3 * len(level) // 4 + 1])
            self.ref0 = float(np.median(self.recent)) or 1.0
        ref = float(np.median(self.recent)) or self.ref0
        good = (np.abs(level / ref - 1.0) <= self.s.blank_level) & (level != 0)
        scale = np.where(good, self.ref0 / np.where(level != 0, level, 1.0), 1.0)
        xn = tiles * scale.astype(np.float32)[:, None, None]
        for i in np.flatnonzero(~good):  # blanked frames: hold the last good frame
            self.f["blank"][start + i] = 1
            prev = xn[i - 1] if i > 0 else self.last_good
            if prev is not None:
                xn[i] = prev
        self.last_good = xn[-1].copy()
        self.recent.extend(level[good][::4].tolist())
        self.f["level"][start: start + len(level)] = level / self.ref0
        self.pending.append((xn, bins))
        self.n_pending += len(xn)
        end = self.base + len(self.xn) + self.n_pending
        if end - self.scored >= self.s.chunk + self.ctx:
            self._gather()
            self._score(end - self.ctx)

    def _gather(self) -> None:
        """Append the pending blocks to the buffers (once per chunk, not once per block)."""
        if self.pending:
            self.xn = np.concatenate([self.xn] + [p[0] for p in self.pending])
            self.bins = np.concatenate([self.bins] + [p[1] for p in self.pending])
            self.pending, self.n_pending = [], 0

    def finish(self) -> None:
        self._gather()
        end = self.base + len(self.xn)
        if end > self.scored:
            self._score(end)

    def _score(self, upto: int) -> None:
        lo, hi = self.scored - self.base, upto - self.base
        w0 = self.s.windows[0]
        cs = score_chunk(self.xn, lo, hi, self.s.windows, self.tile, self.s.outer)
        sl = slice(self.scored, upto)
        f = self.f
        f["smax"][sl], f["zw"][sl], f["best_window"][sl] = cs.smax, cs.per_window, cs.best_window
        f["sign"][sl], f["x"][sl], f["y"][sl], f["frac"][sl] = cs.sign, cs.x, cs.y, cs.frac
        if hi - lo >= 32:
            self.k_medians.append(cs.k_eff)
        # whole-field shift where many tiles changed at once (stage jump test)
        half = 0.5 * self.s.global_fraction
        for j in np.flatnonzero(cs.frac >= half):
            r = lo + j
            if r - w0 < 0 or r + w0 > len(self.bins):
                continue
            dy, dx, _ = phase_shift(self.bins[r - w0: r].mean(0), self.bins[r: r + w0].mean(0),
                                    upsample=10)
            f["jump"][self.scored + j] = np.hypot(dy, dx) * (self.tile // 2)
        # slow drift: shift of this chunk's mean image against the previous chunk's
        self.tile_ref = np.maximum(self.xn[lo:hi].mean(axis=0) / self.ref0, 1e-6)
        mean = self.bins[lo:hi].mean(axis=0)
        if self.prev_mean is not None:
            dy, dx, _ = phase_shift(self.prev_mean, mean, upsample=20)
            self.drift += np.array([dy, dx]) * (self.tile // 2)
        self.prev_mean = mean
        f["drift_y"][sl], f["drift_x"][sl] = self.drift
        self.scored = upto
        keep = max(0, len(self.xn) - 2 * self.ctx)
        self.xn, self.bins = self.xn[keep:].copy(), self.bins[keep:].copy()
        self.base += keep

    def features(self) -> tuple[dict[str, np.ndarray], dict]:
        f = self.f
        k_eff = float(np.median(self.k_medians)) if self.k_medians else 1.0
        f["score"] = calibrate_max(f["smax"], k_eff).astype(np.float32)
        f["k_eff"] = np.array(k_eff)
        w0 = self.s.windows[0]
        lev = np.log(np.clip(np.where(f["blank"] == 1, np.nan, f["level"]), 1e-6, None))
        lev = pd.Series(lev).ffill().bfill().to_numpy() if np.isnan(lev).any() else lev
        lev = np.nan_to_num(lev, nan=0.0)
        t = np.nan_to_num(step_statistic(lev, w0, self.s.outer))
        sd = robust_sigma(np.diff(lev)) / np.sqrt(2.0) if len(lev) > 2 else 0.0
        c, factor = step_weight(w0, self.s.outer)
        f["gstep"] = (np.exp(t / (1.0 - c)) - 1.0).astype(np.float32)
        f["gz"] = (t / max(sd * factor, 1e-9)).astype(np.float32)
        order = ["score"] + [k for k in f if k != "score"]
        meta = {"frames": self.n, "tile": self.tile, "grid": [self.gy, self.gx], "k_eff": k_eff,
                "ref_level": self.ref0}
        return {k: f[k] for k in order}, meta


def compute_features(movie, settings: DetectSettings | None = None,
                     progress: Callable[[int], None] | None = None,
                     cancel=None) -> tuple[dict[str, np.ndarray], dict]:
    """Read `movie` once, in order, and return (features, meta)."""
    s = settings or DetectSettings()
    if movie.n_frames < 1:
        raise BadInput(f"{movie.path}: the movie has no frames")
    t0 = time.perf_counter()
    sc = _Scanner(movie.n_frames, tuple(movie.shape), s, str(movie.path))
    for start, block in movie.iter_blocks(s.read_block):
        if cancel is not None and cancel.is_set():
            raise ScanCancelled("scan cancelled")
        sc.feed(start, np.asarray(block))
        if progress is not None:
            progress(start + len(block))
    sc.finish()
    features, meta = sc.features()
    meta.update(shape=list(movie.shape), seconds=round(time.perf_counter() - t0, 3),
                fingerprint=getattr(movie, "fingerprint", ""))
    return features, meta
