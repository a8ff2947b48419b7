"""x_nm, y_nm in the export: from --pixel-size, the review's pixel size, or the movie's own; the
sidecar says which. Movies written with h5py (an attribute, as in tests/test_movie_pixel_size.py)."""

from __future__ import annotations

import json

import h5py
import numpy as np
import pandas as pd
import pytest

from reviewer.cli import main
from reviewer.commands.review import check_session_options, set_session_options
from reviewer.movie import open_movie
from reviewer.store.export import parse_pixel_size
from reviewer.store.session import Session

FRAMES = np.random.default_rng(1).integers(0, 500, (60, 16, 20), dtype=np.uint16)
X, Y = [3.25, 10.0, np.nan], [4.5, 12.0, np.nan]


def _reviewed(path, **attrs):
    if path.suffix == ".h5":
        with h5py.File(path, "w") as f:
            f.create_dataset("frames", data=FRAMES).attrs.update(attrs)
    else:
        np.save(path, FRAMES)
    movie = open_movie(path, fps=100.0)
    with Session.open(movie.path, movie.fingerprint, meta={"frames": 60, "fps": 100.0}) as s:
        s.seed(pd.DataFrame({"frame": [5, 20, 40], "kind": ["step", "step", "global"],
                             "x": X, "y": Y}))
        s.accept("d000000")
    movie.close()
    return path


def _export(capsys, path, *extra):
    out = path.with_name("out.events.csv")
    assert main(["export", str(path), "--fps", "100", "-o", str(out), *extra]) == 0, \
        capsys.readouterr().err
    df = pd.read_csv(out, dtype={"event_id": str})
    return df, json.loads(out.with_suffix(".json").read_text())


def test_pixel_size_stored_with_the_movie(tmp_path, capsys):
    path = _reviewed(tmp_path / "m.h5", pixel_size_nm=0.3)
    df, info = _export(capsys, path)
    assert info["pixel_size_nm"] == pytest.approx(0.3)
    assert info["pixel_size_source"].startswith("movie metadata")
    assert df["x_nm"].tolist()[:2] == pytest.approx([3.25 * 0.3, 10.0 * 0.3])
    assert df["y_nm"].tolist()[:2] == pytest.approx([4.5 * 0.3, 12.0 * 0.3])
    assert df["x_nm"].isna().tolist() == [False, False, True]  # a global event has no place


@pytest.mark.parametrize(("text", "nm"), [("0.5A", 0.05), ("0.5 Å", 0.05), ("50pm", 0.05),
                                          ("0.002um", 2.0), ("0.07nm", 0.07)])
def test_pixel_size_given_wins_over_the_movie(tmp_path, capsys, text, nm):
    path = _reviewed(tmp_path / "m.h5", pixel_size_nm=0.3)
    df, info = _export(capsys, path, "--pixel-size", text)
    assert info["pixel_size_nm"] == pytest.approx(nm) and info["pixel_size_source"] == "--pixel-size"
    assert df["x_nm"].iloc[1] == pytest.approx(10.0 * nm)


def test_unknown_pixel_size_leaves_the_cells_empty(tmp_path, capsys):
    path = _reviewed(tmp_path / "m.npy")
    df, info = _export(capsys, path)
    assert info["pixel_size_nm"] is None and info["pixel_size_source"] is None
    assert df["x_nm"].isna().all() and df["y_nm"].isna().all()
    assert df["x"].iloc[0] == pytest.approx(3.25)


def test_the_review_pixel_size_is_kept_for_later_exports(tmp_path, capsys):
    path = _reviewed(tmp_path / "m.h5", pixel_size_nm=0.3)
    movie = open_movie(path, fps=100.0)
    with Session.open(movie.path, movie.fingerprint) as s:
        who, nm = check_session_options(
            type("A", (), {"reviewer": " ana ", "pixel_size": "0.8A"})())
        set_session_options(s, who, nm)
        s.reject("d000001")
    movie.close()
    df, info = _export(capsys, path)
    assert info["pixel_size_nm"] == pytest.approx(0.08) and info["pixel_size_source"] == "--pixel-size"
    assert df["x_nm"].iloc[1] == pytest.approx(0.8)
    assert df.set_index("event_id").loc["d000001", "reviewer"] == "ana"
    assert "ana" in info["reviewers"]


@pytest.mark.parametrize("argv", [["export", "{m}", "--pixel-size", "5"],
                                  ["export", "{m}", "--pixel-size=-1nm"],
                                  ["export", "{m}", "--pixel-size", "2 furlongs"],
                                  ["review", "{m}", "--pixel-size", "0nm"],
                                  ["review", "{m}", "--reviewer", ""],
                                  ["review", "{m}", "--reviewer", "a\nb"]])
def test_bad_values_are_one_line_and_exit_2(tmp_path, capsys, argv):
    path = tmp_path / "m.npy"
    np.save(path, FRAMES)
    assert main([a.format(m=path) for a in argv]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and ("--pixel-size" in err or "--reviewer" in err)
    assert not list(tmp_path.glob("*.csv")) and not (tmp_path / "m.npy.review").exists()


def test_parse_pixel_size_units():
    assert parse_pixel_size("1um") == pytest.approx(1000.0)
    assert parse_pixel_size("1pm") == pytest.approx(0.001)
