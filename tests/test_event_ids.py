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


def _run(*args):
    r = subprocess.run([sys.executable, "-m", "reviewer", *map(str, args)],
                       capture_output=True, text=True, timeout=180)
    assert r.returncode == 0, r.stderr
    return r


def test_scan_session_and_export_agree_on_ids_kinds_and_causes(tmp_path):
    """The demo scenario has blanked frames, a beam step and a stage jump: its global candidates carry
    a cause, and scan CSV, session and export name and describe every detector event alike."""
    from reviewer.commands._common import seed_from_scan
    from reviewer.detect.candidates import CAUSES
    from reviewer.movie import open_movie
    from reviewer.store.session import Session
    from sample_movies.growth import SAMPLE_SEED

    movie, _ = generate(PRESETS["sample"], seed=SAMPLE_SEED)
    path = tmp_path / "demo.npy"
    np.save(path, movie.data)
    cands, events = tmp_path / "demo.candidates.csv", tmp_path / "demo.events.csv"
    _run("scan", path, "-o", cands, "--fps", 400)
    m = open_movie(path, fps=400)
    with Session.open(m.path, m.fingerprint, override=tmp_path / "s", reviewer="ana") as s:
        seed_from_scan(s, m)
        mark = s.add(5)
        in_session = {e.event_id: (e.frame, e.kind, e.cause) for e in s.events}
    m.close()
    _run("export", path, "-o", events, "--fps", 400, "--session", tmp_path / "s")

    c = pd.read_csv(cands, dtype=str, keep_default_na=False).set_index("event_id")
    e = pd.read_csv(events, dtype=str, keep_default_na=False).set_index("event_id")
    assert mark.event_id == "m000001" and mark.event_id in e.index  # six digits like d000000
    detector = sorted(k for k in in_session if k.startswith("d"))
    assert detector == sorted(c.index) == sorted(k for k in e.index if k.startswith("d"))
    for eid in detector:
        frame, kind, cause = in_session[eid]
        assert int(c.loc[eid, "frame"]) == int(e.loc[eid, "frame"]) == frame
        assert c.loc[eid, "kind"] == e.loc[eid, "kind"] == kind
        assert c.loc[eid, "cause"] == e.loc[eid, "cause"] == (cause or "")
    glob = c[c["kind"] == "global"]
    assert len(glob) >= 2 and set(glob["cause"]) <= set(CAUSES)
    assert (c.loc[c["kind"] != "global", "cause"] == "").all()
    assert e.loc["m000001", "reviewer"] == "ana" and e.loc["m000001", "cause"] == ""
