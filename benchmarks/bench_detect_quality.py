"""Detection quality on generated movies with known truth, side by side with two independent peers.

    python benchmarks/bench_detect_quality.py [--seed 1] [--frames N] [--keep DIR] [--presets a,b]
                                              [--scan-args='--no-dim-fronts']

Each preset's movie is written once as an ImageJ TIFF (as the generator writes it for users), then
each method is timed from that file, reading included:
- ours: `reviewer scan MOVIE --fps 400 -o OUT.csv --force` as a user runs it (a new process, so
  interpreter start-up is in its time), with REVIEWER_CACHE_DIR set to a new empty folder per run:
  nothing is reused from an earlier scan;
- frame difference: a script of its own below (no reviewer code): tifffile reads the frames, the mean
  absolute difference of consecutive frames, a robust z (median / 1.4826·MAD), threshold
  z* = Φ⁻¹(1 − 0.05/2N) (scipy.stats.norm), local maxima over ±3 frames;
- ruptures: as its documentation shows (user guide, "Kernel change point detection" and the penalty
  of the binary-segmentation page, pen = ln(n)·dim·σ², from memory): the signal is the movie's
  16×16-px tile means (each standardised by median and MAD of its first differences / √2, so
  σ = 1), `rpt.KernelCPD(kernel="linear", min_size=2).fit(signal).predict(pen=...)`.
The operating system's page cache holds the file for every method (it was just written and is read
once before timing): the times compare computation on a warm page cache, not disk speed.

Scores per movie: recall, precision, F1 (one-to-one matching within ±2 frames, closest pairs first;
true growth events, kinds step and transient, against step/transient candidates), share of hits on
the exact frame, false alarms per 10^4 frames, share of whole-field artefacts (blank, beam step,
stage jump) flagged 'global', wall time. The peers cannot tell whole-field artefacts from growth:
their candidates within ±2 frames of a true artefact are dropped before scoring (in their favour).
"""

from __future__ import annotations

import argparse
import csv
import os
import shutil
import subprocess
import sys
import tempfile
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd

from sample_movies.growth import PRESETS, write_movie

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


# ---- ours, as a user runs it ---------------------------------------------------------------------
def ours(path: Path, extra: tuple[str, ...] = ()) -> tuple[np.ndarray, np.ndarray, float]:
    cache = tempfile.mkdtemp(prefix="bench-quality-cache-")  # fresh: nothing to reuse
    out = Path(cache) / "candidates.csv"
    env = {**os.environ, "REVIEWER_CACHE_DIR": cache}
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "reviewer", "scan", str(path), "--fps", "400", "-o",
                    str(out), "--force", *extra], check=True, capture_output=True, env=env)
    seconds = time.perf_counter() - t0
    with open(out, newline="", encoding="utf-8") as f:
        rows = list(csv.DictReader(f))
    shutil.rmtree(cache, ignore_errors=True)
    return (np.array([int(r["frame"]) for r in rows], dtype=np.int64),
            np.array([r["kind"] for r in rows]), seconds)


# ---- peer 1: a frame-difference script, independent of reviewer ---------------------------------
def frame_difference(path: Path) -> np.ndarray:
    import tifffile
    from scipy.stats import norm

    frames = tifffile.memmap(path)  # ImageJ contiguous stack, read straight from the file
    n = len(frames)
    mad = np.zeros(n)
    prev = frames[0].astype(np.float32)
    for s in range(1, n, 256):
        block = frames[s: s + 256].astype(np.float32)
        both = np.concatenate([prev[None], block])
        mad[s: s + len(block)] = np.abs(np.diff(both, axis=0)).mean(axis=(1, 2))
        prev = block[-1]
    body = mad[1:]
    centre = np.median(body)
    spread = 1.4826 * np.median(np.abs(body - centre))  # MAD scaled to a normal SD
    z = (mad - centre) / max(spread, 1e-9)
    z[0] = 0.0
    above = z > norm.isf(0.05 / (2 * n))
    peaks = [i for i in np.flatnonzero(above) if z[i] == z[max(0, i - 3): i + 4].max()]
    return np.array(peaks, dtype=np.int64)


# ---- peer 2: ruptures, as documented ------------------------------------------------------------
def ruptures_peer(path: Path, tile: int = 16) -> np.ndarray:
    import ruptures as rpt
    import tifffile

    frames = tifffile.memmap(path)
    n, h, w = frames.shape
    gy, gx = h // tile, w // tile
    signal = np.empty((n, gy * gx))
    for s in range(0, n, 512):
        a = frames[s: s + 512, : gy * tile, : gx * tile].astype(np.float32)
        signal[s: s + len(a)] = a.reshape(len(a), gy, tile, gx, tile).mean(axis=(2, 4)).reshape(
            len(a), -1)
    d = np.diff(signal, axis=0)
    noise = 1.4826 * np.median(np.abs(d - np.median(d, axis=0)), axis=0) / np.sqrt(2)
    signal = (signal - np.median(signal, axis=0)) / np.maximum(noise, 1e-9)
    dim, sigma = signal.shape[1], 1.0
    bkps = rpt.KernelCPD(kernel="linear", min_size=2).fit(signal).predict(
        pen=np.log(n) * dim * sigma**2)
    return np.array(bkps[:-1], dtype=np.int64)  # ruptures ends the list with n


def score(name, n, truth, found, kinds=None, seconds=0.0) -> dict:
    grow = truth[truth["kind"] != "global"]["frame"].to_numpy()
    glob = truth[truth["kind"] == "global"]["frame"].to_numpy()
    found = np.asarray(found, dtype=np.int64)
    share_glob = np.nan
    if kinds is None:  # a peer: drop what lies on a whole-field artefact
        keep = np.array([not np.any(np.abs(glob - f) <= TOL) for f in found], bool)
        found = found[keep] if len(found) else found
    else:
        kinds = np.asarray(kinds)
        share_glob = len(match(glob, found[kinds == "global"])) / len(glob) if len(glob) else np.nan
        found = found[kinds != "global"]
    hits = match(grow, found)
    rec = len(hits) / len(grow) if len(grow) else np.nan
    prec = len(hits) / len(found) if len(found) else (np.nan if len(grow) else 1.0)
    f1 = 2 * rec * prec / (rec + prec) if len(grow) and rec + prec > 0 else np.nan
    return dict(movie=name, frames=n, events=len(grow), recall=rec, precision=prec, F1=f1,
                exact=np.mean(np.array(hits) == 0) if hits else np.nan,
                fa_per_1e4=(len(found) - len(hits)) / n * 1e4, global_flagged=share_glob,
                seconds=seconds)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--frames", type=int, default=None, help="override the presets' frame count")
    ap.add_argument("--keep", type=Path, default=None,
                    help="folder for the generated movies, reused on the next run (default: a "
                         "temporary folder, removed at the end)")
    ap.add_argument("--presets", default="high_dose,low_dose,very_low_dose,step_flow,idle")
    ap.add_argument("--scan-args", default="", metavar="ARGS",
                    help="more options for our scan, e.g. --scan-args=--no-dim-fronts")
    a = ap.parse_args()
    folder = a.keep or Path(tempfile.mkdtemp(prefix="bench-quality-"))
    folder.mkdir(parents=True, exist_ok=True)
    print("reviewer cache: fresh for every scan (new empty REVIEWER_CACHE_DIR, --force); "
          "OS page cache: warm for every method (file read once before timing)")
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "reviewer", "--version"], check=True, capture_output=True)
    print(f"'ours' includes process start-up: `reviewer --version` takes "
          f"{time.perf_counter() - t0:.2f} s here")
    rows = []
    try:
        for name in a.presets.split(","):
            sc = PRESETS[name] if a.frames is None else replace(PRESETS[name], n_frames=a.frames)
            path = folder / f"{name}-{a.seed}-{sc.n_frames}.tif"
            truth_file = path.with_name(path.name + ".truth.csv")
            if path.is_file() and truth_file.is_file():
                truth = pd.read_csv(truth_file)
            else:
                truth = write_movie(path, sc, a.seed, fps=400.0)
            with open(path, "rb") as f:  # into the page cache, the same for every method
                while f.read(1 << 24):
                    pass
            frames, kinds, t = ours(path, tuple(a.scan_args.split()))
            rows.append(dict(method="ours", **score(name, sc.n_frames, truth, frames, kinds, t)))
            t0 = time.perf_counter()
            found = frame_difference(path)
            rows.append(dict(method="frame-diff", **score(name, sc.n_frames, truth, found,
                                                          seconds=time.perf_counter() - t0)))
            t0 = time.perf_counter()
            found = ruptures_peer(path)
            rows.append(dict(method="ruptures", **score(name, sc.n_frames, truth, found,
                                                        seconds=time.perf_counter() - t0)))
    finally:
        if a.keep is None:
            shutil.rmtree(folder, ignore_errors=True)
    df = pd.DataFrame(rows)
    with pd.option_context("display.width", 160, "display.max_columns", 20):
        print(df.to_string(index=False, float_format=lambda v: f"{v:.3f}"))


if __name__ == "__main__":
    main()
