"""One id per event: the candidate CSV of `reviewer scan` and the export name each detector event alike."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd

from sample_movies.growth import PRESETS, generate


def test_candidate_ids_equal_export_ids(tmp_path):
    import dataclasses

    movie, _ = generate(dataclasses.replace(PRESETS["low_dose"], n_frames=1200), seed=3)
    path = tmp_path / "m.npy"
    np.save(path, movie.data)
    cands, events = tmp_path / "m.candidates.csv", tmp_path / "m.events.csv"
    for args in (["scan", path, "-o", cands, "--fps", 400],
                 ["export", path, "-o", events, "--fps", 400]):
        r = subprocess.run([sys.executable, "-m", "reviewer", *map(str, args)],
                           capture_output=True, text=True, timeout=120)
        assert r.returncode == 0, r.stderr
    c = pd.read_csv(cands, dtype={"event_id": str}).set_index("event_id")
    e = pd.read_csv(events, dtype={"event_id": str}).set_index("event_id")
    assert len(c) >= 5 and sorted(c.index) == sorted(e.index)
    assert (c["frame"] == e.loc[c.index, "frame"]).all()
    assert (c["kind"] == e.loc[c.index, "kind"]).all()
