"""The RosettaSciIO adapter (extra `formats`), on files RosettaSciIO itself writes: Semper .unf and
Ripple .rpl + .raw stacks with a time axis; registered through our own `reviewer.readers` entry point."""

from __future__ import annotations

import csv
import json
from importlib.metadata import entry_points

import numpy as np
import pytest

from reviewer.cli import main
from reviewer.movie import open_movie

pytest.importorskip("rsciio")

N, H, W, STEP = 80, 20, 28, 40


def step_movie():
    lam = np.full((N, H, W), 40.0)
    lam[STEP:, 8:11, 4:24] *= 0.4
    return np.random.default_rng(12).poisson(lam).astype(np.uint16)


def signal(data, dt_s, pixel_nm):
    """A signal dict as RosettaSciIO's writers take it (one navigation axis: time)."""
    axes = [{"name": "time", "size": data.shape[0], "scale": dt_s, "offset": 0.0, "units": "s",
             "navigate": True},
            {"name": "y", "size": data.shape[1], "scale": pixel_nm, "offset": 0.0, "units": "nm",
             "navigate": False},
            {"name": "x", "size": data.shape[2], "scale": pixel_nm, "offset": 0.0, "units": "nm",
             "navigate": False}]
    return {"data": data, "axes": axes, "original_metadata": {},
            "metadata": {"General": {"title": "step"}, "Signal": {"signal_type": ""}}}


def test_adapter_is_registered_as_an_entry_point():
    names = {ep.value for ep in entry_points(group="reviewer.readers")}
    assert "reviewer.movie.sciio:open_with_rsciio" in names


@pytest.mark.parametrize(("suffix", "module", "dtype"), [(".unf", "semper", np.int16),
                                                         (".rpl", "ripple", np.uint16)])
def test_rosettasciio_written_stack(tmp_path, capsys, suffix, module, dtype):
    import importlib

    writer = importlib.import_module(f"rsciio.{module}").file_writer
    data = step_movie().astype(dtype)
    p = tmp_path / f"stack{suffix}"
    writer(str(p), signal(data, 0.005, 0.25))
    assert main(["info", str(p), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert (d["frames"], d["height"], d["width"], d["dtype"]) == (N, H, W, np.dtype(dtype).name)
    assert d["fps"] == pytest.approx(200.0, rel=1e-6)  # Semper stores the scale as float32
    if module == "ripple":  # Semper keeps no units
        assert d["pixel_size_nm"] == pytest.approx(0.25)
    with open_movie(p) as m:
        np.testing.assert_array_equal(m.block(0, N), data)
        np.testing.assert_array_equal(m.frame(61), data[61])
    out = tmp_path / "found.csv"
    assert main(["scan", str(p), "-o", str(out)]) == 0
    with open(out, newline="") as f:
        assert any(abs(int(r["frame"]) - STEP) <= 1 for r in csv.DictReader(f))


def test_animated_gif_written_by_pillow(tmp_path):
    from PIL import Image, ImageSequence

    frames = (step_movie()[:12] * 3).clip(0, 255).astype(np.uint8)
    p = tmp_path / "anim.gif"
    images = [Image.fromarray(f) for f in frames]
    images[0].save(p, save_all=True, append_images=images[1:], duration=40)
    with Image.open(p) as im:  # Pillow's own decoding, as RGB, is the reference
        rgb = np.stack([np.asarray(f.convert("RGB")) for f in ImageSequence.Iterator(im)])
    # ITU-R BT.601 luma weights
    expect = rgb.astype(np.float32) @ np.array([0.299, 0.587, 0.114], np.float32)
    with open_movie(p) as m:
        assert (m.n_frames, m.shape) == (12, (H, W))
        np.testing.assert_allclose(m.block(0, 12), expect, rtol=1e-5, atol=1e-3)
