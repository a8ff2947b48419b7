"""Single-linkage clusters of event places at a distance cut, in O(n) memory.

Two events share a cluster when a chain of events joins them with every step at most `radius` apart
(the flat clusters of single linkage cut at `radius`, as scipy's fcluster(linkage(xy, 'single'), t,
'distance') gives them, without its n^2 / 2 distance matrix).

How: a grid of cells radius / sqrt(2) wide, so any two events in one cell are within radius of each
other; only cells at most two apart can hold linked events. Pairs of neighbouring cells with few
events are checked all at once (numpy, in bounded chunks); crowded pairs one by one with a k-d tree,
skipped when the two cells are already joined.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

SMALL_PAIR = 4_096     # cell pairs with at most this many event pairs are checked by brute force
CHUNK_PAIRS = 2_000_000  # event pairs held at once by the brute-force check
OFFSETS = [(di, dj) for di in range(0, 3) for dj in range(-2, 3) if di > 0 or dj > 0]


class _Joined:
    """Union-find over cells (path halving)."""

    def __init__(self, n: int) -> None:
        self.parent = np.arange(n)

    def find(self, a: int) -> int:
        p = self.parent
        while p[a] != a:
            p[a] = p[p[a]]
            a = p[a]
        return int(a)

    def join(self, a: int, b: int) -> None:
        ra, rb = self.find(a), self.find(b)
        if ra != rb:
            self.parent[max(ra, rb)] = min(ra, rb)


def _ranks(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    uniq = np.unique(values)
    return uniq, np.searchsorted(uniq, values)


def _lookup(sorted_values: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """Index of each wanted value in sorted_values, -1 where absent."""
    i = np.searchsorted(sorted_values, wanted)
    i = np.minimum(i, sorted_values.size - 1)
    return np.where(sorted_values[i] == wanted, i, -1)


def _small_links(xy, order, start, size, a, b, r2) -> tuple[np.ndarray, np.ndarray]:
    """Of the cell pairs (a, b), those with an event pair within the radius (all pairs checked)."""
    count = size[a] * size[b]
    cum = np.cumsum(count)
    keep_a, keep_b = [], []
    lo = 0
    while lo < a.size:
        base = int(cum[lo - 1]) if lo else 0
        hi = max(lo + 1, int(np.searchsorted(cum, base + CHUNK_PAIRS, side="right")))
        ca, cb, cnt = a[lo:hi], b[lo:hi], count[lo:hi]
        pair = np.repeat(np.arange(ca.size), cnt)
        local = np.arange(pair.size) - np.repeat(np.cumsum(cnt) - cnt, cnt)
        ia = order[start[ca][pair] + local // size[cb][pair]]
        ib = order[start[cb][pair] + local % size[cb][pair]]
        d = xy[ia] - xy[ib]
        near = np.unique(pair[np.einsum("ij,ij->i", d, d) <= r2])
        keep_a.append(ca[near])
        keep_b.append(cb[near])
        lo = hi
    if not keep_a:
        return np.zeros(0, int), np.zeros(0, int)
    return np.concatenate(keep_a), np.concatenate(keep_b)


def single_linkage(xy: np.ndarray, radius: float) -> np.ndarray:
    """Cluster number (0, 1, ...) of each row of xy (n x 2, finite), at the distance cut `radius`."""
    xy = np.asarray(xy, dtype=float)
    n = len(xy)
    if n == 0:
        return np.zeros(0, int)
    side = radius / math.sqrt(2)
    grid = np.floor((xy - xy.min(axis=0)) / side)
    ux, rx = _ranks(grid[:, 0])
    uy, ry = _ranks(grid[:, 1])
    key = rx.astype(np.int64) * uy.size + ry
    cells, cell_of = np.unique(key, return_inverse=True)
    m = cells.size
    order = np.argsort(cell_of, kind="stable")
    size = np.bincount(cell_of, minlength=m)
    start = np.cumsum(size) - size
    cx, cy = ux[cells // uy.size], uy[cells % uy.size]
    r2 = radius * radius
    edges_a, edges_b, crowded = [], [], []
    for di, dj in OFFSETS:
        tx, ty = _lookup(ux, cx + di), _lookup(uy, cy + dj)
        ok = (tx >= 0) & (ty >= 0)
        other = np.full(m, -1)
        other[ok] = _lookup(cells, tx[ok].astype(np.int64) * uy.size + ty[ok])
        a = np.flatnonzero(other >= 0)
        b = other[a]
        small = size[a] * size[b] <= SMALL_PAIR
        la, lb = _small_links(xy, order, start, size, a[small], b[small], r2)
        edges_a.append(la)
        edges_b.append(lb)
        crowded.append(np.column_stack([a[~small], b[~small]]))
    ea, eb = np.concatenate(edges_a), np.concatenate(edges_b)
    graph = coo_matrix((np.ones(ea.size), (ea, eb)), shape=(m, m))
    _, comp = connected_components(graph, directed=False)
    joined = _Joined(m)
    root = np.full(comp.max() + 1, m)
    np.minimum.at(root, comp, np.arange(m))
    joined.parent = root[comp]  # each cell points at the first cell of its component so far
    for ca, cb in np.concatenate(crowded):
        if joined.find(int(ca)) == joined.find(int(cb)):
            continue
        pa = xy[order[start[ca]:start[ca] + size[ca]]]
        pb = xy[order[start[cb]:start[cb] + size[cb]]]
        dist, _ = cKDTree(pb).query(pa, k=1, distance_upper_bound=radius * (1 + 1e-12))
        if np.any(dist <= radius):
            joined.join(int(ca), int(cb))
    _, labels = np.unique(_all_roots(joined), return_inverse=True)
    return labels[cell_of]


def _all_roots(joined: _Joined) -> np.ndarray:
    """Every cell's root, vectorised (repeated pointer jumping)."""
    p = joined.parent
    while True:
        q = p[p]
        if np.array_equal(q, p):
            return p
        p = q
