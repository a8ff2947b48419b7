"""Bad input through the command line: exit code 2 and one line on stderr naming the file."""

from __future__ import annotations

import time

import numpy as np
import pytest
import tifffile

from reviewer.cli import main


def _empty(tmp_path):
    p = tmp_path / "empty.tif"
    p.write_bytes(b"")
    return p


def _truncated_tiff(tmp_path):
    p = tmp_path / "cut.tif"
    tifffile.imwrite(p, np.ones((20, 16, 24), np.uint16), imagej=True, metadata={"axes": "TYX"})
    p.write_bytes(p.read_bytes()[:150])  # header and part of the first IFD: nothing readable
    return p


def _truncated_tiff_before_pixels(tmp_path):
    p = tmp_path / "cut2.tif"
    with tifffile.TiffWriter(p) as w:
        for f in np.ones((5, 16, 24), np.uint16):
            w.write(f, contiguous=False)
    with tifffile.TiffFile(p) as tif:
        start = tif.pages.first.dataoffsets[0]
    p.write_bytes(p.read_bytes()[:start + 10])  # IFD whole, first frame cut
    return p


def _text_as_tif(tmp_path):
    p = tmp_path / "notes.tif"
    p.write_text("these are my notes, not an image\n")
    return p


def _random_npy(tmp_path):
    p = tmp_path / "noise.npy"
    p.write_bytes(np.random.default_rng(0).bytes(4096))
    return p


def _missing(tmp_path):
    return tmp_path / "nowhere.tif"


def _empty_folder(tmp_path):
    p = tmp_path / "frames"
    p.mkdir()
    return p


def _unknown_suffix(tmp_path):
    p = tmp_path / "movie.xyz"
    p.write_bytes(b"\x00\x01" * 100)
    return p


def _bad_png(tmp_path):
    p = tmp_path / "pngs"
    p.mkdir()
    (p / "f1.png").write_bytes(b"\x89PNG\r\n\x1a\n broken")
    return p


def _object_npy(tmp_path):
    p = tmp_path / "obj.npy"
    np.save(p, np.array([{"a": 1}], dtype=object), allow_pickle=True)
    return p


CASES = [_empty, _truncated_tiff, _truncated_tiff_before_pixels, _text_as_tif, _random_npy, _missing,
         _empty_folder, _unknown_suffix, _bad_png, _object_npy]


@pytest.mark.parametrize("make", CASES, ids=[c.__name__.strip("_") for c in CASES])
@pytest.mark.parametrize("as_json", [False, True])
def test_bad_input_exit_2_one_line(tmp_path, capsys, make, as_json):
    path = make(tmp_path)
    started = time.monotonic()
    code = main(["info", str(path)] + (["--json"] if as_json else []))
    elapsed = time.monotonic() - started
    out, err = capsys.readouterr()
    assert code == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert str(path) in lines[0] and "Traceback" not in err
    assert elapsed < 10  # "within seconds": a generous bound against hangs, not a speed test


def test_bad_fps_option(tmp_path, capsys):
    np.save(tmp_path / "m.npy", np.zeros((3, 4, 5), np.uint16))
    with pytest.raises(SystemExit) as exc:
        main(["info", str(tmp_path / "m.npy"), "--fps", "-3"])
    assert exc.value.code == 2
    assert "positive" in capsys.readouterr().err
