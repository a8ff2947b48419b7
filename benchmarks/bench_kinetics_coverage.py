"""Simulated coverage of the kinetics report's 95 % rate intervals, by number of events and kind of waits.

    python benchmarks/bench_kinetics_coverage.py [--tables 1000] [--events 6,11,21,31,51,101]

For each number of events n and each kind of waits (exponential = Poisson arrivals, gamma shape 4 =
regular, gamma shape 0.3 = bursty; true rate 1 per s, seeded), builds that many event tables, runs the
report's own summary (reviewer.kinetics.summarise) and counts how often the gamma-renewal and the
chi-square (Poisson-exact) intervals contain the true rate. A coverage over N tables has a binomial
sd of sqrt(0.95 x 0.05 / N) (0.007 at 1,000). The lowest renewal coverage per n is what
reviewer/kinetics/renewal.py RATE_COVERAGE tabulates and the report prints beside the interval.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from reviewer.kinetics import summarise

SHAPES = (("exponential", 1.0), ("gamma 4", 4.0), ("gamma 0.3", 0.3))


def coverage(shape: float, events: int, tables: int) -> tuple[float, float]:
    rng = np.random.default_rng([int(shape * 10), events, 7])
    renewal = poisson = 0
    for _ in range(tables):
        t = np.concatenate([[0.0], np.cumsum(rng.gamma(shape, 1 / shape, events - 1))])
        s = summarise(t, n_boot=99, n_gof=99)
        lo, hi = s["rate_renewal_ci95_per_s"] or (np.nan, np.nan)
        renewal += lo <= 1.0 <= hi
        lo, hi = s["rate_ci95_per_s"]
        poisson += lo <= 1.0 <= hi
    return renewal / tables, poisson / tables


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--tables", type=int, default=1000)
    ap.add_argument("--events", default="6,11,21,31,51,101")
    a = ap.parse_args()
    t0 = time.perf_counter()
    print(f"{a.tables} tables per cell; coverage of the true rate: renewal / chi-square")
    print(f"{'events':>6} " + " ".join(f"{name:>22}" for name, _ in SHAPES) + "   lowest renewal")
    for n in (int(v) for v in a.events.split(",")):
        cells = [coverage(shape, n, a.tables) for _, shape in SHAPES]
        print(f"{n:6d} " + " ".join(f"{r:10.3f} / {p:9.3f}" for r, p in cells)
              + f"   {min(r for r, _ in cells):.3f}", flush=True)
    print(f"{time.perf_counter() - t0:.0f} s")


if __name__ == "__main__":
    main()
