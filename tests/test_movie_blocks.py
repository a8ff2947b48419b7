"""The sequential pass (`iter_blocks`) hands out read-only views of mapped blocks for plainly stored
frames; they must equal what numpy and tifffile read, whatever the block size, and a file truncated
during the pass must give BadInput, not a crash."""

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


@pytest.mark.parametrize("make", [_npy, _pages])
@pytest.mark.parametrize("size", [1, 7, 64, 500])
def test_blocks_equal_the_reference_reader(tmp_path, make, size):
    path = make(tmp_path)
    if path.suffix == ".npy":
        reference = np.load(path)
    else:  # every page (imread would return the first series only)
        with tifffile.TiffFile(path) as tif:
            reference = np.stack([page.asarray() for page in tif.pages])
    with open_movie(path) as movie:
        starts, blocks = zip(*movie.iter_blocks(size), strict=True)
        assert list(starts) == list(range(0, len(DATA), size))
        got = np.concatenate(blocks)
        assert np.array_equal(got, reference)
        assert not blocks[0].flags.writeable
        assert np.array_equal(movie.block(3, 40), reference[3:40])


def test_truncated_during_the_pass_is_bad_input(tmp_path):
    path = _npy(tmp_path)
    with open_movie(path) as movie:
        blocks = movie.iter_blocks(32)
        next(blocks)
        with open(path, "r+b") as f:
            f.truncate(path.stat().st_size // 2)
        with pytest.raises(BadInput, match="shorter"):
            for _ in blocks:
                pass
