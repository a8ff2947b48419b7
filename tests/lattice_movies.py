"""Small lattice-fringe movies for the pattern tests: two crossed cosines (periods 7 and 9 px)
filmed with Poisson counts, optionally drifting, blurring (a sigma ramp, applied to each cosine's
amplitude exactly) and with one disc whose fringes turn at a known frame (its mean stays)."""

from __future__ import annotations

import numpy as np

WAVES = ((7.0, 20.0, 0.25), (9.0, 95.0, 0.2))  # period px, direction deg, contrast


def _fringes(y, x, sigma: float, turn_deg: float = 0.0) -> np.ndarray:
    out = np.ones(np.broadcast(y, x).shape)
    for period, deg, c in WAVES:
        a = np.deg2rad(deg + turn_deg)
        k = 2 * np.pi / period
        out += c * np.exp(-0.5 * (sigma * k) ** 2) * np.cos(k * (np.sin(a) * y + np.cos(a) * x))
    return out


def fringe_movie(n: int, side: int, dose: float, seed: int, drift: float = 0.0,
                 ramp: tuple[float, float] = (0.3, 0.3), turn_at: int | None = None,
                 turn_deg: float = 60.0, disc: tuple[float, float, float] = (32.0, 32.0, 12.0),
                 ) -> np.ndarray:
    """(n, side, side) uint16: drift px/frame along the diagonal, blur sigma from ramp[0] to
    ramp[1] over the movie, beam wander ±3 %, and (turn_at) the disc (y, x, r)'s fringes turned
    by turn_deg about its centre from that frame on."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[:side, :side].astype(np.float64)
    cy, cx, r = disc
    inside = (yy - cy) ** 2 + (xx - cx) ** 2 <= r * r
    out = np.empty((n, side, side), np.uint16)
    for t in range(n):
        sh = drift * t
        sigma = ramp[0] + (ramp[1] - ramp[0]) * t / max(n - 1, 1)
        mu = _fringes(yy + sh, xx + 0.7 * sh, sigma)
        if turn_at is not None and t >= turn_at:
            a = np.deg2rad(turn_deg)
            dy, dx = yy[inside] - cy, xx[inside] - cx
            ry, rx = np.cos(a) * dy - np.sin(a) * dx, np.sin(a) * dy + np.cos(a) * dx
            mu[inside] = _fringes(ry + cy + sh, rx + cx + 0.7 * sh, sigma)
        beam = 1.0 + 0.03 * np.sin(2 * np.pi * t / 500.0)
        out[t] = rng.poisson(mu * dose * beam)
    return out
