"""Detection quality on generated movies with known truth, side by side with two peers.

    python benchmarks/bench_detect_quality.py [--seed 1] [--cache DIR] [--presets a,b,...]

Per movie: recall, precision, F1 (one-to-one matching within ±2 frames; true growth events, kinds
step and transient, against step/transient candidates), share of hits on the exact frame, false
alarms per 10^4 frames, share of whole-field artefacts (blank, beam step, stage jump) flagged
'global', and wall time. Peers on the same frames:
- naive: mean absolute difference between consecutive frames, robust z, threshold z* = Φ⁻¹(1−α/2N);
- ruptures: KernelCPD(kernel="linear", min_size=2, jump=1) on 16×16-px tile means (each tile
  standardised by its robust noise), penalty 2·d·ln n (BIC for a mean change in d = tiles dims).
Peers cannot tell whole-field artefacts from growth: their candidates within ±2 frames of a true
artefact are dropped before scoring (in their favour).
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
import pandas as pd

from reviewer.detect import DetectSettings, scan_movie
from reviewer.detect.candidates import _peaks
from reviewer.detect.statistics import robust_sigma, threshold_z
from reviewer.movie import ArrayMovie, Timing
from sample_movies.growth import PRESETS, generate

TOL = 2


def match(true: np.ndarray, found: np.ndarray, tol: int = TOL) -> list[int]:
    """One-to-one matching, closest pairs first: the offsets (found − true) of the hits."""
    pairs = sorted((abs(int(f) - int(t)), i, j) for i, t in enumerate(true)
                   for j, f in enumerate(found) if abs(int(f) - int(t)) <= tol)
    ut, uf, hits = set(), set(), []
    for _, i, j in pairs:
        if i not in ut and j not in uf:
            ut.add(i)
            uf.add(j)
            hits.append(int(found[j]) - int(true[i]))
    return hits


def naive(movie: np.ndarray) -> np.ndarray:
    n = len(movie)
    mad = np.zeros(n)
    for s in range(1, n, 256):
        a = movie[s - 1: min(s + 256, n)].astype(np.float32)
        mad[s: s + len(a) - 1] = np.abs(np.diff(a, axis=0)).mean(axis=(1, 2))
    z = (mad - np.median(mad[1:])) / max(robust_sigma(mad[1:]), 1e-9)
    return np.array(_peaks(z, z > threshold_z(0.05, n), 3))


def ruptures_peer(movie: np.ndarray, tile: int = 16) -> np.ndarray:
    import ruptures as rpt

    n, h, w = movie.shape
    gy, gx = h // tile, w // tile
    sig = np.empty((n, gy * gx))
    for s in range(0, n, 512):
        a = movie[s: s + 512, : gy * tile, : gx * tile].astype(np.float32)
        sig[s: s + len(a)] = a.reshape(len(a), gy, tile, gx, tile).mean(axis=(2, 4)).reshape(len(a), -1)
    sig = (sig - np.median(sig, axis=0)) / (robust_sigma(np.diff(sig, axis=0), axis=0) / np.sqrt(2))
    d = sig.shape[1]
    bk = rpt.KernelCPD(kernel="linear", min_size=2, jump=1).fit(sig).predict(pen=2 * d * np.log(n))
    return np.array(bk[:-1])


def score(name, frames, truth, found, kinds=None, seconds=0.0) -> dict:
    n = len(frames)
    grow = truth[truth["kind"] != "global"]["frame"].to_numpy()
    glob = truth[truth["kind"] == "global"]["frame"].to_numpy()
    found = np.asarray(found, dtype=np.int64)
    share_glob = np.nan
    if kinds is None:  # a peer: drop what lies on a whole-field artefact
        keep = np.array([not np.any(np.abs(glob - f) <= TOL) for f in found], bool)
        found = found[keep] if len(found) else found
    else:
        kinds = np.asarray(kinds)
        gfound = found[kinds == "global"]
        share_glob = len(match(glob, gfound)) / len(glob) if len(glob) else np.nan
        found = found[kinds != "global"]
    hits = match(grow, found)
    rec = len(hits) / len(grow) if len(grow) else np.nan
    prec = len(hits) / len(found) if len(found) else (np.nan if len(grow) else 1.0)
    f1 = 2 * rec * prec / (rec + prec) if len(grow) and rec + prec > 0 else np.nan
    return dict(movie=name, frames=n, events=len(grow), recall=rec, precision=prec, F1=f1,
                exact=np.mean(np.array(hits) == 0) if hits else np.nan,
                fa_per_1e4=(len(found) - len(hits)) / n * 1e4, global_flagged=share_glob,
                seconds=seconds)


def load(name: str, seed: int, cache: Path | None):
    if cache is not None:
        p = cache / f"{name}_{seed}.npy"
        if p.is_file():
            return np.load(p, mmap_mode="r"), pd.read_pickle(str(p) + ".pkl")
    movie, truth = generate(PRESETS[name], seed)
    if cache is not None:
        cache.mkdir(parents=True, exist_ok=True)
        np.save(p, movie)
        truth.to_pickle(str(p) + ".pkl")
    return movie, truth


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--cache", type=Path, default=None)
    ap.add_argument("--presets", default="high_dose,low_dose,very_low_dose,step_flow,idle")
    a = ap.parse_args()
    rows = []
    for name in a.presets.split(","):
        movie, truth = load(name, a.seed, a.cache)
        t0 = time.perf_counter()
        res = scan_movie(ArrayMovie(movie, timing=Timing(fps=400.0)), DetectSettings())
        t_ours = time.perf_counter() - t0
        c = res.candidates
        rows.append(dict(method="ours", **score(name, movie, truth, c["frame"], c["kind"], t_ours)))
        t0 = time.perf_counter()
        found = naive(movie)
        rows.append(dict(method="naive", **score(name, movie, truth, found,
                                                 seconds=time.perf_counter() - t0)))
        t0 = time.perf_counter()
        found = ruptures_peer(movie)
        rows.append(dict(method="ruptures", **score(name, movie, truth, found,
                                                    seconds=time.perf_counter() - t0)))
    df = pd.DataFrame(rows)
    with pd.option_context("display.width", 160, "display.max_columns", 20):
        print(df.to_string(index=False, float_format=lambda v: f"{v:.3f}"))


if __name__ == "__main__":
    main()
