"""Whole-field shift between two images by cross-correlation with sub-pixel refinement.

The cross-power spectrum is used without phase normalisation (under shot noise the normalised phase
correlation fails) and weighted by a Gaussian (the same as blurring both images by `blur` px); the peak
is refined by a matrix-multiply DFT upsampled around it (Guizar-Sicairos, Thurman & Fienup, Opt. Lett.
33:156, 2008).
"""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np

MIN_INNER = 16  # grid cells that must stay inside both images to judge a shift
MIN_INNER_SHARE = 0.4  # and at least this share of the field


def bin_image(img: np.ndarray, factor: int) -> np.ndarray:
    """Sum factor×factor blocks (edges that do not fill a block are dropped); float32 out."""
    a = np.asarray(img)
    h, w = (a.shape[-2] // factor) * factor, (a.shape[-1] // factor) * factor
    a = a[..., :h, :w]
    lead = a.shape[:-2]
    r = a.reshape(*lead, h // factor, factor, w).sum(axis=-2, dtype=np.float32)
    return r.reshape(*lead, h // factor, w // factor, factor).sum(axis=-1)


def _dft_around(product: np.ndarray, centre: np.ndarray, factor: int, size: int) -> np.ndarray:
    """Inverse DFT of `product` sampled on a size×size grid of step 1/factor centred on `centre`."""
    ny, nx = product.shape
    ys = centre[0] + (np.arange(size) - size // 2) / factor
    xs = centre[1] + (np.arange(size) - size // 2) / factor
    ey = np.exp(2j * np.pi * ys[:, None] * np.fft.fftfreq(ny)[None, :])
    ex = np.exp(2j * np.pi * np.fft.fftfreq(nx)[:, None] * xs[None, :])
    # einsum's own loops, not a (multi-threaded) BLAS product: these matrices are small and a
    # threaded BLAS spins against other work on a shared machine
    return np.einsum("ij,jk->ik", np.einsum("ij,jk->ik", ey, product), ex)


def phase_shift(ref: np.ndarray, mov: np.ndarray, upsample: int = 20,
                blur: float = 1.0) -> tuple[float, float, float]:
    """Shift (dy, dx) that carries `ref` onto `mov` (mov(y, x) ≈ ref(y − dy, x − dx)) and the
    peak's height over the correlation's robust spread (a confidence: < ~5 means no clear shift)."""
    a = np.asarray(ref, dtype=np.float64)
    b = np.asarray(mov, dtype=np.float64)
    a = a - a.mean()
    b = b - b.mean()
    product = np.conj(np.fft.fft2(a)) * np.fft.fft2(b)
    if blur > 0:
        ky = np.fft.fftfreq(a.shape[0])[:, None]
        kx = np.fft.fftfreq(a.shape[1])[None, :]
        product *= np.exp(-4.0 * np.pi**2 * blur**2 * (ky**2 + kx**2))
    cc = np.fft.ifft2(product).real
    peak = np.array(np.unravel_index(int(np.argmax(cc)), cc.shape), dtype=np.float64)
    dims = np.array(cc.shape, dtype=np.float64)
    peak = np.where(peak > dims // 2, peak - dims, peak)
    spread = 1.4826 * np.median(np.abs(cc - np.median(cc))) + 1e-12
    confidence = float((cc.max() - np.median(cc)) / spread)
    if upsample > 1:
        size = int(np.ceil(upsample * 1.5)) | 1
        fine = _dft_around(product, peak, upsample, size).real / product.size
        iy, ix = np.unravel_index(int(np.argmax(fine)), fine.shape)
        peak = peak + (np.array([iy, ix]) - size // 2) / upsample
    return float(peak[0]), float(peak[1]), confidence


TRIM = 0.8  # share of the inner cells a stage-jump fit and its explained share use: the rest (a
# local change, features that do not move with the field) are left out (common practice, no source)
REFINE_STEPS = 10  # Gauss–Newton steps refining the correlation's shift
POLISH = 0.125  # cells: then a downhill search on a grid this fine, at most POLISH_STEPS steps
POLISH_STEPS = 8
FIT_CELLS = 64  # a stage jump is judged on at most this many cells a side (the central ones)
SPREAD = 1.25  # times the noise floor the best-fitting cells' change must exceed to be judged
BEYOND_CELLS = 3.0  # cells: a local change's reach from its strongest place (change_beyond)
SPLINE = 3  # order of the spline that moves the image (cubic: sub-cell shifts of a coarse grid)


def _hann(shape: tuple[int, int]) -> np.ndarray:
    """A 2-D Hann taper: the correlation of images that are not periodic sees no edge jump."""
    return np.outer(np.hanning(shape[0] + 2)[1:-1], np.hanning(shape[1] + 2)[1:-1])


def _trimmed(z2: np.ndarray) -> tuple[float, float]:
    """Mean of the smallest TRIM share of z2 and the largest value kept."""
    k = max(int(TRIM * z2.size), 1)
    part = np.partition(z2.ravel(), k - 1)[:k]
    return float(part.mean()), float(part[-1])


def trimmed_noise_floor() -> float:
    """The mean of the smallest TRIM share of χ²₁ values (pure noise in units of its variance):
    E[X; X < q] / TRIM with q the TRIM quantile, and E[X; X < q] = P(χ²₃ < q) since
    x·f₁(x) = f₃(x) for the χ² densities (worked by hand from the χ² density). In closed form
    (no scipy.stats: its import alone took 0.5 s of a scan): q = z² with z the (1 + TRIM) / 2
    normal quantile, P(χ²₃ < q) = erf(z/√2) − z·√(2/π)·exp(−z²/2) (the χ²₃ CDF, from memory;
    tests/test_detect_reference.py checks it against scipy.stats.chi2)."""
    z = NormalDist().inv_cdf((1.0 + TRIM) / 2.0)
    return (math.erf(z / math.sqrt(2.0)) - z * math.sqrt(2.0 / math.pi) * math.exp(-z * z / 2)) \
        / TRIM


def fit_shift(before: np.ndarray, after: np.ndarray, weight: np.ndarray,
              upsample: int = 10) -> tuple[np.ndarray, float, float, tuple[slice, slice]]:
    """Whole-field shift (dy, dx) carrying `before` onto `after` by least squares over the TRIM
    share of cells that fit best (weights `weight`, 1 / variance), started from the plain and the
    tapered correlation peaks; returns it with the trimmed weighted residual energy after that
    shift and without one, and the inner cells used (the part no tried shift moves off the grid)."""
    from scipy import ndimage

    a = np.asarray(before, dtype=np.float64)
    b = np.asarray(after, dtype=np.float64)
    taper = _hann(a.shape)
    starts = [np.array(phase_shift(a, b, upsample=upsample)[:2]),
              np.array(phase_shift((a - a.mean()) * taper, (b - b.mean()) * taper,
                                   upsample=upsample)[:2])]
    m = int(np.ceil(max(float(np.abs(d).max()) for d in starts))) + 1
    inner = (slice(m, a.shape[0] - m), slice(m, a.shape[1] - m))
    w = np.broadcast_to(np.asarray(weight, dtype=np.float64), a.shape)[inner]
    coef = ndimage.spline_filter(a, order=SPLINE)

    def moved(d: np.ndarray) -> np.ndarray:
        return ndimage.shift(coef, d, order=SPLINE, mode="nearest", prefilter=False)

    def energy(d: np.ndarray) -> float:
        return _trimmed((b - moved(d))[inner] ** 2 * w)[0]

    if a[inner].size < max(MIN_INNER, MIN_INNER_SHARE * a.size):
        return np.zeros(2), 0.0, 0.0, inner  # too little left to judge
    best, e1 = np.zeros(2), energy(np.zeros(2))
    for d in starts:
        for _ in range(REFINE_STEPS):  # after − moved(d + Δ) ≈ r + ∇moved·Δ: least squares in Δ
            mv = moved(d)
            r = (b - mv)[inner]
            z2 = r * r * w
            keep = w * (z2 <= _trimmed(z2)[1])
            gy, gx = (g[inner] for g in np.gradient(mv))
            h = np.array([[np.sum(keep * gy * gy), np.sum(keep * gy * gx)],
                          [np.sum(keep * gy * gx), np.sum(keep * gx * gx)]])
            if not np.linalg.det(h) > 0:
                break
            step = -np.linalg.solve(h, [np.sum(keep * gy * r), np.sum(keep * gx * r)])
            d = d + step
            if np.abs(d).max() > m - 1 or np.abs(step).max() < 0.01:
                break
        if np.abs(d).max() <= m - 1 and (e := energy(d)) < e1:
            best, e1 = d, e
    for _ in range(POLISH_STEPS):  # the trimmed energy has shallow local minima: step downhill on
        # a grid of POLISH cells round the best shift until none of the 8 neighbours is lower
        trials = [best + POLISH * np.array([i, j]) for i in (-1, 0, 1) for j in (-1, 0, 1)
                  if (i or j) and np.abs(best + POLISH * np.array([i, j])).max() <= m - 1]
        lower = min(((energy(t), i) for i, t in enumerate(trials)), default=(e1, -1))
        if not lower[0] < e1:
            break
        best, e1 = trials[lower[1]], lower[0]
    # the energy without a shift over the same cells: those the shift fits (a feature that does
    # not move with the field, or a local change, is left out of both)
    z2 = (b - moved(best))[inner] ** 2 * w
    kept = z2 <= _trimmed(z2)[1]
    e0 = float(np.mean(((b - a)[inner] ** 2 * w)[kept]))
    return best, e0, e1, inner


def explained_shift(before: np.ndarray, after: np.ndarray, upsample: int = 10,
                    noise: np.ndarray | float | None = None) -> tuple[float, float]:
    """Whole-field shift (in grid units) from `before` to `after` and the share of their
    difference's energy that the shift explains, over the TRIM share of the inner cells that fit
    best (fit_shift): 1 − E1 / E0 of the residual energies after the shift and without one. With
    `noise` (the variance of after − before per cell, or one for all) the energies are in noise
    units and the share is of the energy above the noise floor, (E0 − E1) / (E0 − floor), so a
    stage jump at a low dose is explained as well as at a high one; a change that stands out of
    the noise on too few cells (E0 below twice the floor) is not a whole-field shift. A stage
    jump is explained almost wholly, a local change hardly at all, whatever shift is reported."""
    a = np.asarray(before, dtype=np.float64)
    b = np.asarray(after, dtype=np.float64)
    weight = np.broadcast_to(1.0 if noise is None else 1.0 / np.maximum(
        np.asarray(noise, np.float64), 1e-12), a.shape)
    # a large grid is judged on its central FIT_CELLS × FIT_CELLS cells (plenty of texture; the
    # fit's cost grows with the cells)
    cy, cx = (max((n - FIT_CELLS) // 2, 0) for n in a.shape)
    part = (slice(cy, cy + FIT_CELLS), slice(cx, cx + FIT_CELLS))
    a, b, weight = a[part], b[part], weight[part]
    floor = 0.0 if noise is None else trimmed_noise_floor()
    if noise is not None and not _trimmed((b - a) ** 2 * weight)[0] > SPREAD * floor:
        # the best-fitting cells are noise already: a change on a few cells, never a whole-field
        # shift (and the fit is skipped)
        return float(np.hypot(*phase_shift(a, b, upsample=upsample)[:2])), 0.0
    d, e0, e1, inner = fit_shift(a, b, weight, upsample)
    size = float(np.hypot(*d))
    if a[inner].size < max(MIN_INNER, MIN_INNER_SHARE * a.size):
        return size, 0.0  # too little left to judge: not a whole-field shift
    if not e0 > 2.0 * floor:
        return size, 0.0
    return size, float(np.clip((e0 - e1) / (e0 - floor), 0.0, 1.0))


def explained_factor(before: np.ndarray, after: np.ndarray, noise: np.ndarray) -> float:
    """The share of the change from `before` to `after` (tile means) that one common factor
    explains, after ≈ (1 + g)·before with g fitted by weighted least squares over every cell, in
    noise units (`noise`: the variance of after − before per cell): (E0 − E1) / (E0 − n) with E0
    and E1 the energies without and after the factor and n the cells (the energy of pure noise).
    A beam-current step scales every cell alike and is explained almost wholly; a local change,
    however much it moves the mean, is concentrated on its cells and hardly at all. NaN when the
    change does not stand out of the noise over the field (E0 within 3 standard deviations of
    n: χ²ₙ has variance 2n), where the share says nothing."""
    b = np.asarray(before, np.float64)
    w = 1.0 / np.maximum(np.broadcast_to(np.asarray(noise, np.float64), b.shape), 1e-12).ravel()
    d = np.asarray(after, np.float64).ravel() - b.ravel()
    b = b.ravel()
    e0 = float(np.sum(d * d * w))
    n = d.size
    bb = float(np.sum(b * b * w))
    if not e0 > n + 3.0 * np.sqrt(2.0 * n) or not bb > 0:
        return float("nan")
    g = float(np.sum(d * b * w)) / bb
    e1 = float(np.sum((d - g * b) ** 2 * w))
    return float(np.clip((e0 - e1) / (e0 - n), 0.0, 1.0))


def change_beyond(before: np.ndarray, after: np.ndarray, noise: np.ndarray,
                  radius: float = BEYOND_CELLS) -> float:
    """The share of the change from `before` to `after` (cells of a grid; noise: the variance of
    after − before per cell), in noise units and after the field's typical factor (the median
    cell's) is taken out, that lies farther than `radius` cells from its strongest place (the peak of the cells' energies above
    the noise, e = max(r² / noise − 1, 0), blurred over 3x3 cells). Near 0 for one local change
    however many cells it touches (its spill onto every other cell through the beam
    normalisation is the common factor); large for a change spread over the field. NaN when no
    cell rose above the noise."""
    from scipy import ndimage

    b = np.asarray(before, np.float64)
    w = 1.0 / np.maximum(np.broadcast_to(np.asarray(noise, np.float64), b.shape), 1e-12)
    d = np.asarray(after, np.float64) - b
    g = float(np.median(d / np.where(b > 0, b, np.inf)))  # the field's typical factor
    e = np.maximum((d - g * b) ** 2 * w - 1.0, 0.0)
    total = float(e.sum())
    if not total > 0:
        return float("nan")
    py, px = np.unravel_index(int(np.argmax(ndimage.uniform_filter(e, 3, mode="constant"))),
                              e.shape)
    yy, xx = np.indices(e.shape)
    return float(e[(yy - py) ** 2 + (xx - px) ** 2 > radius * radius].sum() / total)


def level_factors(xn: np.ndarray, level: np.ndarray, blank: np.ndarray, lo: int, hi: int,
                  w: int, gain: float, jump: float, checks: int) -> list[tuple[int, float]]:
    """(row, explained_factor) at the `checks` strongest jumps of the beam level among rows
    lo..hi-1 of xn (tile sums divided by their frame's level `level`; `blank`: blanked rows):
    rows where the mean level of the w rows from it differs from that of the w rows before by at
    least `jump` (relative), no blanked row among them; the raw tile sums' change between those
    w-row means is judged, with the shot noise gain × (before + after) / w."""
    lev = np.nan_to_num(np.asarray(level, np.float64), nan=0.0)
    c = np.concatenate([[0.0], np.cumsum(lev)])
    r = np.arange(max(lo, w), min(hi, len(lev) - w + 1))
    step = np.abs((c[r + w] - c[r]) / np.maximum(c[r] - c[r - w], 1e-12) - 1.0)
    held = np.concatenate([[0], np.cumsum(blank)])
    step[held[r + w] - held[r - w] > 0] = 0.0
    keep = step >= jump
    r, step = r[keep], step[keep]
    out = []
    for t in r[np.argsort(-step, kind="stable")][:checks]:
        raw = xn[t - w: t + w] * lev[t - w: t + w, None, None]
        before, after = raw[:w].mean(0), raw[w:].mean(0)
        if np.all(before > 0) and np.all(after > 0):
            out.append((int(t), explained_factor(before, after, gain * (before + after) / w)))
    return out
