"""The dim-front statistic (reviewer/detect/fronts.py): its projections against a direct
computation, its noise model against the Poisson law, and what it finds."""

from __future__ import annotations

import numpy as np
from scipy import ndimage, stats

from reviewer.detect import DetectSettings, scan_movie
from reviewer.detect.fronts import (
    FrontDelay,
    front_images,
    project,
    sparse_template,
    template,
)
from reviewer.detect.reduce import Scratch
from reviewer.detect.statistics import column_median
from reviewer.movie import ArrayMovie


def edge_scene(h: int, w: int, edge_y: float, contrast: float = 0.45, seg=None) -> np.ndarray:
    """Transmission of a dark platelet below a horizontal edge at edge_y (anti-aliased over
    ~1.5 px); with seg = (x0, x1, dy) the edge between x0 and x1 is advanced by dy px."""
    yy, xx = np.mgrid[:h, :w].astype(np.float64)
    y = np.full(w, edge_y)
    if seg is not None:
        y[seg[0]: seg[1]] -= seg[2]
    cover = np.clip((yy - y[None, :]) / 1.5 + 0.5, 0, 1)
    rng = np.random.default_rng(7)
    tex = 1 + 0.05 * ndimage.gaussian_filter(rng.standard_normal((h, w)), 2) / 0.1
    return tex * (1 - contrast * cover)


def _delayed(frames, tile=8):
    n, h, w = frames.shape
    fd = FrontDelay(h // tile, w // tile, tile, 1, reach=48)
    out = []
    for s in range(0, n, 50):
        blk = frames[s: s + 50]
        out += fd.push(blk.reshape(len(blk), h // tile, tile, w // tile, tile).sum(axis=(2, 4)),
                       blk)
    out += fd.flush()
    return fd, out


def test_front_values_match_a_direct_weighted_sum():
    # every frame of an epoch but the template's own (every 4th, corrected) reads Σ g·x over
    # each tile's template pixels, g made from the mean of every 4th frame; the next epoch's
    # frames read the same template (prev values): checked against numpy directly
    rng = np.random.default_rng(1)
    n, h, w, tile = 300, 32, 48, 8
    frames = rng.poisson(20 * edge_scene(h, w, 17.3), (n, h, w)).astype(np.uint16)
    fd, out = _delayed(frames)
    front = np.concatenate([f for _, _, f in out])
    assert [s for s, _, _ in out] == [0, 128, 256]
    for e in (0, 1):
        rows = np.arange(e * 128, (e + 1) * 128)
        sp = sparse_template(template(frames[rows[::4]].mean(axis=0)), h // tile, w // tile,
                             tile)
        used = np.concatenate([rows[rows % 4 != 0], rows + 128])
        used = used[used < n]
        direct = project(frames[used].reshape(len(used), -1).astype(np.float64), sp, 24)
        # as FrontDelay.series reads them: this epoch's own values, the next one's prev values
        got = np.where((used // 128 == e + 1)[:, None], front[used, 1].reshape(len(used), -1),
                       front[used, 0].reshape(len(used), -1))
        np.testing.assert_allclose(got, direct, rtol=1e-4, atol=1e-3)


def test_front_images_are_the_block_sums_skimage_gives():
    # skimage.measure.block_reduce(np.sum) as the reference; uint16 sums that fit, sums that
    # would overflow uint16 (float32 path), an edge that does not fill a bin (dropped), b = 4
    from skimage.measure import block_reduce

    rng = np.random.default_rng(5)
    sc = Scratch()
    for top, b in ((200, 2), (200, 4), (40000, 2)):
        block = rng.integers(0, top, (3, 37, 42)).astype(np.uint16)
        got = front_images(block, b, sc)
        h, w = 37 // b * b, 42 // b * b
        ref = block_reduce(block[:, :h, :w].astype(np.int64), (1, b, b), np.sum)
        assert got.shape == ref.shape
        assert np.array_equal(got.astype(np.int64), ref)


def test_trend_median_is_numpys():
    # np.median as the reference: odd and even counts, ties (integer values), one row
    rng = np.random.default_rng(2)
    for rows in (1, 2, 15, 16):
        for d in (rng.standard_normal((rows, 300)), rng.integers(0, 3, (rows, 300))):
            d = d.astype(np.float32)
            assert np.array_equal(column_median(d), np.median(d, axis=0))


def test_no_step_where_the_template_changes():
    # pure Poisson noise on a flat field: the templates are made of noise; a template made from
    # a frame's own counts would lean towards that frame (a false step at every epoch's end).
    # Under one template, the last frames of an epoch and the first of the next read alike:
    # their difference per tile, in units of its sd, is standard normal (scipy.stats.norm)
    rng = np.random.default_rng(3)
    frames = rng.poisson(10.0, (512, 32, 32)).astype(np.uint16)
    fd, out = _delayed(frames)
    front = np.concatenate([f for _, _, f in out])
    z = []
    for e in (0, 1, 2):
        rows = np.arange(e * 128 + 64, e * 128 + 192)
        ser = fd.series(front[rows, 0], front[rows, 1], int(rows[0]), e).reshape(len(rows), -1)
        a, b = ser[:64], ser[64:]
        sd = np.sqrt(a.var(axis=0, ddof=1) / 64 + b.var(axis=0, ddof=1) / 64)
        used = sd > 0  # tiles without template pixels read 0
        z.append((b.mean(axis=0)[used] - a.mean(axis=0)[used]) / sd[used])
    z = np.concatenate(z)
    assert stats.kstest(z, stats.norm.cdf).pvalue > 1e-3
    assert abs(float(np.mean(z))) < 4 / np.sqrt(len(z))


def test_front_noise_follows_the_poisson_model():
    # with Poisson counts the front value of a tile has variance Σ g²·λ; standardised values of
    # many frames: their sum of squares per tile is chi-square with n degrees of freedom
    # (scipy.stats.chi2), checked over all tiles at once
    rng = np.random.default_rng(2)
    n, h, w, tile = 400, 32, 32, 8
    lam = 8 * edge_scene(h, w, 15.6)
    frames = rng.poisson(lam, (n, h, w))
    sp = sparse_template(template(lam), h // tile, w // tile, tile)
    vals = project(frames.reshape(n, -1).astype(np.float64), sp, 16)
    mean = project(lam.reshape(1, -1), sp, 16)[0]
    var = project(lam.reshape(1, -1), type(sp)(sp.idx, sp.w ** 2, sp.starts, sp.tiles), 16)[0]
    used = var > 0
    z = (vals[:, used] - mean[used]) / np.sqrt(var[used])
    ss = float((z ** 2).sum())
    dof = z.size
    assert stats.chi2.sf(ss, dof) > 1e-3 and stats.chi2.cdf(ss, dof) > 1e-3


def _edge_movie(n: int, dose: float, advance: float, at: int, seed: int,
                drift: float = 0.0) -> np.ndarray:
    rng = np.random.default_rng(seed)
    h, w = 64, 96
    out = np.empty((n, h, w), np.uint16)
    for t in range(n):
        seg = (24, 72, advance) if t >= at else None
        out[t] = rng.poisson(dose * edge_scene(h, w, 40.2 - drift * t, seg=seg))
    return out


def test_a_half_pixel_advance_of_a_dim_edge_is_found():
    # 6 counts/px, a 48-px stretch of edge advances 0.5 px: per-pixel SNR far below 1, pooled
    # along the front above the threshold (measured: calibrated score 8.3; the tile sums alone
    # found nothing in this movie)
    movie = _edge_movie(800, 6.0, 0.5, 430, seed=3)
    c = scan_movie(ArrayMovie(movie), DetectSettings(fronts=True)).candidates
    local = c[c["kind"] != "global"]
    assert ((local["frame"] - 430).abs() <= 2).sum() == 1
    assert len(local) == 1
    tiles_only = scan_movie(ArrayMovie(movie)).candidates  # the default: tile sums only
    assert not ((tiles_only["frame"] - 430).abs() <= 2).any()


def test_a_slowly_drifting_edge_gives_no_candidate():
    # the same edge drifting 0.4 px over the movie (no event): the front statistic sees drift as
    # a displacement too, slow enough to stay below the threshold
    movie = _edge_movie(800, 12.0, 0.0, 10**9, seed=4, drift=0.0005)
    c = scan_movie(ArrayMovie(movie), DetectSettings(fronts=True)).candidates
    assert len(c) == 0
