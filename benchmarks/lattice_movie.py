"""Lattice-fringe movies with changes of pattern that keep the mean (our own scenario).

    movie, truth = lattice_movie(n=3000, side=128, dose=20, seed=1, events=True)

The scene is a sum of three cosines (periods 6.5, 8.3 and 11 px, directions 10°, 70° and 135°,
contrasts 0.18, 0.14, 0.10) filmed at DOSE counts/px with Poisson noise, under
- drift: the lattice slides at DRIFT px/frame along a slow curve (sub-pixel per frame),
- a focus change: a Gaussian blur whose sigma ramps 0.3 -> 1.4 px and back over FOCUS_FRAMES frames
  twice per movie (applied exactly, to each cosine's amplitude: exp(-sigma^2 k^2 / 2)),
- beam wander: +-3 % over 2,500 frames;
and, with events=True, at known frames in discs of radius 9-14 px that move with the lattice:
- 7 re-orientations: the disc's lattice turns by 30-90 deg about the disc's centre and stays so,
- 4 fringe shifts: the disc's lattice jumps by half of its shortest period and stays so.
Both keep the disc's mean (to within the mean of a cosine over a disc). Per event the truth holds
the disc's place in the frame where it changes,
the matched per-frame SNR sqrt(sum_p (mu_after - mu_before)^2 / mu_before) over the disc's pixels
and the largest per-pixel |change| / sqrt(mu).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

PERIODS = (6.5, 8.3, 11.0)
ANGLES = (10.0, 70.0, 135.0)
CONTRASTS = (0.18, 0.14, 0.10)
DRIFT = 0.01  # px per frame
FOCUS_FRAMES = 400


def _waves(angle_offset: float = 0.0) -> list[tuple[float, float, float]]:
    out = []
    for p, a, c in zip(PERIODS, ANGLES, CONTRASTS, strict=True):
        th = np.deg2rad(a + angle_offset)
        k = 2 * np.pi / p
        out.append((k * np.sin(th), k * np.cos(th), c))
    return out


def _lattice(yy, xx, waves, phases, sigma: float, cy: float = 0.0, cx: float = 0.0,
             rot: float = 0.0) -> np.ndarray:
    """1 + sum of cosines at (yy, xx) (lattice coordinates), rotated by rot degrees about
    (cy, cx), each cosine damped by the blur sigma."""
    y, x = yy - cy, xx - cx
    if rot:
        r = np.deg2rad(rot)
        y, x = np.cos(r) * y - np.sin(r) * x, np.sin(r) * y + np.cos(r) * x
    out = np.ones_like(yy)
    for (ky, kx, c), ph in zip(waves, phases, strict=True):
        damp = np.exp(-0.5 * sigma * sigma * (ky * ky + kx * kx))
        out += c * damp * np.cos(ky * (y + cy) + kx * (x + cx) + ph)
    return out


def schedule(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per frame: drift (dy, dx) in px, blur sigma, beam factor."""
    t = np.arange(n, dtype=np.float64)
    dy = DRIFT * t * np.sin(2 * np.pi * t / max(n, 1) * 0.5)
    dx = DRIFT * t * np.cos(2 * np.pi * t / max(n, 1) * 0.5)
    sigma = np.full(n, 0.3)
    for start in (n // 5, 3 * n // 5):
        ph = (t - start) / FOCUS_FRAMES
        on = (ph >= 0) & (ph <= 1)
        sigma[on] = 0.3 + 1.1 * np.sin(np.pi * ph[on])
    beam = 1.0 + 0.03 * np.sin(2 * np.pi * t / 2500.0)
    return np.stack([dy, dx], axis=1), sigma, beam


def lattice_movie(n: int = 3000, side: int = 128, dose: float = 20.0, seed: int = 1,
                  events: bool = True, drift: bool = True,
                  focus: bool = True) -> tuple[np.ndarray, pd.DataFrame]:
    rng = np.random.default_rng(seed)
    waves = _waves()
    phases = rng.uniform(0, 2 * np.pi, size=len(waves))
    shift, sigma, beam = schedule(n)
    if not drift:
        shift[:] = 0.0
    if not focus:
        sigma[:] = 0.3
    yy, xx = np.mgrid[:side, :side].astype(np.float64)
    ev = []
    if events:
        times = np.sort(rng.choice(np.arange(150, n - 150, 60), size=11, replace=False))
        kinds = ["reorient"] * 7 + ["shift"] * 4
        rng.shuffle(kinds)
        for t0, kind in zip(times, kinds, strict=True):
            r = rng.uniform(9, 14)
            cy, cx = rng.uniform(r + 4, side - r - 4, size=2)
            rot = float(rng.uniform(30, 90) * rng.choice([-1, 1])) if kind == "reorient" else 0.0
            ev.append(dict(frame=int(t0), kind=kind, x=cx, y=cy, r=r, rot=rot))
    out = np.empty((n, side, side), np.uint16)
    truth = []
    half = 0.5 * min(PERIODS)
    for t in range(n):
        y, x = yy + shift[t, 0], xx + shift[t, 1]  # the lattice moves with the stage
        mu = _lattice(y, x, waves, phases, sigma[t])
        for e in ev:
            if t < e["frame"]:
                continue
            cy, cx = e["y"] - shift[t, 0], e["x"] - shift[t, 1]  # the disc moves with the stage
            # the disc's share of each pixel (a 1 px ramp across its edge: pixels integrate, so
            # an edge that drifts changes them gradually)
            share = np.clip(e["r"] + 0.5 - np.hypot(yy - cy, xx - cx), 0.0, 1.0)
            m = share > 0
            if e["kind"] == "reorient":
                new = _lattice(y[m], x[m], waves, phases, sigma[t], e["y"], e["x"], e["rot"])
            else:
                ky, kx, _ = waves[0]  # along the shortest period's wave vector
                k = np.hypot(ky, kx)
                new = _lattice(y[m] + half * ky / k, x[m] + half * kx / k, waves, phases,
                               sigma[t])
            new = share[m] * new + (1 - share[m]) * mu[m]
            if t == e["frame"]:
                before = mu[m] * dose * beam[t]
                after = new * dose * beam[t]
                snr = float(np.sqrt(np.sum((after - before) ** 2 / before)))
                peak = float(np.max(np.abs(after - before) / np.sqrt(before)))
                truth.append(dict(frame=e["frame"], kind=e["kind"], x=cx, y=cy,
                                  r=e["r"], rot=e["rot"], snr=snr, pixel_snr=peak))
            mu[m] = new
        out[t] = rng.poisson(np.clip(mu * dose * beam[t], 0, None))
    cols = ["frame", "kind", "x", "y", "r", "rot", "snr", "pixel_snr"]
    return out, pd.DataFrame(truth, columns=cols)
