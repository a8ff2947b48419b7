"""Frame timing read back from files written by tifffile (ImageJ finterval, OME TimeIncrement and
DeltaT), from a `<movie>.times.csv` beside the movie, and the --fps override."""

from __future__ import annotations

import numpy as np
import pytest
import tifffile

from reviewer.errors import BadInput
from reviewer.movie import open_movie
from reviewer.movie.timing import times_csv_path

N, H, W = 20, 16, 24


@pytest.fixture
def frames() -> np.ndarray:
    return np.random.default_rng(1).integers(0, 4000, (N, H, W), dtype=np.uint16)


def test_imagej_finterval(tmp_path, frames):
    path = tmp_path / "ij.tif"
    tifffile.imwrite(path, frames, imagej=True, metadata={"axes": "TYX", "finterval": 0.0025})
    with open_movie(path) as m:
        assert m.fps == pytest.approx(400.0) and m.timing.source == "ImageJ finterval"
        assert m.duration_s == pytest.approx(N * 0.0025)
        assert m.timing.time_of(10) == pytest.approx(0.025)


def test_imagej_finterval_in_milliseconds(tmp_path, frames):
    path = tmp_path / "ij_ms.tif"
    tifffile.imwrite(path, frames, imagej=True,
                     metadata={"axes": "TYX", "finterval": 2.5, "tunit": "ms"})
    with open_movie(path) as m:
        assert m.fps == pytest.approx(400.0)


def test_ome_time_increment(tmp_path, frames):
    path = tmp_path / "inc.ome.tif"
    tifffile.imwrite(path, frames, ome=True, metadata={"axes": "TYX", "TimeIncrement": 0.004})
    with open_movie(path) as m:
        assert m.fps == pytest.approx(250.0) and m.timing.source == "OME TimeIncrement"


def test_ome_plane_delta_t(tmp_path, frames):
    times = np.cumsum(np.r_[0.0, np.full(N - 1, 0.002)]) + 5.0
    times[10:] += 0.001  # an uneven gap: per-plane times must win over a rate
    path = tmp_path / "dt.ome.tif"
    tifffile.imwrite(path, frames, ome=True,
                     metadata={"axes": "TYX", "TimeIncrement": 0.002, "Plane": {"DeltaT": list(times)}})
    with open_movie(path) as m:
        assert m.timing.source == "OME DeltaT" and m.fps is None
        np.testing.assert_allclose(m.timing.times_s, times - times[0])


def test_times_csv_beside_movie(tmp_path, frames):
    path = tmp_path / "m.npy"
    np.save(path, frames)
    times = 0.01 * np.arange(N) ** 1.1
    csv = times_csv_path(path)
    assert csv.name == "m.npy.times.csv"
    csv.write_text("frame,time_s\n" + "".join(f"{i},{t:.9f}\n" for i, t in enumerate(times)))
    with open_movie(path) as m:
        assert m.timing.source.startswith("times CSV")
        np.testing.assert_allclose(m.timing.times_s, times)
    with open_movie(path, fps=50.0) as m:  # --fps overrides everything
        assert m.fps == 50.0 and m.timing.source == "--fps" and m.timing.times_s is None


def test_fps_overrides_file_metadata(tmp_path, frames):
    path = tmp_path / "ij.tif"
    tifffile.imwrite(path, frames, imagej=True, metadata={"axes": "TYX", "finterval": 0.0025})
    with open_movie(path, fps=30.0) as m:
        assert m.fps == 30.0 and m.duration_s == pytest.approx(N / 30.0)


def test_no_timing_is_none(tmp_path, frames):
    np.save(tmp_path / "m.npy", frames)
    with open_movie(tmp_path / "m.npy") as m:
        assert m.fps is None and m.duration_s is None and not m.timing.known


@pytest.mark.parametrize("text", ["frame,time_s\n0,0\n1,x\n", "time,frame\n", "frame,time_s\n0,0\n1,0\n",
                                  "frame,time_s\n0,0\n"])
def test_bad_times_csv(tmp_path, frames, text):
    path = tmp_path / "m.npy"
    np.save(path, frames[:2])
    times_csv_path(path).write_text(text)
    with pytest.raises(BadInput, match=r"m\.npy\.times\.csv: "):
        open_movie(path)
