"""Waiting-time statistics: intervals, CV, exact rate intervals, exponential / gamma fits, GOF.

Every function takes plain numpy arrays; summary.py puts them together per group.
"""

from __future__ import annotations

import math
import warnings
from functools import lru_cache

import numpy as np
from scipy import optimize, special, stats

BCA_MAX_N = 2_000
BIG_N = 5_000         # above this many intervals: moment (delta-method) CV interval, asymptotic GOF
GOF_REF_N = 5_000     # ... whose null distribution of sqrt(n) * D is simulated at this sample size
CHI2_95_1DF = float(stats.chi2.ppf(0.95, 1))  # 3.841: profile-likelihood 95 % cut


def cv_of(x: np.ndarray, axis: int = -1) -> np.ndarray:
    """Coefficient of variation SD(ddof=1)/mean along `axis`."""
    return np.std(x, axis=axis, ddof=1) / np.mean(x, axis=axis)


def rate_ci95(k: int, span: float) -> tuple[float, float]:
    """Exact 95 % interval of a Poisson rate from k complete intervals over `span`: 2*rate*span ~ chi2(2k)."""
    return (float(stats.chi2.ppf(0.025, 2 * k)) / (2 * span),
            float(stats.chi2.ppf(0.975, 2 * k)) / (2 * span))


def garwood_ci95(n: int) -> tuple[float, float]:
    """Exact (Garwood 1936) 95 % limits of a Poisson mean from an observed count n."""
    lo = 0.0 if n == 0 else float(stats.chi2.ppf(0.025, 2 * n)) / 2
    return lo, float(stats.chi2.ppf(0.975, 2 * n + 2)) / 2


def cv_bootstrap_ci95(x: np.ndarray, seed: int, n_resamples: int) -> tuple[float, float, str]:
    """BCa bootstrap 95 % interval of the CV; and the method used.

    Percentile instead when BCa is undefined, or above BCA_MAX_N values (its jackknife costs n^2).
    """
    method = "BCa" if x.size <= BCA_MAX_N else "percentile"
    batch = max(1, 4_000_000 // max(1, x.size))  # bounds memory: resamples are built batch by batch
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = stats.bootstrap((x,), cv_of, n_resamples=n_resamples, vectorized=True, batch=batch,
                              method=method, rng=np.random.default_rng(seed))
        lo, hi = res.confidence_interval
        if method == "BCa" and not (np.isfinite(lo) and np.isfinite(hi)):
            method = "percentile"
            res = stats.bootstrap((x,), cv_of, n_resamples=n_resamples, vectorized=True, batch=batch,
                                  method="percentile", rng=np.random.default_rng(seed))
            lo, hi = res.confidence_interval
    return float(lo), float(hi), method


def cv_delta_ci95(x: np.ndarray) -> tuple[float, float]:
    """Normal 95 % interval of the CV from sample moments (delta method; for long tables).

    Var(CV) ~ (cv^4 + (m4 - s^4) / (4 s^2 m^2) - m3 / m^3) / n with central moments m3, m4 (so 1/n
    for exponential waits).
    """
    n, m = x.size, float(np.mean(x))
    d = x - m
    s2 = float(np.mean(d * d))
    m3, m4 = float(np.mean(d**3)), float(np.mean(d**4))
    cv = math.sqrt(s2 * n / (n - 1)) / m
    var = (s2**2 / m**4 + (m4 - s2**2) / (4 * s2 * m * m) - m3 / m**3) / n
    half = 1.959963984540054 * math.sqrt(max(var, 0.0))
    return max(0.0, cv - half), cv + half


def ks_exponential(x: np.ndarray) -> float:
    """Kolmogorov-Smirnov distance between the waits and an exponential with their mean."""
    z = np.sort(x) / np.mean(x)
    f = -np.expm1(-z)
    n = z.size
    i = np.arange(1, n + 1)
    return float(max(np.max(i / n - f), np.max(f - (i - 1) / n)))


def gof_exponential_p_asymptotic(x: np.ndarray, seed: int, n_samples: int) -> float:
    """KS p value for long tables: sqrt(n) * D against its null simulated at GOF_REF_N waits.

    The null of sqrt(n) * D with a fitted scale hardly depends on n at these sizes (Lilliefors-type
    limit); simulated in chunks, so memory stays bounded.
    """
    stat = math.sqrt(x.size) * ks_exponential(x)
    null = _ks_null(seed, n_samples)
    return float((1 + np.sum(null >= stat)) / (n_samples + 1))


@lru_cache(maxsize=8)
def _ks_null(seed: int, n_samples: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    null = [ks_exponential(rng.exponential(1.0, GOF_REF_N)) for _ in range(n_samples)]
    return np.asarray(null) * math.sqrt(GOF_REF_N)


def gamma_profile_loglik(shape: float, x: np.ndarray) -> float:
    """Gamma log-likelihood at `shape` with the scale at its MLE for that shape (mean / shape)."""
    n, mean = x.size, float(np.mean(x))
    return float((shape - 1) * np.sum(np.log(x)) - n * shape - n * shape * math.log(mean / shape)
                 - n * special.gammaln(shape))


def gamma_shape_ci95(x: np.ndarray, shape_hat: float,
                     cut: float = CHI2_95_1DF) -> tuple[float, float]:
    """Profile-likelihood 95 % interval of the gamma shape: 2*(l(max) - l(a)) <= cut
    (chi2_0.95(1) by default; calibrated_cut gives one simulated for the actual n)."""
    top = gamma_profile_loglik(shape_hat, x)

    def drop(log_a: float) -> float:
        return 2 * (top - gamma_profile_loglik(math.exp(log_a), x)) - cut

    centre = math.log(shape_hat)
    bounds = []
    for direction in (-1.0, 1.0):
        step = 0.5
        while drop(centre + direction * step) < 0:
            step *= 2
            if step > 60:
                raise ArithmeticError("gamma shape interval does not close")
        a, b = sorted((centre, centre + direction * step))
        bounds.append(math.exp(optimize.brentq(drop, a, b, xtol=1e-12)))
    return bounds[0], bounds[1]


def gamma_shape_mle(mean: np.ndarray, mean_log: np.ndarray) -> np.ndarray:
    """Vectorised gamma-shape MLE from mean and mean log: log a - digamma(a) = log(mean) - mean_log
    (Newton's method from Minka's closed-form start)."""
    s = np.maximum(np.log(mean) - mean_log, 1e-12)
    a = (3 - s + np.sqrt((s - 3) ** 2 + 24 * s)) / (12 * s)
    for _ in range(30):
        step = (np.log(a) - special.digamma(a) - s) / (1 / a - special.polygamma(1, a))
        a = np.maximum(a - step, a / 10)
        if np.all(np.abs(step) <= 1e-12 * a):
            break
    return a


def _profile(a: np.ndarray, n: int, mean: np.ndarray, sum_log: np.ndarray) -> np.ndarray:
    return (a - 1) * sum_log - n * a - n * a * np.log(mean / a) - n * special.gammaln(a)


def calibrated_cut(shape: float, n: int, seed: int, sims: int) -> tuple[float, float]:
    """95 % point of the likelihood-ratio statistic of the gamma shape for n waits, simulated at
    `shape`; and the coverage the chi-square cut (3.84) has there."""
    rng = np.random.default_rng([seed, n, 3])
    x = rng.gamma(shape, 1.0, (sims, n))
    mean, sum_log = x.mean(axis=1), np.log(x).sum(axis=1)
    a_hat = gamma_shape_mle(mean, sum_log / n)
    lr = 2 * (_profile(a_hat, n, mean, sum_log) - _profile(np.full(sims, shape), n, mean, sum_log))
    lr = np.maximum(lr[np.isfinite(lr)], 0.0)
    return float(np.quantile(lr, 0.95)), float(np.mean(lr <= CHI2_95_1DF))


def shape_bias_corrected(shape: float, k: int) -> float:
    """Gamma-shape MLE with its small-sample bias removed: (k - 3) / k * a + 2 / (3 k)
    (a standard correction, from memory; our simulations check the rate interval built on it)."""
    return max(0.05, (k - 3) / k * shape + 2 / (3 * k)) if k > 3 else shape


def renewal_rate_ci95(k: int, span: float, shape: float) -> tuple[float, float]:
    """95 % rate interval for k gamma(shape) waits summing to span: span * shape * rate ~
    Gamma(k * shape) (shape 1 gives the Poisson chi-square interval)."""
    return (float(stats.gamma.ppf(0.025, k * shape)) / (shape * span),
            float(stats.gamma.ppf(0.975, k * shape)) / (shape * span))


def fit_exponential(x: np.ndarray) -> float:
    """Maximum-likelihood scale (mean wait) of an exponential with location 0."""
    return float(stats.expon.fit(x, floc=0)[1])


def fit_gamma(x: np.ndarray) -> tuple[float, float]:
    """Maximum-likelihood (shape, scale) of a gamma with location 0."""
    shape, _, scale = stats.gamma.fit(x, floc=0)
    return float(shape), float(scale)


def gamma_vs_exponential_p(x: np.ndarray, shape: float, scale: float) -> float:
    """Likelihood-ratio p value of gamma against exponential (2*dlnL ~ chi2 with 1 d.f.)."""
    l_gamma = float(np.sum(stats.gamma.logpdf(x, shape, scale=scale)))
    l_expon = float(np.sum(stats.expon.logpdf(x, scale=np.mean(x))))
    return float(stats.chi2.sf(max(0.0, 2 * (l_gamma - l_expon)), 1))


def gof_exponential_p(x: np.ndarray, seed: int, n_samples: int) -> float:
    """KS goodness of fit to an exponential (location 0, scale fitted), p by parametric bootstrap."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = stats.goodness_of_fit(stats.expon, x, known_params={"loc": 0}, statistic="ks",
                                    n_mc_samples=n_samples, rng=np.random.default_rng(seed))
    return float(res.pvalue)
