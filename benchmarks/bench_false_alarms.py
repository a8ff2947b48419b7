"""Measured false alarms on event-free movies against the `--false-alarms N` setting.

    python benchmarks/bench_false_alarms.py [--frames 120000] [--movie 2000]
                                            [--cases 32:5,32:40,96:12,96:250] [--seeds 1]
                                            [--patterns]

Per case (SIDE:DOSE) one long event-free movie is generated: a textured scene (Gaussian-filtered
noise, 12 % contrast) with Poisson counts at DOSE counts/px, slow beam wander (±3 % over 3,000
frames) and slow sub-pixel drift (0.3 px over the movie), no events. It is scanned once; candidates
are then proposed from its features for every N as if the long movie were `--frames / --movie`
movies of `--movie` frames each: the threshold depends on N / frames only, so N per movie of
`--movie` frames is N · frames / movie over the long one. Every candidate on these movies is a false
alarm. Prints, per case and N: the expected count, the measured count, false alarms per movie and
the ratio measured / N (target: within ×2, i.e. 0.5–2, at N = 0.05, 1 and 10). With --patterns the
scan also runs the pattern test (`reviewer scan --patterns`). At N = 0.05 the default frames expect
only 3 false alarms, whose Poisson spread alone puts one movie's ratio outside 0.5–2 about one time
in four (P(count ≤ 1) + P(count ≥ 7) for a mean of 3, from the Poisson distribution): `--seeds 1,2,3`
scans one movie per seed and case and pools the counts.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd
from scipy import ndimage

from reviewer.detect import DetectSettings, propose, scan_movie
from reviewer.movie import ArrayMovie

LEVELS = (0.05, 1.0, 10.0)


def event_free(n: int, side: int, dose: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    big = side + 8
    tex = ndimage.gaussian_filter(rng.standard_normal((big, big)), 2.0)
    tex = 1.0 + 0.12 * tex / tex.std()
    out = np.empty((n, side, side), np.uint16)
    t = np.arange(n)
    beam = 1.0 + 0.03 * np.sin(2 * np.pi * t / 3000.0)
    drift = 0.3 * t / max(n - 1, 1)
    spec = np.fft.fft2(tex)
    ky = np.fft.fftfreq(big)[:, None]
    for s in range(0, n, 512):
        k = min(512, n - s)
        shift = float(drift[s])  # piecewise constant per 512 frames: sub-pixel, slow
        moved = np.fft.ifft2(spec * np.exp(-2j * np.pi * ky * shift)).real[4: 4 + side, 4: 4 + side]
        lam = dose * moved[None] * beam[s: s + k, None, None]
        out[s: s + k] = rng.poisson(np.clip(lam, 0, None))
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--frames", type=int, default=120000)
    ap.add_argument("--movie", type=int, default=2000)
    ap.add_argument("--cases", default="32:5,32:40,96:12,96:250")
    ap.add_argument("--seeds", default="1", help="comma-separated; counts pooled over them")
    ap.add_argument("--patterns", action="store_true", help="scan with the pattern test too")
    a = ap.parse_args()
    scale = a.frames / a.movie
    print(f"{a.frames} event-free frames per case = {scale:.0f} movies of {a.movie} frames")
    worst = 1.0
    seeds = [int(x) for x in a.seeds.split(",")]
    for case in a.cases.split(","):
        side, dose = case.split(":")
        side, dose = int(side), float(dose)
        counts = {n_fa: [] for n_fa in LEVELS}
        secs = []
        for seed in seeds:
            frames = event_free(a.frames, side, dose, seed)
            t0 = time.perf_counter()
            res = scan_movie(ArrayMovie(frames), DetectSettings(patterns=a.patterns))
            secs.append(time.perf_counter() - t0)
            for n_fa in LEVELS:
                counts[n_fa].append(propose(res.features, DetectSettings(
                    false_alarms=n_fa * scale, patterns=a.patterns)))
        for n_fa in LEVELS:
            c = pd.concat(counts[n_fa])
            expected = n_fa * scale * len(seeds)
            per_movie = len(c) / scale / len(seeds)
            ratio = per_movie / n_fa
            worst = max(worst, ratio, 1 / ratio if ratio > 0 else np.inf)
            kinds = ", ".join(f"{k} {v}" for k, v in c["kind"].value_counts().items())
            print(f"{side}x{side} dose {dose:g} (scan {np.median(secs):.1f} s, seeds {a.seeds}): "
                  f"N {n_fa:g}: expected {expected:.1f}, measured {len(c)} ({kinds or 'none'}), "
                  f"per movie {per_movie:.3g}, ratio {ratio:.2f}", flush=True)
    print(f"worst factor between measured and set: {worst:.2f} (target <= 2)")


if __name__ == "__main__":
    main()
