"""Long tables: region clustering and the large-sample statistics against scipy, in O(n) memory.

(Speed and memory of the whole command on 10^6 events: benchmarks/bench_kinetics_scale.py.)
"""

from __future__ import annotations

import tracemalloc

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from scipy.cluster.hierarchy import fcluster, linkage

from reviewer.kinetics import summarise
from reviewer.kinetics.groups import MAX_REGIONS, by_region
from reviewer.kinetics.places import single_linkage
from reviewer.kinetics.plot import MAX_BINS, bin_count
from reviewer.kinetics.stats import (
    cv_delta_ci95,
    gof_exponential_p,
    gof_exponential_p_asymptotic,
    ks_exponential,
)


def same_partition(a, b) -> bool:
    a, b = np.asarray(a), np.asarray(b)
    pairs = set(zip(a.tolist(), b.tolist(), strict=True))
    return len(pairs) == len(set(a.tolist())) == len(set(b.tolist()))


def places(kind: str, n: int, rng) -> np.ndarray:
    if kind == "uniform":
        return rng.uniform(0, 300, (n, 2))
    if kind == "clumps":  # whole-pixel places in five clumps: many exact ties
        return np.round(rng.normal(0, 15, (n, 2)) + rng.integers(0, 5, (n, 1)) * 60)
    if kind == "line":    # collinear
        return np.column_stack([rng.uniform(0, 500, n), np.full(n, 3.0)])
    return np.repeat(rng.uniform(0, 100, (n // 20 + 1, 2)), 20, axis=0)[:n]  # repeated places


@pytest.mark.parametrize("kind", ["uniform", "clumps", "line", "repeats"])
@pytest.mark.parametrize("radius", [1.0, 7.5, 20.0])
def test_single_linkage_equals_scipy(kind, radius):
    # reference: scipy.cluster.hierarchy single linkage cut at the distance `radius`
    rng = np.random.default_rng([len(kind), int(radius * 10)])
    for n in (2, 3, 40, 700):
        xy = places(kind, n, rng)
        want = fcluster(linkage(xy, method="single"), t=radius, criterion="distance")
        assert same_partition(single_linkage(xy, radius), want)


def test_single_linkage_crowded_cells_equal_scipy():
    # thousands of events per cell go through the k-d tree path
    rng = np.random.default_rng(4)
    xy = np.vstack([rng.normal(0, 3, (1500, 2)), rng.normal((0, 26), 3, (1500, 2)),
                    rng.normal((80, 0), 3, (1000, 2))])
    want = fcluster(linkage(xy, method="single"), t=5.0, criterion="distance")
    assert same_partition(single_linkage(xy, 5.0), want)


def test_single_linkage_memory_is_linear():
    # 10^5 events: a distance matrix would need 10^10 / 2 x 8 B = 40 GB; the grid needs O(n)
    rng = np.random.default_rng(2)
    xy = rng.uniform(0, 4096, (100_000, 2))
    xy[:50_000] = rng.normal(2000, 5, (50_000, 2))  # half of them in one dense clump
    tracemalloc.start()
    labels = single_linkage(xy, 20.0)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < 300 * 2**20, peak
    assert np.unique(labels[:50_000]).size == 1


def test_many_small_regions_are_listed_not_analysed():
    rng = np.random.default_rng(1)
    n = 3000
    df = pd.DataFrame({"x": rng.uniform(0, 1e6, n), "y": rng.uniform(0, 1e6, n),
                       "time_s": np.sort(rng.uniform(0, 100, n)), "label": "layer"})
    groups = by_region(df, radius=20.0)
    assert len(groups) == MAX_REGIONS + 1
    name, rest = groups[-1]
    assert "skip" in rest.attrs and len(rest) == n - sum(len(g) for _, g in groups[:-1])


@pytest.mark.parametrize("n, bound_mib", [(4_001, 500), (100_001, 100)])
def test_summary_memory_is_bounded(n, bound_mib):
    # resampling and simulation work is capped by budgets (tables x waits), done in batches; above
    # 5,000 intervals the large-sample forms need only a few copies of the waits
    t = np.cumsum(np.random.default_rng(9).exponential(0.01, n))
    tracemalloc.start()
    s = summarise(t, duration_s=float(t[-1]) + 1, frame_s=0.0025)
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    assert peak < bound_mib * 2**20, peak
    assert s["interval_cv_ci95"][0] < 1 < s["interval_cv_ci95"][1]


def test_moment_cv_interval_agrees_with_scipy_bootstrap():
    # reference: scipy.stats.bootstrap (percentile) of the CV, on 20,000 gamma(2) waits
    x = np.random.default_rng(5).gamma(2.0, 1.0, 20_000)
    def cv(a, axis):
        return np.std(a, axis=axis, ddof=1) / np.mean(a, axis=axis)
    boot = stats.bootstrap((x,), cv, n_resamples=999, method="percentile", rng=0,
                           vectorized=True).confidence_interval
    lo, hi = cv_delta_ci95(x)
    width = boot.high - boot.low
    assert abs(lo - boot.low) < 0.1 * width and abs(hi - boot.high) < 0.1 * width


def test_ks_distance_equals_scipy():
    # reference: scipy.stats.kstest against expon(scale = mean)
    x = np.random.default_rng(6).gamma(1.5, 2.0, 777)
    want = stats.kstest(x, stats.expon(scale=np.mean(x)).cdf).statistic
    assert ks_exponential(x) == pytest.approx(want, rel=1e-12)


def test_asymptotic_gof_agrees_with_scipy_goodness_of_fit():
    # reference: scipy.stats.goodness_of_fit (parametric bootstrap at the actual n) on 6,000 waits
    rng = np.random.default_rng(8)
    for x in (rng.exponential(1.0, 6000), rng.gamma(1.08, 1.0, 6000)):
        want = gof_exponential_p(x, seed=1, n_samples=499)
        got = gof_exponential_p_asymptotic(x, seed=1, n_samples=999)
        assert abs(got - want) < 0.06, (got, want)


@pytest.mark.parametrize("x", [np.full(5, 0.3), np.full(1, 2.0), np.array([0.0, 0.0, 1e-300]),
                               np.random.default_rng(0).exponential(1.0, 10**6)])
def test_histogram_bins_are_bounded(x):
    assert 1 <= bin_count(x) <= MAX_BINS


def test_long_table_is_still_read():
    # above the long-table limits (moment CV interval, asymptotic KS, CV-scaled Laplace) the
    # reading still weighs the tests: a Poisson table of 30,000 events reads as random
    t = poisson_times = np.cumsum(np.random.default_rng(12).exponential(1.0, 30_000))
    s = summarise(poisson_times, duration_s=float(t[-1]) + 0.5)
    assert s["poisson_cv_range95"] is not None and s["interval_cv_p_poisson"] is not None
    assert s["reading"].startswith("Consistent with random"), s["reading"]
