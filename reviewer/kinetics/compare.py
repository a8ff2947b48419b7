"""Two groups of one recording compared: equal rates (exact conditional binomial test) and equal CV
(permutation test on the waits scaled by each group's mean).

Equal rates: given n1 + n2 events, n1 is binomial(n1 + n2, E1 / (E1 + E2)) when the rates per
exposure are equal (the exposures E are the common time window, times the region's area when ROIs
give one), so the two-sided exact binomial p applies (common practice; statsmodels calls it the
'exact-cond' test of two Poisson rates).
"""

from __future__ import annotations

import numpy as np
from scipy import stats

PERMUTATIONS = 999


def rates(n1: int, e1: float, n2: int, e2: float) -> dict:
    """Exact conditional test of equal Poisson rates per exposure; rate ratio with its interval."""
    total = n1 + n2
    share = e1 / (e1 + e2)
    p = float(stats.binomtest(n1, total, share).pvalue) if total else None
    ratio = (n1 / e1) / (n2 / e2) if n2 and e1 and e2 else None
    ci = None
    if total and 0 < n1 < total:
        lo, hi = stats.binomtest(n1, total).proportion_ci(0.95, method="exact")
        odds = e2 / e1  # the ratio of rates from the binomial proportion pi: pi/(1-pi) * e2/e1
        ci = [float(lo / (1 - lo) * odds), float(hi / (1 - hi) * odds) if hi < 1 else None]
    return {"counts": [n1, n2], "exposures": [e1, e2], "rate_ratio": ratio,
            "rate_ratio_ci95": ci, "equal_rate_p": p}


def cvs(x1: np.ndarray, x2: np.ndarray, seed: int) -> dict | None:
    """Permutation p of |CV1 - CV2|, the waits of each group divided by its mean first."""
    if x1.size < 3 or x2.size < 3 or np.mean(x1) <= 0 or np.mean(x2) <= 0:
        return None
    a, b = x1 / np.mean(x1), x2 / np.mean(x2)

    def cv(v, axis=-1):
        return np.std(v, axis=axis, ddof=1) / np.mean(v, axis=axis)

    observed = abs(float(cv(a) - cv(b)))
    pooled = np.concatenate([a, b])
    rng = np.random.default_rng([seed, pooled.size, 4])
    null = []
    rows = max(1, 2_000_000 // pooled.size)  # permutations held at once (bounded memory)
    for lo in range(0, PERMUTATIONS, rows):
        perms = rng.permuted(np.tile(pooled, (min(rows, PERMUTATIONS - lo), 1)), axis=1)
        null.append(np.abs(cv(perms[:, :a.size]) - cv(perms[:, a.size:])))
    p = (1 + np.sum(np.concatenate(null) >= observed - 1e-12)) / (PERMUTATIONS + 1)
    return {"cv": [float(cv(x1)), float(cv(x2))], "equal_cv_p": float(p),
            "cv_method": f"permutation test of |CV1 - CV2| on mean-scaled waits "
                         f"({PERMUTATIONS} permutations, seed {seed})"}


def compare(name1: str, t1: np.ndarray, name2: str, t2: np.ndarray, window_s: float,
            areas: tuple[float, float] | None, seed: int) -> dict:
    """The comparison of two groups observed over the same window (seconds)."""
    e1 = window_s * (areas[0] if areas else 1.0)
    e2 = window_s * (areas[1] if areas else 1.0)
    out = {"groups": [name1, name2], "window_s": window_s,
           "per": "event per s per px^2" if areas else "event per s",
           **rates(int(t1.size), e1, int(t2.size), e2),
           "rate_method": "exact conditional binomial test of equal rates"
                          + (" per area (ROI areas)" if areas else "") + " over the same window"}
    out.update(cvs(np.diff(t1), np.diff(t2), seed) or {"cv": None, "equal_cv_p": None,
                                                      "cv_method": None})
    return out
