"""The one sequential pass: read the movie in blocks, reduce each frame to tile sums at once, score
frames a chunk at a time with bounded memory, and keep compact per-frame features."""

from __future__ import annotations

import shutil
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from reviewer.detect import fronts as fr
from reviewer.detect.drift import (
    change_beyond,
    explained_shift,
    level_factors,
    phase_shift,
)
from reviewer.detect.pattern import PatternTrack
from reviewer.detect.pulse import null_pulse_tests, pulse_chunk
from reviewer.detect.readahead import piece_frames, read_ahead
from reviewer.detect.reduce import Scratch, bin_block
from reviewer.detect.scoring import noise_gain, noise_sd, score_bands
from reviewer.detect.settings import DetectSettings
from reviewer.detect.statistics import (
    calibrate_max,
    raw_level,
    robust_sigma,
    step_statistic,
    step_weight,
)
from reviewer.errors import BadInput

DRIFT_EVERY = 2048  # frames per drift estimate
NEW_FEATURES = "features.new"  # subfolder of a scan folder where a running scan writes features
JUMP_Z = 4.0  # frames whose calibrated score peaks above this get a whole-field shift estimate
JUMP_CHECKS = 8  # at most this many per chunk, strongest first
JUMP_EXPLAINED = 0.5  # the shift must explain this share of the change to count as a stage jump
HOLD = 24  # a blanked frame is replaced by the mean of this many frames before it


class ScanCancelled(Exception):
    """The scan was stopped by its cancel event; nothing was saved."""


@dataclass
class ScanResult:
    features: dict[str, np.ndarray]   # per-frame arrays, "score" first
    candidates: pd.DataFrame           # CANDIDATE_COLUMNS (by frame)
    settings: dict                     # DetectSettings.to_dict()
    meta: dict = field(default_factory=dict)  # frames, shape, tile, k_eff, seconds, ...


def _geometry(shape: tuple[int, int], tile: int, path: str) -> tuple[int, int, int]:
    h, w = shape
    tile = max(2, min(tile, min(h, w) // 2) // 2 * 2)
    if h < 4 or w < 4:
        raise BadInput(f"{path}: frames of {h}x{w} px are too small to scan (need at least 4x4)")
    return tile, h // tile, w // tile


class _Scanner:
    """Carried state between blocks: a preallocated buffer of normalised tile sums (the frames being
    scored plus `ctx` frames of context each side), the beam-level reference, the noise gain."""

    def __init__(self, n: int, shape: tuple[int, int], s: DetectSettings, path: str,
                 block_rows: int = 64, workdir: Path | None = None) -> None:
        self.s = s
        self.workdir = workdir
        self.n = n
        self.tile, self.gy, self.gx = _geometry(shape, s.tile, path)
        # context rows kept each side of the frames being scored: the windows' reach, and more
        # than the drift check's 2·w (locate.trending); just that for camera-size grids, where
        # every row of context is megabytes
        big = self.gy * self.gx > LARGE_GRID
        self.ctx = max(1 + s.outer, 2 if big else 3) * max(s.windows) + (2 if big else 0)
        # frames scored at a time: fewer for large grids, so the buffer stays bounded
        self.chunk = min(s.chunk, max(64, CHUNK_CELLS // (self.gy * self.gx)))
        cap = self.chunk + 2 * self.ctx + min(s.read_block, block_rows)
        self.buf = np.empty((cap, self.gy, self.gx), np.float32)
        # dim fronts (fronts.py): edge-weighted tile values under two templates, rows like buf's
        self.front_b = fr.front_bin(tuple(shape), self.tile) if s.fronts else None
        reach = max(1 + s.outer, 2) * max(s.windows)
        self.fronts = fr.FrontDelay(self.gy, self.gx, self.tile, self.front_b, reach) \
            if self.front_b and reach <= self.ctx else None
        self.fbuf = np.empty((cap, 2, self.gy, self.gx), np.float32) if self.fronts else None
        # pattern changes (pattern.py): binned frames, its own per-frame features
        self.pattern = PatternTrack(n, tuple(shape), s.pattern_window, self._alloc) \
            if s.patterns else None
        self.fill = 0          # rows of buf in use
        self.base = 0          # absolute index of buffer row 0
        self.origin = 0        # the movie's frame number of row 0 (a split part's: its first row)
        self.scored = 0        # frames scored so far
        self.recent = np.zeros(64)
        self.n_recent = 0
        self.ref0 = 0.0
        self.ref_total = 0.0
        self.gain: float | None = None
        self.scratch = Scratch()
        self.read_scratch = Scratch()  # reduce()'s, in the reader thread
        self.k_medians: list[float] = []
        self.prev_mean: np.ndarray | None = None
        self.drift = np.zeros(2)
        self.mean_sum = np.zeros((self.gy, self.gx))
        self.mean_rows = 0
        self.normed = 0        # absolute index of the first row not yet normalised
        self.head_blank: list[int] = []  # blanked frames before the first good one
        self.seen_good = False
        self.nonfinite = 0     # non-finite pixels masked
        self.nonfinite_frames = 0
        self.last_tiles: np.ndarray | None = None
        f32 = np.float32
        self.f = {name: self._alloc(name, n, f32) for name in (
            "smax", "x", "y", "frac", "level", "jump", "drift_y", "drift_x")}
        self.f["x"][:] = np.nan
        self.f["y"][:] = np.nan
        self.f["zw"] = self._alloc("zw", (n, len(s.windows)), f32)
        self.f["best_window"] = self._alloc("best_window", n, np.int8)
        self.f["sign"] = self._alloc("sign", n, np.int8)
        self.f["shift"] = self._alloc("shift", n, np.int16)  # onset − frame where located
        self.f["blank"] = self._alloc("blank", n, np.uint8)
        self.f["common"] = self._alloc("common", n, f32)  # explained_factor at level jumps
        self.f["common"][:] = np.nan
        self.f["beyond"] = self._alloc("beyond", n, f32)  # change_beyond where a jump was judged
        self.f["beyond"][:] = np.nan
        for name in ("pmax", "px", "py"):  # short-pulse statistic (pulse.py), best tile
            self.f[name] = self._alloc(name, n, f32)
        self.f["pdur"] = self._alloc("pdur", n, np.int8)

    def _alloc(self, name: str, shape, dtype) -> np.ndarray:
        """A zeroed per-frame array: in RAM, or a memory-mapped .npy file in workdir (the features
        go to disk as they are made, so memory does not grow with the number of frames)."""
        if self.workdir is None:
            return np.zeros(shape, dtype)
        return np.lib.format.open_memmap(self.workdir / f"{name}.npy", mode="w+", dtype=dtype,
                                         shape=shape if isinstance(shape, tuple) else (shape,))

    def reduce(self, block: np.ndarray):
        """Raw frames -> tile sums (non-finite pixels masked); the one pass over every pixel.
        With the front statistic on: the finished epochs' (start, tiles, front values) (blocks
        must then come in order)."""
        masked = block.dtype.kind in "fc" and not np.isfinite(block).all()
        finite = None
        if masked:
            tiles = self._masked(block)
            finite = np.isfinite(block)
            block = np.where(finite, block, 0)
        pt = self.pattern
        bins = pt.push(block, finite) if pt is not None else None
        if not masked:  # (else the masked sums above)
            if bins is not None and self.fronts is None and self.tile % pt.b == 0:
                tiles = bin_block(bins, self.tile // pt.b, self.gy, self.gx)  # sums of those bins
            elif self.fronts is None or self.front_b == 1:
                tiles = bin_block(block, self.tile, self.gy, self.gx)
        if self.fronts is None:
            return tiles
        b = self.front_b
        if b == 1:
            images = block  # copied by the front delay
        else:  # binned once (into the reader's reused buffers); tile sums: sums of those bins
            images = fr.front_images(block, b, self.read_scratch)
            if not masked:
                tiles = bin_block(images, self.tile // b, self.gy, self.gx)
        # the epochs' templates and projections run here, in the reader thread (reduce is
        # called in order), beside the scoring of earlier rows
        return self.fronts.push(tiles, images)

    def feed(self, start: int, tiles) -> None:
        """Take the next frames' reduce() output; scores a chunk when enough have come (with
        the front statistic, rows arrive an epoch at a time)."""
        if self.fronts is None:
            self._feed_rows(start, tiles, None)
            return
        self._feed_epochs(tiles)

    def _feed_epochs(self, epochs: list[tuple]) -> None:
        """The front delay's finished epochs (numbered in movie frames), rows before this
        scanner's first (origin: a split part's warm-up epochs) left out."""
        for s0, t, front in epochs:
            r = s0 - self.origin
            if r + len(t) <= 0:
                continue
            if r < 0:
                t, front, r = t[-r:], front[-r:], 0
            self._feed_rows(r, t, front)

    def _aligned(self, upto: int) -> int:
        """With fronts, chunks end on a template boundary where they can (whole segments)."""
        fd = self.fronts
        if fd is None:
            return upto
        return fd.aligned(upto + self.origin, self.scored + self.origin) - self.origin

    def _feed_rows(self, start: int, tiles: np.ndarray, front: np.ndarray | None) -> None:
        k = len(tiles)
        if self.fill + k > len(self.buf):
            self.buf = np.concatenate([self.buf, np.empty_like(self.buf[: k])])
            if self.fbuf is not None:
                self.fbuf = np.concatenate([self.fbuf, np.empty_like(self.fbuf[: k])])
        xn = self.buf[self.fill: self.fill + k]
        xn[...] = tiles
        if front is not None:
            self.fbuf[self.fill: self.fill + k] = front
        # beam level: total over the field (a local change of a few hundred px moves the total
        # little; a beam change moves every tile); kept raw until the rows are normalised
        self.f["level"][start: start + k] = xn.reshape(k, -1).sum(axis=1, dtype=np.float64)
        self.fill += k
        end = self.base + self.fill
        if end - self.scored >= self.chunk + self.ctx:
            self._score(self._aligned(end - self.ctx))

    def _masked(self, block: np.ndarray) -> np.ndarray:
        """Tile sums of frames with non-finite pixels: those pixels are left out and each tile's
        sum scaled up by the share of its pixels that are finite; a tile with none holds its last
        finite value (or the frame's median tile). Frames with no finite pixel stay NaN (blanked)."""
        fin = np.isfinite(block)
        self.nonfinite += int(fin.size - np.count_nonzero(fin))
        self.nonfinite_frames += int(np.count_nonzero(~fin.reshape(len(block), -1).all(axis=1)))
        t = self.tile
        sums = bin_block(np.where(fin, block, 0).astype(np.float32), t, self.gy, self.gx)
        cnt = bin_block(fin.astype(np.uint8), t, self.gy, self.gx)
        with np.errstate(divide="ignore", invalid="ignore"):
            sums = np.where(cnt > 0, sums * np.float32(t * t) / cnt, np.nan).astype(np.float32)
        for row in sums:
            hole = np.isnan(row)
            if not hole.any():
                self.last_tiles = row.copy()
            elif hole.all():
                row[:] = 0  # no finite pixel: a level of 0 marks the frame blanked
            else:
                fillv = self.last_tiles if self.last_tiles is not None else None
                row[hole] = np.nanmedian(row) if fillv is None else fillv[hole]
                self.last_tiles = row.copy()
        return sums

    def _elect_reference(self, totals: np.ndarray) -> None:
        """The beam reference from the first frames: the median total of the frames within
        blank_level of the bright end (the 90th percentile), so blanked or non-finite frames, even
        most of the first frames, never set it."""
        t = totals[np.isfinite(totals) & (totals > 0)]
        if not len(t):
            return
        top = float(np.quantile(t, 0.9))
        near = t[np.abs(t / top - 1.0) <= self.s.blank_level]
        self.ref_total = float(np.median(near)) or 1.0
        lv = near / self.ref_total
        self._remember(lv)
        self.ref0 = self._recent_median() or 1.0

    def _normalise(self) -> None:
        """Scale the rows not yet normalised by the beam level (in order, 64 rows at a time against
        the recent good frames' level) and hold blanked frames (the mean of the frames before, or
        of the first good ones for blanked frames at the start)."""
        while self.normed < self.base + self.fill:
            a = self.normed
            b = min(self.base + self.fill, a + 64)
            if not self.ref_total:
                self._elect_reference(self.f["level"][: self.base + self.fill].astype(np.float64))
            total = self.f["level"][a:b].astype(np.float64)
            xn = self.buf[a - self.base: b - self.base]
            ref_total = self.ref_total or 1.0
            level = total / ref_total
            ref = self._recent_median() or self.ref0 or 1.0
            with np.errstate(invalid="ignore"):
                good = np.isfinite(level) & (np.abs(level / ref - 1.0) <= self.s.blank_level) \
                    & (level != 0) & (self.ref_total > 0)
            scale = np.where(good, (self.ref0 or 1.0) / np.where(good, level, 1.0), 1.0)
            xn *= scale.astype(np.float32)[:, None, None]
            if self.fbuf is not None:  # (blanked rows: held by the front delay)
                self.fbuf[a - self.base: b - self.base] *= scale.astype(np.float32)[:, None,
                                                                                     None, None]
            self.f["blank"][a:b] = ~good
            first = int(np.argmax(good)) if good.any() else len(good)
            if not self.seen_good:
                self.head_blank.extend(range(a, a + first))
                if first < len(good):  # blanked start: hold the mean of the first good frames
                    hold = xn[first:][good[first:]][:HOLD].mean(axis=0)
                    r0 = max(self.head_blank[0] - self.base, 0) if self.head_blank else 0
                    self.buf[r0: a - self.base + first] = hold
                    self.head_blank = []
                    self.seen_good = True
            if self.seen_good:
                for i in np.flatnonzero(~good[first:]) + first:
                    # hold the mean of the frames before (one frozen frame would carry a single
                    # frame's noise through every window over a long blank)
                    r = a - self.base + i
                    xn[i] = self.buf[max(r - HOLD, 0): r].mean(axis=0)
            self._remember(level[good][::4])
            self.f["level"][a:b] = np.where(np.isfinite(level), level, np.nan) / (self.ref0 or 1.0)
            self.normed = b

    def _stage_jumps(self, xn: np.ndarray, lo: int, cs) -> None:
        w0 = self.s.windows[0]
        sm = cs.smax
        peak = sm > raw_level(JUMP_Z, cs.k_eff)
        peak[1:] &= sm[1:] >= sm[:-1]
        peak[:-1] &= sm[:-1] >= sm[1:]
        peak |= cs.frac >= 0.5 * self.s.global_fraction
        idx = np.flatnonzero(peak)
        for j in idx[np.argsort(-sm[idx], kind="stable")][:JUMP_CHECKS]:
            r = lo + j
            if r - w0 < 0 or r + w0 > len(xn):
                continue
            before, after = xn[r - w0: r].mean(0), xn[r: r + w0].mean(0)
            # shot noise of after − before (var of a tile sum = gain × mean, w0 frames each side)
            noise = self.gain * (before + after) / w0 if self.gain is not None \
                and np.all(before > 0) and np.all(after > 0) else None
            shift, explained = explained_shift(before, after, noise=noise)
            if noise is not None:
                self.f["beyond"][self.scored + j] = change_beyond(before, after, noise)
            if explained >= JUMP_EXPLAINED:
                self.f["jump"][self.scored + j] = shift * self.tile

    def _front_scores(self, cs, upto: int) -> None:
        """Score the front values of frames scored..upto-1, one template segment at a time, and
        keep per frame whichever statistic (tile sums or fronts) is stronger."""
        fd, s, o = self.fronts, self.s, self.origin  # epochs count movie frames
        first = next((k for k, w in enumerate(s.windows) if w >= fr.FRONT_MIN_W), 0)
        for e in range(fd.scoring_epoch(self.scored + o), fd.scoring_epoch(upto - 1 + o) + 1):
            s0 = max(self.scored, (e * fd.epoch + fd.reach if e else 0) - o)
            s1 = min(upto, (e + 1) * fd.epoch + fd.reach - o)
            if s1 <= s0 or e in fd.empty or e + 1 in fd.empty:
                continue
            r0 = max(0, s0 - self.base - self.ctx)
            r1 = min(self.fill, s1 - self.base + self.ctx)
            ser = fd.detrend(fd.series(self.fbuf[r0:r1, 0], self.fbuf[r0:r1, 1],
                                       self.base + r0 + o, e))
            # the long windows only: a dim front needs them, and a change the short window sees
            # is strong enough for the tile sums
            fs = score_bands(ser, s0 - self.base - r0, s1 - self.base - r0, s.windows[first:],
                             self.tile, s.outer, fd.inv_sd(e, self.gain, ser), self.scratch,
                             trend=False, k_eff=cs.k_eff)
            if first:
                pw = np.zeros((len(fs.smax), len(s.windows)), np.float32)
                pw[:, first:] = fs.per_window
                fs.per_window = pw
                fs.best_window = (fs.best_window + first).astype(np.int8)
            j = slice(s0 - self.scored, s1 - self.scored)
            # per frame the stronger statistic wins whole (scores, place, onset: an echo of a
            # tile change must keep that change's place to be recognised as its echo)
            take = fs.smax > cs.smax[j]
            for name in ("sign", "x", "y", "shift", "best_window", "smax", "per_window"):
                getattr(cs, name)[j][take] = getattr(fs, name)[take]

    def _remember(self, levels: np.ndarray) -> None:
        """Keep the last 64 good frames' levels (a ring) for the blank test's reference."""
        v = levels[-len(self.recent):]
        self.recent[(self.n_recent + np.arange(len(v))) % len(self.recent)] = v
        self.n_recent += len(v)

    def _recent_median(self) -> float:
        r = self.recent[: min(self.n_recent, len(self.recent))]
        if not len(r):
            return 0.0
        return float(np.partition(r, len(r) // 2)[len(r) // 2])

    def finish(self) -> None:
        if self.pattern is not None:
            self.pattern.flush()
        if self.fronts is not None:
            self._feed_epochs(self.fronts.flush())
        end = self.base + self.fill
        if end > self.scored:
            self._score(end)

    def noise_model(self) -> dict:
        """What the parts of a split scan share (split.py): the beam reference and shot-noise gain
        (fixed by the first frames), and the blank test's recent levels."""
        return {"ref_total": self.ref_total, "ref0": self.ref0, "gain": self.gain,
                "recent": self.recent.tolist(), "n_recent": self.n_recent}

    def adopt(self, model: dict, context: int, origin: int = 0, fed_from: int | None = None) -> None:
        """Scan as a later part of a split movie: take `model` (noise_model()) instead of measuring
        it, and treat the first `context` rows fed as context only (never scored themselves).
        `origin`: the movie's frame number of row 0; `fed_from`: the first frame reduce() gets,
        before it when the front statistic's templates need earlier whole epochs (those rows are
        left out of the buffer)."""
        self.ref_total, self.ref0, self.gain = model["ref_total"], model["ref0"], model["gain"]
        self.recent[:] = model["recent"]
        self.n_recent = model["n_recent"]
        self.scored = context
        self.origin = origin
        if self.fronts is not None:
            fd = self.fronts
            self.fronts = fr.FrontDelay(self.gy, self.gx, self.tile, self.front_b, fd.reach,
                                        origin if fed_from is None else fed_from)

    def _score(self, upto: int) -> None:
        self._normalise()
        xn = self.buf[: self.fill]
        lo, hi = self.scored - self.base, upto - self.base
        if self.gain is None:  # shot-noise gain measured once, on the first good frames
            good = np.flatnonzero(self.f["blank"][self.base: self.base + self.fill] == 0)
            self.gain = noise_gain(xn[good[:257]] if len(good) >= 2 else xn)
        inv_sd = 1.0 / noise_sd(xn, self.gain)  # the means follow the scene
        cs = score_bands(xn, lo, hi, self.s.windows, self.tile, self.s.outer, inv_sd,
                         self.scratch)
        if hi - lo >= 32:  # the front statistic doubles the tests (its own boxes, same grid)
            self.k_medians.append(cs.k_eff * (2 if self.fronts is not None else 1))
        # whole-field shift at the strongest changes and where many tiles changed at once (stage
        # jump test): kept where the shift explains most of the change
        self._stage_jumps(xn, lo, cs)
        if self.gain is not None:  # beam-current jumps told from local changes
            a = self.base
            for t, share in level_factors(xn, self.f["level"][a: a + self.fill],
                                          self.f["blank"][a: a + self.fill] != 0, lo, hi,
                                          self.s.windows[0], self.gain,
                                          0.5 * self.s.global_level, JUMP_CHECKS):
                self.f["common"][a + t] = share
        if self.fronts is not None:
            self._front_scores(cs, upto)
        sl = slice(self.scored, upto)
        f = self.f
        f["smax"][sl], f["zw"][sl], f["best_window"][sl] = cs.smax, cs.per_window, cs.best_window
        f["sign"][sl], f["x"][sl], f["y"][sl], f["frac"][sl] = cs.sign, cs.x, cs.y, cs.frac
        f["shift"][sl] = cs.shift
        ps = pulse_chunk(self.buf[: self.fill], lo, hi, self.tile, self.gain)
        f["pmax"][sl], f["px"][sl], f["py"][sl], f["pdur"][sl] = ps.pmax, ps.x, ps.y, ps.dur
        # slow drift (a feature for the viewer, not used for scoring): shift of the mean image of
        # the last DRIFT_EVERY frames or more against the previous one's
        self.mean_sum += xn[lo:hi].sum(axis=0, dtype=np.float64)
        self.mean_rows += hi - lo
        if self.mean_rows >= DRIFT_EVERY or upto >= self.n:
            mean = self.mean_sum / max(self.mean_rows, 1)
            if self.prev_mean is not None:
                dy, dx, _ = phase_shift(self.prev_mean, mean, upsample=20)
                self.drift += np.array([dy, dx]) * self.tile
            self.prev_mean = mean
            self.mean_sum[...] = 0
            self.mean_rows = 0
        f["drift_y"][sl], f["drift_x"][sl] = self.drift
        self.scored = upto
        keep = max(0, self.fill - 2 * self.ctx)
        if keep:
            self.buf[: self.fill - keep] = self.buf[keep: self.fill]
            if self.fbuf is not None:
                self.fbuf[: self.fill - keep] = self.fbuf[keep: self.fill]
            self.fill -= keep
            self.base += keep
    def _scalar(self, name: str, value: float) -> np.ndarray:
        a = np.array(value)
        if self.workdir is not None:
            np.save(self.workdir / f"{name}.npy", a)
        return a

    def features(self, flush: bool = True) -> tuple[dict[str, np.ndarray], dict]:
        """The whole movie's features and meta (`flush`: memory-mapped features synced to disk
        here; leave it to save_scan when it follows in this process)."""
        f = self.f
        k_eff = float(np.median(self.k_medians)) if self.k_medians else 1.0
        k_pulse = null_pulse_tests(self.gy, self.gx)
        f["score"] = self._alloc("score", self.n, np.float32)
        f["pulse"] = self._alloc("pulse", self.n, np.float32)
        for a in range(0, self.n, 1 << 20):  # in pieces: float64 temporaries stay small
            b = min(self.n, a + (1 << 20))
            f["score"][a:b] = calibrate_max(f["smax"][a:b], k_eff)
            f["pulse"][a:b] = calibrate_max(f["pmax"][a:b], k_pulse)
        f["k_eff"] = self._scalar("k_eff", k_eff)
        f["k_pulse"] = self._scalar("k_pulse", k_pulse)
        w0 = self.s.windows[0]
        lev = np.log(np.clip(np.where(f["blank"] == 1, np.nan, f["level"]), 1e-6, None))
        lev = pd.Series(lev).ffill().bfill().to_numpy() if np.isnan(lev).any() else lev
        lev = np.nan_to_num(lev, nan=0.0)
        t = np.nan_to_num(step_statistic(lev, w0, self.s.outer))
        sd = robust_sigma(np.diff(lev)) / np.sqrt(2.0) if len(lev) > 2 else 0.0
        c, factor = step_weight(w0, self.s.outer)
        f["gstep"] = self._alloc("gstep", self.n, np.float32)
        f["gstep"][:] = np.exp(t / (1.0 - c)) - 1.0
        f["gz"] = self._alloc("gz", self.n, np.float32)
        f["gz"][:] = t / max(sd * factor, 1e-9)
        if self.pattern is not None:
            pt = self.pattern
            f.update(qmax=pt.qmax, qarg=pt.qarg, qmed=pt.qmed, qmodel=pt.model)
            f.update(pt.features(self._alloc, self._scalar))
        for a in f.values():
            if flush and isinstance(a, np.memmap):
                a.flush()
        order = ["score"] + [k for k in f if k != "score"]
        meta = {"frames": self.n, "tile": self.tile, "grid": [self.gy, self.gx], "k_eff": k_eff,
                "ref_level": self.ref0, "nonfinite_pixels": self.nonfinite, "notices": []}
        if self.nonfinite:
            meta["notices"].append(
                f"{self.nonfinite} non-finite pixels (NaN or infinity) in {self.nonfinite_frames} "
                "frames were left out of the scan")
        return {k: f[k] for k in order}, meta


BLOCK_BYTES = 32 << 20  # at most this much of raw frames per read (memory bound for large frames)
CHUNK_CELLS = 1 << 22  # tile values scored at a time (frames × tiles), at least 64 frames
LARGE_GRID = 1 << 15  # tiles per frame above which context rows are kept to the minimum


def _frame_bytes(movie) -> int:
    return movie.shape[0] * movie.shape[1] * np.dtype(movie.dtype).itemsize


def block_frames(movie, s: DetectSettings) -> int:
    """Frames per read: settings.read_block, fewer when the frames are large (a 2k×2k uint16 frame
    is 8 MiB, so 64 of them decoded at once would be 512 MiB)."""
    return max(1, min(s.read_block, BLOCK_BYTES // max(_frame_bytes(movie), 1)))


def _piece(movie, per: int) -> int:
    """Frames per read within a block: pieces (readahead.piece_frames) for readers whose reads cost
    the same in any size (positioned reads of plain bytes, arrays in memory); whole blocks for the
    others (an HDF5 or Zarr chunk is decoded again for every read that touches it)."""
    from reviewer.movie.base import ArrayMovie
    from reviewer.movie.offsets import OffsetMovie

    source = getattr(movie, "movie", movie)  # split.py's _Frames reads through to its movie
    if isinstance(source, OffsetMovie | ArrayMovie):
        return piece_frames(per, _frame_bytes(movie))
    return per


def fed_blocks(sc: _Scanner, movie, per: int, cancel=None,
               origin: int = 0) -> Iterator[tuple[int, int]]:
    """The one read-ahead -> feed loop (whole scans here, parts in split.py): every block of `per`
    frames of `movie` read and reduced in the reader thread, in pieces where that pays (_piece),
    and fed to `sc` in order; yields (start, frames) after each block is fed. Raises ScanCancelled
    once `cancel` is set; the reader has stopped when the loop ends, however it ends."""
    blocks = read_ahead(movie, per, sc.reduce, piece=_piece(movie, per), origin=origin)
    try:
        for start, frames, tiles in blocks:
            if cancel is not None and cancel.is_set():
                raise ScanCancelled("scan cancelled")
            sc.feed(start, tiles)
            yield start, frames
    finally:
        blocks.close()


def compute_features(movie, settings: DetectSettings | None = None,
                     progress: Callable[[int], None] | None = None,
                     cancel=None, workdir=None) -> tuple[dict[str, np.ndarray], dict]:
    """Read `movie` once, in order, and return (features, meta). With `workdir` (a scan folder, see
    cache.save_scan) the per-frame features are memory-mapped .npy files in its NEW_FEATURES
    subfolder, written as they are made (not synced: save_scan syncs them and moves them into
    place)."""
    s = settings or DetectSettings()
    if movie.n_frames < 1:
        raise BadInput(f"{movie.path}: the movie has no frames")
    t0 = time.perf_counter()
    per = block_frames(movie, s)
    work = None
    if workdir is not None:
        work = Path(workdir) / NEW_FEATURES
        shutil.rmtree(work, ignore_errors=True)
        work.mkdir(parents=True)
    sc = _Scanner(movie.n_frames, tuple(movie.shape), s, str(movie.path), per, work)
    loop = fed_blocks(sc, movie, per, cancel)
    try:
        for start, frames in loop:
            if progress is not None:
                progress(start + frames)
    finally:
        loop.close()  # the reader thread has stopped when this returns
    sc.finish()
    # not synced here: save_scan syncs each feature file before it moves them into place (its
    # msync after one here doubled the disk waits: 230 against 116 ms for 21 files, busy disk)
    features, meta = sc.features(flush=False)
    meta.update(shape=list(movie.shape), seconds=round(time.perf_counter() - t0, 3),
                fingerprint=getattr(movie, "fingerprint", ""))
    return features, meta
