"""Reading ahead in pieces: the caller gets the same blocks, on the same frame numbers, whatever the
piece size; the scan's features do not depend on it."""

from __future__ import annotations

import numpy as np
import pytest

from reviewer.detect import DetectSettings, readahead
from reviewer.detect.readahead import piece_frames, read_ahead
from reviewer.detect.split import _Frames
from reviewer.detect.stream import compute_features
from reviewer.movie import ArrayMovie


def _frames(n=203, h=24, w=16, seed=3):
    return np.random.default_rng(seed).integers(0, 900, (n, h, w)).astype(np.uint16)


def _sums(block):
    return block.sum(axis=(1, 2), dtype=np.int64)


@pytest.mark.parametrize("piece", [1, 2, 4, 8])
def test_blocks_are_the_same_whatever_the_piece(piece):
    data = _frames()
    got = list(read_ahead(ArrayMovie(data), 8, _sums, piece=piece))
    # the blocks a plain loop over the array makes (numpy slicing, every 8 frames from 0)
    want = [(s, min(8, len(data) - s), data[s: s + 8].sum(axis=(1, 2))) for s in range(0, len(data), 8)]
    assert [(s, k) for s, k, _ in got] == [(s, k) for s, k, _ in want]
    for (_, _, a), (_, _, b) in zip(got, want, strict=True):
        np.testing.assert_array_equal(a, b)


def test_a_part_keeps_the_whole_scans_block_ends():
    data = _frames()
    part = _Frames(ArrayMovie(data), 37, 150)  # numbered from frame 37, as split.py reads a part
    got = list(read_ahead(part, 8, _sums, piece=2, origin=37))
    # blocks end on multiples of 8 in the movie's own numbering (40, 48, ...) and at the part's end
    assert [37 + s + k for s, k, _ in got] == [*range(40, 150, 8), 150]
    flat = np.concatenate([out for _, _, out in got])
    np.testing.assert_array_equal(flat, data[37:150].sum(axis=(1, 2)))


def test_piece_sizes_divide_the_block():
    assert piece_frames(64, 512 * 512 * 2) == 16        # 8 MiB of 512² uint16 frames
    assert piece_frames(4, 2048 * 2048 * 2) == 1
    assert piece_frames(64, 128 * 128 * 2) == 64        # small frames: the whole block
    assert piece_frames(48, 3 << 20) == 2               # the largest divisor that fits
    with pytest.raises(ValueError):
        next(read_ahead(ArrayMovie(_frames()), 8, _sums, piece=3))


@pytest.mark.parametrize("fronts", [False, True])
def test_scan_features_do_not_depend_on_the_piece_size(monkeypatch, fronts):
    data = np.random.default_rng(5).poisson(30.0, (700, 64, 64)).astype(np.uint16)
    data[400:, 8:24, 8:24] //= 2  # a dark patch appears
    s = DetectSettings(fronts=fronts)
    whole, _ = compute_features(ArrayMovie(data), s)
    monkeypatch.setattr(readahead, "PIECE_BYTES", 3 * 64 * 64 * 2)  # pieces of 2 frames
    pieces, _ = compute_features(ArrayMovie(data), s)
    for name, a in whole.items():
        np.testing.assert_array_equal(a, pieces[name], err_msg=name)
