"""Kinetics statistics against outside references: published exact Poisson limits, scipy.stats,
simulated Poisson and gamma processes, handbook lattice constants."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from reviewer.kinetics import summarise
from reviewer.kinetics.groups import by_region
from reviewer.kinetics.spacings import SPACINGS, layer_height
from reviewer.kinetics.stats import gamma_shape_ci95, garwood_ci95
from reviewer.kinetics.verdict import poisson_cv_range

# Exact 95 % Poisson confidence limits for an observed count (Garwood 1936, Biometrika 28:437;
# tabulated e.g. in Gehrels 1986, ApJ 303:336 — values from memory), to 3-4 significant digits.
GARWOOD_TABLE = {0: (0.0, 3.689), 1: (0.0253, 5.572), 5: (1.6235, 11.668), 10: (4.795, 18.390),
                 25: (16.18, 36.90)}


@pytest.mark.parametrize("n", sorted(GARWOOD_TABLE))
def test_garwood_limits_match_published_table(n):
    lo, hi = garwood_ci95(n)
    want_lo, want_hi = GARWOOD_TABLE[n]
    assert lo == pytest.approx(want_lo, rel=1e-3, abs=1e-9)
    assert hi == pytest.approx(want_hi, rel=1e-3)


@pytest.mark.parametrize("n", [5, 10, 25])
def test_count_rate_interval_is_the_garwood_limit_over_T(n):
    # n events in a recording of T = 2 s: the count-rate limits are the table's limits / T
    t = np.linspace(0.1, 1.9, n)
    s = summarise(t, duration_s=2.0, n_boot=99, n_gof=99)
    want_lo, want_hi = GARWOOD_TABLE[n]
    assert s["count_rate_per_s"] == pytest.approx(n / 2.0)
    assert s["count_rate_ci95_per_s"][0] == pytest.approx(want_lo / 2, rel=1e-3)
    assert s["count_rate_ci95_per_s"][1] == pytest.approx(want_hi / 2, rel=1e-3)


def test_simulated_poisson_process_reads_as_random():
    # a Poisson process (seeded, 400 events): CV ~ 1 and gamma shape ~ 1 inside their intervals
    t = np.cumsum(np.random.default_rng(11).exponential(0.2, 400))
    s = summarise(t, n_gof=999)
    lo, hi = s["interval_cv_ci95"]
    assert lo < 1 < hi and abs(s["interval_cv"] - 1) < 0.15
    lo, hi = s["gamma_shape_ci95"]
    assert lo < 1 < hi
    lo, hi = s["rate_ci95_per_s"]
    assert lo < 5.0 < hi
    assert s["gof_p_exponential"] > 0.05
    assert s["reading"].startswith("Consistent with random (Poisson) arrivals")


def test_gamma4_process_reads_as_more_regular():
    # gamma(k = 4) waits: CV = 1/sqrt(4) = 0.5 (textbook property of the gamma distribution).
    # One fixed seed; a 95 % interval misses the truth for 1 seed in 20 (seed 12 is such a one).
    t = np.cumsum(np.random.default_rng(13).gamma(4.0, 0.05, 300))
    s = summarise(t, layer_nm=0.25, n_gof=999)
    # sample CV of 300 gamma(4) waits: standard error about 0.025, so 0.08 is over 3 standard errors
    assert abs(s["interval_cv"] - 0.5) < 0.08 and s["interval_cv_ci95"][1] < 0.66
    lo, hi = s["gamma_shape_ci95"]
    assert lo < 4.0 < hi
    assert s["gof_p_exponential"] < 0.01 and s["gamma_vs_exponential_p"] < 1e-6
    assert s["reading"].startswith("Waits more regular than Poisson arrivals")
    assert "random" not in s["reading"] and "nucleation" not in s["reading"]  # no mechanism named
    assert s["velocity_nm_per_s"] == pytest.approx(s["rate_per_s"] * 0.25)


def test_few_intervals_are_not_overstated():
    s = summarise([0.0, 0.5, 0.9, 1.6], n_gof=99)
    assert s["reading"].startswith("Too few intervals to tell")


def test_wiring_gamma_fit_and_profile_bounds():
    # A WIRING test: stats.gamma.fit is the very call the program makes, so this shows the fit
    # reaches the summary; the gamma fit is checked against the MLE equation worked out by hand in
    # tests/test_kinetics_references.py
    x = np.random.default_rng(3).gamma(2.5, 0.1, 60)
    s = summarise(np.concatenate([[0.0], np.cumsum(x)]), n_gof=99)
    shape, _, scale = stats.gamma.fit(x, floc=0)
    assert s["gamma_shape"] == pytest.approx(shape, rel=1e-3)
    assert s["gamma_scale_s"] == pytest.approx(scale, rel=1e-3)
    lo, hi = gamma_shape_ci95(x, shape)
    # likelihood-ratio check with scipy.stats.gamma.logpdf at the profiled scale
    def ll(a):
        return np.sum(stats.gamma.logpdf(x, a, scale=np.mean(x) / a))
    for b in (lo, hi):
        assert 2 * (ll(shape) - ll(b)) == pytest.approx(stats.chi2.ppf(0.95, 1), rel=1e-6)


@pytest.mark.parametrize("k, lo, hi", [(10, 0.53, 1.47), (100, 0.83, 1.20)])
def test_poisson_cv_range_matches_quoted_simulation(k, lo, hi):
    # sample CV of a Poisson process, 95 % range: 0.53-1.47 with 10 intervals, 0.83-1.20 with 100
    # (simulation, common practice, no source)
    got = poisson_cv_range(k)
    assert got[0] == pytest.approx(lo, abs=0.012) and got[1] == pytest.approx(hi, abs=0.012)


def test_poisson_cv_range_large_k_uses_normal_limit():
    # delta method: the sample CV of k exponential waits has variance ~ 1/k (textbook asymptotics)
    lo, hi = poisson_cv_range(5000)
    assert lo == pytest.approx(1 - 1.96 / math.sqrt(5000)) and hi == pytest.approx(2 - lo)


def test_bad_times_raise_value_error():
    with pytest.raises(ValueError, match="two events are the minimum"):
        summarise([1.0])
    with pytest.raises(ValueError, match="increasing"):
        summarise([1.0, 0.5, 2.0])
    with pytest.raises(ValueError, match="span is zero"):
        summarise([1.0, 1.0])


def test_silicon_111_spacing_from_codata_lattice_constant():
    # Si lattice parameter a = 5.431020511 Angstrom (CODATA 2018); d(111) = a / sqrt(3) = 3.1356 A
    si = layer_height("si111")
    assert si.lattice_nm == 0.5431020511
    assert si.d_nm == pytest.approx(0.5431020511 / math.sqrt(3), rel=1e-12)
    assert si.d_nm == pytest.approx(0.31356, abs=5e-6)
    # Ge 5.658 A and GaAs 5.65325 A (Ioffe semiconductor database); Au 4.0782 A (handbook value,
    # from memory): d(111) = 2.35455 A; wurtzite GaAs c/2 about 3.285 A (from memory)
    assert SPACINGS["ge111"].d_nm == pytest.approx(0.32666, abs=5e-6)
    assert SPACINGS["gaas111"].d_nm == pytest.approx(0.32639, abs=5e-6)
    assert SPACINGS["au111"].lattice_nm == 0.40782
    assert SPACINGS["au111"].d_nm == pytest.approx(0.235455, abs=1e-6)
    assert SPACINGS["gaas0002"].d_nm == pytest.approx(0.3285, abs=5e-4)
    for name in ("si111", "ge111", "gaas111"):
        assert "bilayer" in SPACINGS[name].describe()
    assert all("room temperature" in sp.describe() for sp in SPACINGS.values())
    with pytest.raises(KeyError):
        layer_height("unobtainium")


def test_region_clustering_separates_two_fronts():
    import pandas as pd

    rng = np.random.default_rng(5)
    xy = np.vstack([rng.uniform(-5, 5, (20, 2)) + (30, 40), rng.uniform(-5, 5, (25, 2)) + (90, 40)])
    df = pd.DataFrame({"x": xy[:, 0], "y": xy[:, 1], "label": "layer"})
    groups = by_region(df, radius=20)
    assert [len(g) for _, g in groups] == [25, 20]
    assert groups[0][0].startswith("region 1 (x 90")
    # with a radius wider than the gap the fronts merge
    assert [len(g) for _, g in by_region(df, radius=70)] == [45]
