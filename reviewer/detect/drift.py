"""Whole-field shift between two images by cross-correlation with sub-pixel refinement.

The cross-power spectrum is used without phase normalisation (under shot noise the normalised phase
correlation fails) and weighted by a Gaussian (the same as blurring both images by `blur` px); the peak
is refined by a matrix-multiply DFT upsampled around it (Guizar-Sicairos, Thurman & Fienup, Opt. Lett.
33:156, 2008).
"""

from __future__ import annotations

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


def explained_shift(before: np.ndarray, after: np.ndarray,
                    upsample: int = 10) -> tuple[float, float]:
    """Whole-field shift (in grid units) from `before` to `after` and the share of their
    difference's energy that the shift explains: 1 − E|after − shifted before|² / E|after −
    before|², over the part of the field that stays inside both (a stage jump is explained
    almost wholly, a local change hardly at all, whatever shift the correlation reports)."""
    dy, dx, _ = phase_shift(before, after, upsample=upsample)
    a = np.asarray(before, dtype=np.float64)
    b = np.asarray(after, dtype=np.float64)
    ky = np.fft.fftfreq(a.shape[0])[:, None]
    kx = np.fft.fftfreq(a.shape[1])[None, :]
    moved = np.fft.ifft2(np.fft.fft2(a) * np.exp(-2j * np.pi * (ky * dy + kx * dx))).real
    my, mx = int(np.ceil(abs(dy))), int(np.ceil(abs(dx)))  # the part the shift wrapped round
    inner_size = max(a.shape[0] - 2 * my, 0) * max(a.shape[1] - 2 * mx, 0)
    if inner_size < max(MIN_INNER, MIN_INNER_SHARE * a.size):
        return float(np.hypot(dy, dx)), 0.0  # too little left to judge: not a whole-field shift
    inner = (slice(my, a.shape[0] - my), slice(mx, a.shape[1] - mx))
    e0 = float(np.mean((b - a)[inner] ** 2))
    e1 = float(np.mean((b - moved)[inner] ** 2))
    return float(np.hypot(dy, dx)), (1.0 - e1 / e0) if e0 > 0 else 0.0
