"""Seeded synthetic growth movies with known ground truth (the tests' fixture factory).

Scenario (invented): nickel-oxide platelets on a thin carbon membrane, imaged at 400 frames/s.
Platelet edges (growth fronts) advance by one atomic row at a time within a single frame; small
islands nucleate on the membrane (or dissolve); a stray nanoparticle drifts across the field (a
transient); the stage drifts slowly, the beam current wanders, a few frames are blanked, and one
stage jump shifts the field.

Expected counts per pixel = dose x transmission x beam(t); observed counts are Poisson.

    movie, truth = generate(PRESETS["low_dose"], seed=1)
    for start, block in iter_generate(scenario, seed): ...
    truth = write_movie("movie.tif", scenario, seed)       # + movie.tif.truth.csv
    path = ensure_sample()                                  # the demo movie, cached
"""

from __future__ import annotations

import copy
import os
from collections.abc import Iterator
from dataclasses import asdict, dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from sample_movies.scene import Specimen, disc, shifted_window

if TYPE_CHECKING:  # pandas loads lazily: ensure_sample() stays quick when the file exists
    import pandas as pd

    from sample_movies.timeline import Plan

NOISE_BLOCK = 64  # frames sharing one noise generator; chunks are whole multiples of it


@dataclass(frozen=True)
class Scenario:
    """Everything that shapes a synthetic movie. Rates are events per 10,000 frames."""

    name: str = "custom"
    n_frames: int = 4000
    height: int = 128
    width: int = 128
    fps: float = 400.0
    dose: float = 40.0  # mean counts per pixel on bare membrane at beam 1
    # growth fronts (platelet facets)
    n_fronts: int = 1
    layer_events: bool = True
    step_px: float = 1.0  # advance of one layer (one atomic row), px
    mean_wait: float = 150.0  # mean frames between layers on one front (gamma-distributed)
    wait_shape: float = 3.0  # gamma shape of the waits (1 = exponential)
    min_wait: int = 12  # no two layers on one front closer than this
    front_len_px: float = 56.0
    segment_min: float = 0.6  # a layer covers this fraction of the facet at least
    front_start: float = 0.62  # facet's starting height as a fraction of the frame height
    platelet_contrast: float = 0.45
    flow_px_per_frame: float = 0.0  # continuous step flow (no discrete events)
    # other events
    nucleations_per_10k: float = 0.0
    dissolutions_per_10k: float = 0.0
    transients_per_10k: float = 0.0
    blanks_per_10k: float = 0.0
    beam_steps_per_10k: float = 0.0
    stage_jumps_per_10k: float = 0.0
    island_contrast: float = 0.35
    particle_contrast: float = 0.6
    jump_px: float = 6.0
    beam_step: float = 0.15  # relative size of a sudden beam-current step
    blank_level: float = 0.004  # beam during a blanked frame
    min_gap: int = 6  # frames between the end of one event and the next, any source
    quiet_frames: int = 24  # no events in the first and last frames
    # slow things that are not events
    drift_px_per_frame: float = 0.0
    drift_wander_px: float = 0.0
    beam_wander: float = 0.0  # relative amplitude of the slow beam-current wander
    wander_period: float = 3000.0  # frames
    texture_contrast: float = 0.12
    texture_scale_px: float = 2.0

    def describe(self) -> dict:
        return asdict(self)


_ARTEFACTS = dict(drift_px_per_frame=0.0015, drift_wander_px=1.5, beam_wander=0.05,
                  blanks_per_10k=4.0, beam_steps_per_10k=2.0, stage_jumps_per_10k=1.0,
                  transients_per_10k=6.0, nucleations_per_10k=4.0, dissolutions_per_10k=2.0)

PRESETS: dict[str, Scenario] = {
    "high_dose": Scenario(name="high_dose", n_frames=6000, dose=250.0, n_fronts=1, step_px=1.5,
                          mean_wait=120.0),
    "low_dose": Scenario(name="low_dose", n_frames=10000, dose=40.0, n_fronts=2, step_px=1.0,
                         mean_wait=200.0, **_ARTEFACTS),
    "very_low_dose": Scenario(name="very_low_dose", n_frames=10000, dose=12.0, n_fronts=2,
                              step_px=0.6, mean_wait=200.0, **_ARTEFACTS),
    "step_flow": Scenario(name="step_flow", n_frames=10000, dose=40.0, n_fronts=2,
                          layer_events=False, flow_px_per_frame=0.004,
                          drift_px_per_frame=0.0015, drift_wander_px=1.5, beam_wander=0.05),
    "idle": Scenario(name="idle", n_frames=10000, dose=40.0, n_fronts=1, layer_events=False,
                     drift_px_per_frame=0.0015, drift_wander_px=1.5, beam_wander=0.05),
    # The demo: ~20 layers over two fronts, nucleations, a dissolution, a transient, 2 blanked
    # frames, a beam step and one stage jump. Dose kept low so the zlib TIFF stays under 20 MB.
    "sample": Scenario(name="sample", n_frames=2000, height=96, width=128, dose=30.0,
                       n_fronts=2, step_px=1.0, mean_wait=260.0, front_len_px=52.0,
                       drift_px_per_frame=0.001, drift_wander_px=1.0, beam_wander=0.04,
                       wander_period=1500.0, nucleations_per_10k=6.7, dissolutions_per_10k=3.4,
                       transients_per_10k=3.4, blanks_per_10k=10.0, beam_steps_per_10k=3.4,
                       stage_jumps_per_10k=3.4, jump_px=5.0),
}

SAMPLE_SEED = 2024


def plan(scenario: Scenario, seed: int) -> Plan:
    """The movie's plan: stage offsets, beam, events and ground truth (no frames drawn)."""
    from sample_movies.timeline import make_plan

    return make_plan(scenario, seed)


def iter_generate(scenario: Scenario, seed: int, chunk: int = 256,
                  ) -> Iterator[tuple[int, np.ndarray]]:
    """Yield (start, frames) blocks, uint16 (k, h, w); together exactly the frames of generate().

    `chunk` is rounded up to a multiple of NOISE_BLOCK (64); memory stays O(chunk) frames.
    """
    sc = scenario
    pl = plan(sc, seed)
    h, w, n = sc.height, sc.width, sc.n_frames
    spec = Specimen(pl.texture, copy.deepcopy(pl.fronts))
    for cy, cx, r, c in pl.initial_islands:
        spec.add_island(cy, cx, r, c)
    chunk = max(NOISE_BLOCK, -(-int(chunk) // NOISE_BLOCK) * NOISE_BLOCK)
    actions, ai = pl.actions, 0
    for start in range(0, n, chunk):
        stop = min(n, start + chunk)
        lam = np.empty((stop - start, h, w), dtype=np.float32)
        for t in range(start, stop):
            while ai < len(actions) and actions[ai][0] <= t:
                _apply(spec, actions[ai][1])
                ai += 1
            if pl.flow_px_per_frame:
                for k, fr in enumerate(spec.fronts):
                    fr.flow = pl.flow_px_per_frame * t
                    spec.redraw_front(k)
            lam[t - start] = shifted_window(spec.canvas, pl.offsets[t, 0], pl.offsets[t, 1], h, w)
        lam *= (sc.dose * pl.beam[start:stop]).astype(np.float32)[:, None, None]
        for p in pl.particles:
            for t in range(max(p.frame, start), min(p.frame_end + 1, stop)):
                y, x = p.position(t)
                win, cov = disc((h, w), y, x, p.radius)
                lam[t - start][win] *= 1.0 - p.contrast * cov
        out = np.empty((stop - start, h, w), dtype=np.uint16)
        for b0 in range(start, stop, NOISE_BLOCK):
            b1 = min(b0 + NOISE_BLOCK, stop)
            rng = np.random.default_rng([int(seed), 2, b0 // NOISE_BLOCK])
            counts = rng.poisson(lam[b0 - start:b1 - start])
            np.minimum(counts, 65535, out=counts)
            out[b0 - start:b1 - start] = counts
        yield start, out


def _apply(spec: Specimen, action: tuple) -> None:
    if action[0] == "layer":
        _, k, lo, hi, step = action[:5]
        spec.fronts[k].profile[lo:hi] += step
        spec.redraw_front(k)
    elif action[0] == "island":
        spec.add_island(*action[1:])
    elif action[0] == "unisland":
        spec.remove_island(*action[1:])


def generate(scenario: Scenario, seed: int) -> tuple[np.ndarray, pd.DataFrame]:
    """The whole movie (uint16, (n, h, w)) and its ground truth (one row per true event)."""
    movie = np.empty((scenario.n_frames, scenario.height, scenario.width), dtype=np.uint16)
    for start, block in iter_generate(scenario, seed):
        movie[start:start + len(block)] = block
    return movie, plan(scenario, seed).truth


def truth_path(path: str | os.PathLike) -> Path:
    p = Path(path)
    return p.with_name(p.name + ".truth.csv")


def write_movie(path: str | os.PathLike, scenario: Scenario, seed: int, fps: float = 400.0, *,
                compression: str | None = None, dtype: str = "uint16") -> pd.DataFrame:
    """Stream the movie into an ImageJ TIFF (finterval = 1/fps) and write <path>.truth.csv.

    Uncompressed files are one contiguous ImageJ stack; with compression (e.g. "zlib") each frame
    is its own compressed page. `dtype="uint8"` stores counts as 8 bits (raises if any exceed 255).
    """
    import tifffile

    sc = scenario
    shape = (sc.n_frames, sc.height, sc.width)
    out_dtype = np.dtype(dtype)

    def frames() -> Iterator[np.ndarray]:
        for _, block in iter_generate(sc, seed):
            if out_dtype != np.uint16:
                if block.max() > np.iinfo(out_dtype).max:
                    raise ValueError(f"{path}: counts exceed {out_dtype} range")
                block = block.astype(out_dtype)
            yield from block

    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    tmp = p.with_name(p.name + ".part")
    with tifffile.TiffWriter(tmp, imagej=True) as tw:
        tw.write(frames(), shape=shape, dtype=out_dtype, compression=compression,
                 compressionargs={"level": 9} if compression == "zlib" else None,
                 metadata={"axes": "TYX", "finterval": 1.0 / fps})
    os.replace(tmp, p)
    truth = plan(sc, seed).truth
    truth.to_csv(truth_path(p), index=False)
    return truth


def sample_path() -> Path:
    from reviewer.paths import cache_root

    return cache_root() / "samples" / f"nio-platelets-{SAMPLE_SEED}.tif"


def ensure_sample() -> Path:
    """The demo movie (2,000 frames of 96x128 at 400 frames/s), generated once into the cache."""
    path = sample_path()
    if path.is_file() and truth_path(path).is_file():
        return path
    write_movie(path, PRESETS["sample"], SAMPLE_SEED, fps=PRESETS["sample"].fps,
                compression="zlib", dtype="uint8")
    return path


def scaled(scenario: Scenario, n_frames: int, height: int | None = None,
           width: int | None = None) -> Scenario:
    """The same scenario at another size (event rates stay per 10,000 frames)."""
    return replace(scenario, n_frames=n_frames, height=height or scenario.height,
                   width=width or scenario.width)
