"""`reviewer info` on the same movie held in every container (acceptance line of the issue): the frame
count must be right everywhere, and the fps wherever the file stores it. Files written by the reference
libraries tifffile, numpy and Pillow."""

from __future__ import annotations

import json

import numpy as np
import pytest
import tifffile
from PIL import Image

from reviewer.cli import main

N, H, W, FPS = 20, 16, 24, 400.0


@pytest.fixture(scope="module")
def containers(tmp_path_factory):
    root = tmp_path_factory.mktemp("same_movie")
    data = np.random.default_rng(4).integers(0, 4096, (N, H, W), dtype=np.uint16)
    fps = {}
    tifffile.imwrite(root / "imagej.tif", data, imagej=True,
                     metadata={"axes": "TYX", "finterval": 1 / FPS})
    fps["imagej.tif"] = FPS
    with tifffile.TiffWriter(root / "pages.tif") as w:
        for f in data:
            w.write(f, contiguous=False)
    tifffile.imwrite(root / "big.tif", data, bigtiff=True)
    tifffile.imwrite(root / "ome.ome.tif", data, ome=True,
                     metadata={"axes": "TYX", "TimeIncrement": 1 / FPS})
    fps["ome.ome.tif"] = FPS
    tifffile.imwrite(root / "zlib.tif", data, compression="zlib")
    np.save(root / "movie.npy", data)
    (root / "pngs").mkdir()
    for i, f in enumerate(data):
        Image.fromarray(f).save(root / "pngs" / f"frame{i}.png")
    return root, data, fps


@pytest.mark.parametrize("name", ["imagej.tif", "pages.tif", "big.tif", "ome.ome.tif", "zlib.tif",
                                  "movie.npy", "pngs"])
def test_info_json_same_movie(containers, capsys, name):
    root, data, fps = containers
    assert main(["info", "--json", str(root / name)]) == 0
    out, err = capsys.readouterr()
    d = json.loads(out)
    assert (d["frames"], d["height"], d["width"], d["dtype"]) == (N, H, W, "uint16")
    if name in fps:
        assert d["fps"] == pytest.approx(fps[name])
        assert d["duration_s"] == pytest.approx(N / fps[name])
    else:
        assert d["fps"] is None and d["duration_s"] is None
    assert d["layout"] and d["file_size"] > 0


def test_info_text_and_fps_override(containers, capsys):
    root, _, _ = containers
    assert main(["info", str(root / "pages.tif"), "--fps", "50"]) == 0
    out, _ = capsys.readouterr()
    assert "frames    20" in out and "fps       50" in out and "--fps" in out


def test_info_notices_go_to_stderr(tmp_path, capsys):
    np.save(tmp_path / "one.npy", np.zeros((8, 9), np.uint16))
    assert main(["info", str(tmp_path / "one.npy")]) == 0
    out, err = capsys.readouterr()
    assert "1-frame movie" in err and "1-frame movie" not in out
