"""Drawing the specimen: membrane texture, platelets with growth fronts, small islands.

Everything is drawn in specimen coordinates on one canvas of transmission values (1 = bare
membrane on average); the camera view is a window of that canvas at a sub-pixel offset.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


def membrane_texture(rng: np.random.Generator, shape: tuple[int, int], contrast: float,
                     scale_px: float) -> np.ndarray:
    """Smooth random texture around 1.0 (std `contrast`), float32: a carbon film's mottle."""
    from scipy.ndimage import gaussian_filter

    fine = gaussian_filter(rng.standard_normal(shape), scale_px, mode="wrap")
    coarse = gaussian_filter(rng.standard_normal(shape), 4 * scale_px, mode="wrap")
    tex = fine / (fine.std() or 1.0) + 0.5 * coarse / (coarse.std() or 1.0)
    tex /= tex.std() or 1.0
    return np.clip(1.0 + contrast * tex, 0.05, None).astype(np.float32)


def smooth_step(x: np.ndarray) -> np.ndarray:
    """0 below -0.5, 1 above +0.5, smooth (cubic) in between: an anti-aliased edge."""
    s = np.clip(x + 0.5, 0.0, 1.0)
    return s * s * (3.0 - 2.0 * s)


def disc(shape: tuple[int, int], cy: float, cx: float, radius: float,
         edge_px: float = 1.2) -> tuple[tuple[slice, slice], np.ndarray]:
    """Anti-aliased disc coverage (0..1) in a small window; returns (window slices, coverage)."""
    r = int(np.ceil(radius + 2 * edge_px + 1))
    y0, y1 = max(int(cy) - r, 0), min(int(cy) + r + 2, shape[0])
    x0, x1 = max(int(cx) - r, 0), min(int(cx) + r + 2, shape[1])
    yy, xx = np.mgrid[y0:y1, x0:x1]
    dist = np.hypot(yy - cy, xx - cx)
    return (slice(y0, y1), slice(x0, x1)), smooth_step((radius - dist) / edge_px).astype(np.float32)


@dataclass
class Front:
    """A straight platelet facet (growth front) in canvas coordinates.

    The platelet lies on the side u < p(v) of the facet, for |v| <= length/2; u runs along the growth
    normal, v along the facet. `profile` holds the facet's advance p per 1-px bin of v.
    """

    cy: float
    cx: float
    angle: float  # tilt of the facet from horizontal, radians; growth is towards smaller y
    length: float
    contrast: float  # fraction of transmission the platelet removes
    edge_px: float = 1.5
    profile: np.ndarray = field(default=None)  # type: ignore[assignment]
    flow: float = 0.0  # continuous extra advance (step flow), px

    def __post_init__(self) -> None:
        if self.profile is None:
            self.profile = np.zeros(int(np.ceil(self.length)), dtype=np.float64)

    @property
    def normal(self) -> tuple[float, float]:  # (dy, dx), unit, pointing to growth
        return -np.cos(self.angle), np.sin(self.angle)

    @property
    def tangent(self) -> tuple[float, float]:
        return np.sin(self.angle), np.cos(self.angle)

    def uv(self, yy: np.ndarray, xx: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ny, nx = self.normal
        ty, tx = self.tangent
        dy, dx = yy - self.cy, xx - self.cx
        return dy * ny + dx * nx, dy * ty + dx * tx

    def point(self, u: float, v: float) -> tuple[float, float]:
        """Canvas (y, x) of facet coordinates (u, v)."""
        ny, nx = self.normal
        ty, tx = self.tangent
        return self.cy + u * ny + v * ty, self.cx + u * nx + v * tx

    def occupancy(self, yy: np.ndarray, xx: np.ndarray) -> np.ndarray:
        """Platelet coverage (0..1) at canvas points."""
        u, v = self.uv(yy, xx)
        half = self.length / 2
        idx = np.clip(np.floor(v + half).astype(np.int64), 0, len(self.profile) - 1)
        p = self.profile[idx] + self.flow
        inside = smooth_step((half - np.abs(v)) / self.edge_px)
        return (smooth_step((p - u) / self.edge_px) * inside).astype(np.float32)

    def bbox(self, shape: tuple[int, int], margin: float = 4.0) -> tuple[slice, slice]:
        """Canvas window holding the facet and everything a change of its profile can touch."""
        half = self.length / 2 + 2 * self.edge_px
        lo = min(self.profile.min(), 0.0) + self.flow - margin
        hi = self.profile.max() + self.flow + margin
        pts = [self.point(u, v) for u in (lo, hi) for v in (-half, half)]
        ys, xs = [p[0] for p in pts], [p[1] for p in pts]
        y0, y1 = max(int(np.floor(min(ys))) - 2, 0), min(int(np.ceil(max(ys))) + 3, shape[0])
        x0, x1 = max(int(np.floor(min(xs))) - 2, 0), min(int(np.ceil(max(xs))) + 3, shape[1])
        return slice(y0, y1), slice(x0, x1)


class Specimen:
    """The canvas of transmission values: membrane x islands x platelets, updated in place."""

    def __init__(self, texture: np.ndarray, fronts: list[Front]) -> None:
        self.base = texture.copy()  # membrane times islands
        self.texture = texture
        self.fronts = fronts
        self.shape = texture.shape
        yy, xx = np.mgrid[0:self.shape[0], 0:self.shape[1]].astype(np.float32)
        self.occ = [f.occupancy(yy, xx) for f in fronts]
        self.canvas = self.base.copy()
        self._compose((slice(0, self.shape[0]), slice(0, self.shape[1])))

    def _compose(self, win: tuple[slice, slice]) -> None:
        out = self.base[win].copy()
        for f, occ in zip(self.fronts, self.occ, strict=True):
            out *= 1.0 - f.contrast * occ[win]
        self.canvas[win] = out

    def redraw_front(self, k: int) -> None:
        f = self.fronts[k]
        win = f.bbox(self.shape)
        yy, xx = np.mgrid[win[0], win[1]].astype(np.float32)
        self.occ[k][win] = f.occupancy(yy, xx)
        self._compose(win)

    def add_island(self, cy: float, cx: float, radius: float, contrast: float) -> None:
        win, cov = disc(self.shape, cy, cx, radius)
        self.base[win] = self.texture[win] * (1.0 - contrast * cov)
        self._compose(win)

    def remove_island(self, cy: float, cx: float, radius: float) -> None:
        win, _ = disc(self.shape, cy, cx, radius)
        self.base[win] = self.texture[win]
        self._compose(win)

    def platelet_at(self, cy: float, cx: float) -> float:
        """Largest platelet coverage at a canvas point."""
        iy, ix = int(round(cy)), int(round(cx))
        if not (0 <= iy < self.shape[0] and 0 <= ix < self.shape[1]):
            return 1.0
        return max((float(o[iy, ix]) for o in self.occ), default=0.0)


def shifted_window(canvas: np.ndarray, oy: float, ox: float, h: int, w: int) -> np.ndarray:
    """The (h, w) view whose pixel (0, 0) sits at canvas point (oy, ox); bilinear interpolation."""
    iy, ix = int(np.floor(oy)), int(np.floor(ox))
    fy, fx = np.float32(oy - iy), np.float32(ox - ix)
    a = canvas[iy:iy + h + 1, ix:ix + w + 1]
    r = a[:, :-1] + fx * (a[:, 1:] - a[:, :-1])
    return r[:-1] + fy * (r[1:] - r[:-1])
