"""`reviewer scan` end to end on a small .npy movie."""

from __future__ import annotations

import csv

import numpy as np

from reviewer.cli import main
from reviewer.store.table import COLUMNS


def _movie(path, n=500):
    rng = np.random.default_rng(2)
    lam = np.full((n, 48, 64), 40.0)
    lam[250:, 20:22, 8:48] *= 0.5   # a new dark band appears at frame 250
    np.save(path, rng.poisson(lam).astype(np.uint16))
    return path


def test_scan_writes_candidates_and_reuses_the_cache(tmp_path, capsys):
    mv = _movie(tmp_path / "m.npy")
    assert main(["scan", str(mv), "--fps", "400"]) == 0
    out = capsys.readouterr().out
    csv_path = tmp_path / "m.candidates.csv"
    assert csv_path.is_file() and str(csv_path.name) in out
    with open(csv_path, newline="") as f:
        rows = list(csv.DictReader(f))
    assert tuple(rows[0].keys()) == COLUMNS
    assert [r["frame"] for r in rows] == ["250"]
    r = rows[0]
    assert r["event_id"] == "d000000" and r["status"] == "candidate" and r["source"] == "detector"  # ids as in the session and export
    assert r["kind"] == "step" and float(r["time_s"]) == 250 / 400 and r["label"] == ""
    # second run: same settings -> the cached features are reused, same answer
    out_csv = tmp_path / "again.csv"
    assert main(["scan", str(mv), "--fps", "400", "-o", str(out_csv)]) == 0
    assert "reused" in capsys.readouterr().out
    assert out_csv.read_text() == csv_path.read_text()
    assert main(["scan", str(mv), "--fps", "400", "-o", str(out_csv), "--force"]) == 0
    assert "scanned" in capsys.readouterr().out


def test_bad_input_exits_2_with_one_line(tmp_path, capsys):
    assert main(["scan", str(tmp_path / "nothing.tif")]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("reviewer:") and "\n" not in err
    bad = tmp_path / "flat.npy"
    np.save(bad, np.zeros((10, 2, 2), np.uint16))
    assert main(["scan", str(bad)]) == 2
    assert main(["scan", str(_movie(tmp_path / "ok.npy", n=100)), "-o",
                 str(tmp_path / "no" / "such" / "dir.csv")]) == 2
