"""The sequential pass (`iter_blocks`) must give what numpy and tifffile read, whatever the block
size: fresh arrays by default, one reused buffer with reuse=True (the scan's fast path, where the
caller copies what it keeps); a file truncated during the pass gives BadInput, not a crash."""

from __future__ import annotations

import numpy as np
import pytest
import tifffile

from reviewer.errors import BadInput
from reviewer.movie import open_movie

RNG = np.random.default_rng(5)
DATA = RNG.integers(0, 60_000, size=(130, 16, 24), dtype=np.uint16)


def _npy(tmp_path):
    path = tmp_path / "m.npy"
    np.save(path, DATA)  # reference writer: numpy
    return path


def _pages(tmp_path):
    path = tmp_path / "m.tif"
    with tifffile.TiffWriter(path) as w:  # reference writer: tifffile, one IFD per frame
        for frame in DATA:
            w.write(frame, contiguous=False)
    return path


def _reference(path):
    if path.suffix == ".npy":
        return np.load(path)
    with tifffile.TiffFile(path) as tif:  # every page (imread would return the first series only)
        return np.stack([page.asarray() for page in tif.pages])


@pytest.mark.parametrize("make", [_npy, _pages])
@pytest.mark.parametrize("size", [1, 7, 64, 500])
@pytest.mark.parametrize("reuse", [False, True])
def test_blocks_equal_the_reference_reader(tmp_path, make, size, reuse):
    path = make(tmp_path)
    reference = _reference(path)
    with open_movie(path) as movie:
        starts, blocks = [], []
        for start, block in movie.iter_blocks(size, reuse=reuse):
            starts.append(start)
            blocks.append(block.copy() if reuse else block)
        assert starts == list(range(0, len(DATA), size))
        assert np.array_equal(np.concatenate(blocks), reference)
        assert np.array_equal(movie.block(3, 40), reference[3:40])


def test_default_blocks_are_independent_arrays(tmp_path):
    with open_movie(_npy(tmp_path)) as movie:
        first, second = [b for _, b in movie.iter_blocks(64)][:2]
        assert not np.shares_memory(first, second)


def test_truncated_during_the_pass_is_bad_input(tmp_path):
    path = _npy(tmp_path)
    with open_movie(path) as movie:
        blocks = movie.iter_blocks(32, reuse=True)
        next(blocks)
        with open(path, "r+b") as f:
            f.truncate(path.stat().st_size // 2)
        with pytest.raises(BadInput, match="truncated"):
            for _ in blocks:
                pass
