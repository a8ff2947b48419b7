"""Changes of pattern on lattice-fringe movies: recall with and without `--patterns`, and false alarms.

    python benchmarks/bench_detect_lattice.py [--frames 3000] [--free 12000] [--doses 5,20,100]
                                              [--side 128] [--seed 1]

Movies from benchmarks/lattice_movie.py (three cosines, Poisson DOSE counts/px, drift 0.01 px/frame,
two focus ramps sigma 0.3 -> 1.4 -> 0.3 px, beam wander +-3 %). Per dose:
- an event movie (--frames) with 7 re-oriented discs and 4 fringe shifts: each event counts as found
  when a local candidate lies within +-2 frames of its frame and within its radius + 8 px of its
  centre (one-to-one); printed per kind, for the default scan and for the scan with patterns, with
  the local candidates that match no event;
- an event-free movie (--free frames) with the same drift, focus ramps and wander: every candidate
  is a false alarm, printed per 10^4 frames at the default setting (--false-alarms 0.05 per movie
  of --frames frames), and for N = 0.05, 1, 10 per movie of --frames frames the measured count
  against the expected one (the threshold depends on N / frames only, so N per movie of --frames
  frames is N * free / frames over the long movie; see bench_false_alarms.py).
Times are the scans' own (in-process, no cache), with and without patterns, side by side.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd
from lattice_movie import lattice_movie

from reviewer.detect import DetectSettings, propose, scan_movie
from reviewer.detect.pattern import PATTERN_SHARE
from reviewer.movie import ArrayMovie, Timing

LEVELS = (0.05, 1.0, 10.0)
TOL = 2


def found(truth: pd.DataFrame, cands: pd.DataFrame) -> tuple[np.ndarray, int]:
    """Per truth row: found or not (one-to-one, closest in time first); and the unmatched local
    candidates."""
    loc = cands[cands["kind"] != "global"].reset_index(drop=True)
    pairs = []
    for i, e in truth.iterrows():
        for j, c in loc.iterrows():
            dt = abs(int(c["frame"]) - int(e["frame"]))
            if dt <= TOL and np.hypot(c["x"] - e["x"], c["y"] - e["y"]) <= e["r"] + 8:
                pairs.append((dt, i, j))
    hit = np.zeros(len(truth), bool)
    used: set[int] = set()
    for _, i, j in sorted(pairs):
        if not hit[i] and j not in used:
            hit[i] = True
            used.add(j)
    return hit, len(loc) - len(used)


def scan(movie: np.ndarray, patterns: bool, false_alarms: float = 0.05):
    t0 = time.perf_counter()
    r = scan_movie(ArrayMovie(movie, timing=Timing(fps=400.0)),
                   DetectSettings(patterns=patterns, false_alarms=false_alarms))
    return r, time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--frames", type=int, default=3000)
    ap.add_argument("--free", type=int, default=12000)
    ap.add_argument("--doses", default="5,20,100")
    ap.add_argument("--side", type=int, default=128)
    ap.add_argument("--seed", type=int, default=1)
    a = ap.parse_args()
    rows, alarms = [], []
    for i, dose in enumerate(float(d) for d in a.doses.split(",")):
        movie, truth = lattice_movie(a.frames, a.side, dose, a.seed + 31 * i)
        print(f"dose {dose:g}: events (frame, kind, matched SNR per frame, peak pixel SNR): "
              + ", ".join(f"{e.frame} {e.kind} {e.snr:.1f} {e.pixel_snr:.2f}"
                          for e in truth.itertuples()), flush=True)
        secs = {}
        for patterns in (False, True):
            r, secs[patterns] = scan(movie, patterns)
            hit, extra = found(truth, r.candidates)
            for kind in ("reorient", "shift"):
                sel = (truth["kind"] == kind).to_numpy()
                rows.append(dict(dose=dose, patterns=patterns, kind=kind, events=int(sel.sum()),
                                 found=int(hit[sel].sum()), unmatched_local=extra,
                                 seconds=round(secs[patterns], 2)))
                print(rows[-1], flush=True)
        free, _ = lattice_movie(a.free, a.side, dose, a.seed + 31 * i + 7, events=False)
        scale = a.free / a.frames
        plain: dict[float, int] = {}
        for patterns in (False, True):
            r, sec = scan(free, patterns, 0.05 * scale)
            feats = r.features
            row = dict(dose=dose, patterns=patterns, frames=a.free, seconds=round(sec, 2))
            for n in LEVELS:
                c = propose(feats, DetectSettings(patterns=patterns, false_alarms=n * scale))
                row[f"N={n:g}"] = f"{len(c)}/{n * scale:.2f}"
                if patterns:  # the pattern test only adds candidates: its own share
                    row[f"pattern N={n:g}"] = len(c) - plain[n]
                plain[n] = len(c)
                if n == LEVELS[0]:
                    row["per_1e4_default"] = round(len(c) / a.free * 1e4, 3)
            alarms.append(row)
            print(row, flush=True)
    df = pd.DataFrame(rows)
    with pd.option_context("display.width", 160):
        print(df.to_string(index=False))
        print(pd.DataFrame(alarms).to_string(index=False))
    print(f"false alarms: measured/expected per N (target 0.5-2); 'pattern N=' the pattern "
          f"test's own (its share of the budget: {PATTERN_SHARE}); default target <= 1 per 10^4 "
          f"event-free frames; one {a.frames}-frame movie per dose, {a.free} event-free frames")


if __name__ == "__main__":
    main()
