"""One long movie scanned in parts (on several workers) with the same result as one whole scan.

The whole scan scores frames a chunk at a time; a chunk's scores depend only on the normalised tile
sums in its buffer (the chunk plus `ctx` frames of context each side), the beam reference and the
shot-noise gain. So a movie is split where the whole scan ends a chunk that also closes a drift
window (plan_parts): a part reads from `ctx` frames before its first frame, in blocks on the same
frame numbers as the whole scan, so every chunk sees the same buffer. The noise model is measured
once by a light first pass over the frames the whole scan measures it on (estimate_model); each
later part also reads a few hundred frames before its context to set the blank test's reference
(warm-up). With the front statistic (--dim-fronts) rows reach the buffer an epoch at a time and
chunks end on template boundaries; a part's buffer starts where the whole scan's does after the
chunk before (2·ctx rows before the frames read then), and the part reads from the start of the
epoch before it, so the templates of the epochs its frames are scored with are the whole scan's
(the front statistic's blank reference comes from those two epochs; the whole scan's from up to
33). Parts write their per-frame features into their own folder (scan_part); stitch() puts
them together -- the drift carried across the joins -- and the whole-movie steps (calibration with
the median effective number of tests, the level-step features) run once on the stitched features,
so candidates are proposed once, as for the whole scan.

Equal to the whole scan: per-frame scores bit-identical, and within SCORE_TOLERANCE where a
blanked frame lies just after a part's first read frame (held from fewer frames before it, and the
blank test's reference there set by the warm-up); candidates the same.
"""

from __future__ import annotations

import shutil
import time
from dataclasses import asdict, dataclass, replace
from pathlib import Path

import numpy as np

from reviewer.detect.drift import phase_shift
from reviewer.detect.settings import DetectSettings
from reviewer.detect.stream import (
    DRIFT_EVERY,
    NEW_FEATURES,
    _Scanner,
    block_frames,
    fed_blocks,
)
from reviewer.errors import BadInput

WARM = 256  # frames read before a part's context to set the blank test's recent levels
MIN_PART = 2 * DRIFT_EVERY  # frames: no part shorter than this
# |split − whole| bound on every per-frame feature, tested (tests/test_scan_split.py): the scores
# are bit-identical unless a blanked frame lies within HOLD frames after a part's first read frame
# (its held value then averages fewer frames: measured 2e-4 in z); the drift differs by float
# rounding (~5e-7 px)
SCORE_TOLERANCE = 1e-3
PARTS = "parts.new"  # subfolder of a scan folder holding the parts' features while they run


@dataclass(frozen=True)
class Part:
    index: int
    start: int      # first frame scored
    stop: int       # one past the last frame scored
    read_from: int  # first frame in the buffer (the whole scan's buffer start there; 0 for the first)
    read_to: int    # one past the last frame read (where the whole scan scores up to stop)
    closes_at: int  # first frame of the chunk that closes the part's first drift window
    last: bool
    fed_from: int = -1  # first frame read: before read_from when the front statistic needs the
    #                     whole epochs there for its templates (-1: read_from)

    @property
    def first_read(self) -> int:
        return self.read_from if self.fed_from < 0 else self.fed_from

    def to_dict(self) -> dict:
        return asdict(self)


class _Frames:
    """Frames read_from..read_to-1 of a movie, numbered from 0, in blocks that end on the same frame
    numbers as the whole scan's (multiples of the block size)."""

    def __init__(self, movie, start: int, stop: int) -> None:
        self.movie, self.start, self.stop = movie, start, stop
        self.shape, self.dtype = movie.shape, movie.dtype

    def iter_blocks(self, size: int, reuse: bool = False):
        first = self.start // size * size
        for s, block in self.movie.iter_blocks(size, first, self.stop, reuse=reuse):
            if s < self.start:
                block, s = block[self.start - s:], self.start
            yield s - self.start, block


def _scanner(movie, s: DetectSettings, n: int, workdir: Path | None = None) -> _Scanner:
    return _Scanner(n, tuple(movie.shape), s, str(movie.path), block_frames(movie, s), workdir)


def chunk_plan(movie, s: DetectSettings) -> list[tuple[int, int, bool, int]]:
    """The whole scan's chunks: (first frame, end frame, closes a drift window, frames read when
    it is scored), as _Scanner.feed and _score make them for blocks of block_frames() frames (with
    the front statistic: for its epochs, chunks ending on template boundaries)."""
    n, per = movie.n_frames, block_frames(movie, s)
    probe = _scanner(movie, s, 1)
    chunk, ctx, fd = probe.chunk, probe.ctx, probe.fronts
    step = per if fd is None else fd.epoch  # rows reach the buffer a block / an epoch at a time
    out, scored, rows = [], 0, 0
    for end in [min(a + step, n) for a in range(0, n, step)]:
        if end - scored >= chunk + ctx:
            upto = end - ctx
            if fd is not None:  # as _Scanner._aligned
                upto = fd.aligned(upto, scored)
            rows += upto - scored
            closes = rows >= DRIFT_EVERY or upto >= n
            rows = 0 if closes else rows
            out.append((scored, upto, closes, end))
            scored = upto
    if n > scored:
        out.append((scored, n, True, n))
    return out


def plan_parts(movie, s: DetectSettings, parts: int, min_part: int = MIN_PART) -> list[Part]:
    """At most `parts` parts of about equal length, split where the whole scan closes a drift
    window; one part when the movie is too short to split. A part's buffer starts where the whole
    scan's does after the chunk before it (2·ctx rows before the frames read then); with the
    front statistic a part also reads the two epochs before that, for their templates."""
    plan = chunk_plan(movie, s)
    n = movie.n_frames
    probe = _scanner(movie, s, 1)
    ctx, fd = probe.ctx, probe.fronts
    read = {upto: end for _, upto, _, end in plan}  # frames read when the chunk to upto is scored
    joins = [upto for _, upto, closes, end in plan[:-1] if closes and end <= n]
    cuts: list[int] = []
    for k in range(1, max(parts, 1)):
        ok = [j for j in joins if j - (cuts[-1] if cuts else 0) >= min_part and n - j >= min_part]
        if ok:
            cut = min(ok, key=lambda j: abs(j - k * n / parts))
            if not cuts or cut > cuts[-1]:
                cuts.append(cut)
    bounds = [0, *cuts, n]
    out = []
    for i, (a, b) in enumerate(zip(bounds[:-1], bounds[1:], strict=True)):
        closes = next(c0 for c0, c1, closes, _ in plan if closes and c1 > a)
        last = b == n
        first = max(0, read[a] - 2 * ctx) if i else 0
        fed = -1 if fd is None or not i else max(0, (first // fd.epoch - 1) * fd.epoch)
        out.append(Part(i, a, b, first, n if last else read[b], closes, last, fed))
    return out


def _run(sc: _Scanner, frames: _Frames, per: int, cancel=None, progress=None,
         warm: int = 0) -> np.ndarray | None:
    """Feed every block of `frames` to sc (progress gets the number of frames just read, the first
    `warm` frames (templates only) left out); returns the first drift window's mean image."""
    first = None
    loop = fed_blocks(sc, frames, per, cancel, origin=frames.start)
    try:
        for start, count in loop:
            if first is None and sc.prev_mean is not None:
                first = sc.prev_mean.copy()
            if progress is not None:
                progress(max(0, start + count - warm) - max(0, start - warm))
    finally:
        loop.close()
    return first


def estimate_model(movie, s: DetectSettings) -> dict:
    """The light first pass: the noise model measured on the frames the whole scan measures it on
    (those read before its first chunk is scored)."""
    plan = chunk_plan(movie, s)
    end = plan[0][3] if plan else movie.n_frames
    sc = _scanner(movie, s, end)
    _run(sc, _Frames(movie, 0, end), block_frames(movie, s))
    if not sc.scored:  # too short for a chunk before the end: measured when the end is scored
        sc.finish()
    return sc.noise_model()


def _warm(movie, s: DetectSettings, part: Part, model: dict) -> dict:
    """The model with the blank test's recent levels as they are before the part's first frame."""
    a = max(0, part.read_from - WARM)
    if a == part.read_from:
        return model
    s = replace(s, fronts=False)  # the levels alone (with fronts they come an epoch late)
    sc = _scanner(movie, s, part.read_from - a)
    sc.adopt(model, part.read_from - a)  # context only: nothing is scored
    sc.chunk = 1 << 40
    _run(sc, _Frames(movie, a, part.read_from), block_frames(movie, s))
    sc._normalise()
    return {**model, **{k: v for k, v in sc.noise_model().items() if k in ("recent", "n_recent")}}


def scan_part(movie, s: DetectSettings, part: Part, model: dict | None, workdir,
              cancel=None, progress=None) -> dict:
    """Scan one part into `workdir` (per-frame .npy files over frames read_from..read_to-1);
    returns a small dict for stitch()."""
    t0 = time.perf_counter()
    work = Path(workdir)
    shutil.rmtree(work, ignore_errors=True)
    work.mkdir(parents=True)
    per = block_frames(movie, s)
    sc = _scanner(movie, s, part.read_to - part.read_from, work)
    if part.index:
        if model is None:
            raise ValueError("a later part needs the noise model (estimate_model)")
        sc.adopt(_warm(movie, s, part, model), part.start - part.read_from, part.read_from,
                 part.first_read)
    first = _run(sc, _Frames(movie, part.first_read, part.read_to), per, cancel, progress,
                 part.read_from - part.first_read)
    if part.last:
        sc.finish()
        first = sc.prev_mean.copy() if first is None and sc.prev_mean is not None else first
    if sc.scored != part.stop - part.read_from:
        raise BadInput(f"{movie.path}: part {part.index} scored frames up to "
                       f"{part.read_from + sc.scored}, not {part.stop} (the movie changed?)")
    for a in sc.f.values():
        if isinstance(a, np.memmap):
            a.flush()
    np.save(work / "first_mean.npy", first if first is not None else np.zeros((sc.gy, sc.gx)))
    np.save(work / "last_mean.npy", sc.prev_mean if sc.prev_mean is not None else
            np.zeros((sc.gy, sc.gx)))
    return {"index": part.index, "k_medians": [float(k) for k in sc.k_medians],
            "nonfinite": int(sc.nonfinite), "nonfinite_frames": int(sc.nonfinite_frames),
            "ref0": float(sc.ref0), "seconds": round(time.perf_counter() - t0, 3),
            "folder": str(work)}


def stitch(movie, s: DetectSettings, parts: list[Part], results: list[dict], folder,
           seconds: float | None = None) -> tuple[dict[str, np.ndarray], dict]:
    """The whole movie's (features, meta) from its parts' results (scan_part), as compute_features
    returns them; with `folder` (a scan folder) the features are written into its NEW_FEATURES
    subfolder as compute_features does."""
    work = None
    if folder is not None:
        work = Path(folder) / NEW_FEATURES
        shutil.rmtree(work, ignore_errors=True)
        work.mkdir(parents=True)
    sc = _scanner(movie, s, movie.n_frames, work)
    results = sorted(results, key=lambda r: r["index"])
    drift = np.zeros(2)
    prev_last = None
    for part, res in zip(parts, results, strict=True):
        src = Path(res["folder"])
        a, b, off = part.start, part.stop, part.start - part.read_from
        for name, dst in sc.f.items():
            got = np.load(src / f"{name}.npy", mmap_mode="r")
            for i in range(a, b, 1 << 20):  # in pieces: memory stays bounded
                j = min(b, i + (1 << 20))
                dst[i:j] = got[i - a + off: j - a + off]
        first = np.load(src / "first_mean.npy")
        if prev_last is not None:  # the drift carried across the join, as the whole scan does
            dy, dx, _ = phase_shift(prev_last, first, upsample=20)
            for k, name in enumerate(("drift_y", "drift_x")):
                col = sc.f[name]
                col[a: part.closes_at] = drift[k]
                col[part.closes_at: b] += drift[k] + (dy, dx)[k] * sc.tile
        drift = np.array([sc.f["drift_y"][b - 1], sc.f["drift_x"][b - 1]], np.float64)
        prev_last = np.load(src / "last_mean.npy")
        sc.k_medians += res["k_medians"]
        sc.nonfinite += res["nonfinite"]
        sc.nonfinite_frames += res["nonfinite_frames"]
    sc.ref0 = results[0]["ref0"]  # the first part measured it as the whole scan does
    features, meta = sc.features()
    meta.update(shape=list(movie.shape), seconds=seconds if seconds is not None else 0.0,
                fingerprint=getattr(movie, "fingerprint", ""), parts=len(parts))
    return features, meta


def scan_in_parts(movie, s: DetectSettings, parts: int, folder=None,
                  min_part: int = MIN_PART) -> tuple[dict, dict]:
    """The split scan run in this process, part after part (the reference for the engine in
    reviewer/batch/parts.py, which runs the same steps on workers)."""
    t0 = time.perf_counter()
    plan = plan_parts(movie, s, parts, min_part)
    model = estimate_model(movie, s) if len(plan) > 1 else None
    base = Path(folder) if folder is not None else None
    import tempfile

    with tempfile.TemporaryDirectory() as tmp:
        root = (base / PARTS) if base is not None else Path(tmp)
        results = [scan_part(movie, s, p, model, root / str(p.index)) for p in plan]
        out = stitch(movie, s, plan, results, folder)
        shutil.rmtree(root, ignore_errors=True)
    out[1]["seconds"] = round(time.perf_counter() - t0, 3)
    return out
