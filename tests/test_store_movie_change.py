"""A movie that changed since its session began: candidates re-seeded from the new scan, decisions on
matching events (same kind, frame ±1) kept, the others kept as 'orphaned'; the notice stays at every
open until the user acknowledges it (journaled)."""

from __future__ import annotations

import asyncio
import subprocess
import sys

import numpy as np
import pandas as pd

from reviewer.store.session import Session


def _cands(frames, kinds) -> pd.DataFrame:
    n = len(frames)
    return pd.DataFrame({"frame": frames, "kind": kinds, "score": np.arange(n) + 5.0,
                         "x": np.full(n, 3.0), "y": np.full(n, 4.0)})


def _open(tmp_path, fp) -> Session:
    return Session.open(tmp_path / "m.npy", fp, override=tmp_path / "session",
                        meta={"frames": 500, "fps": 100.0})


def test_reseed_keeps_matching_decisions_and_lists_orphans(tmp_path):
    s = _open(tmp_path, "fp-old")
    s.seed(_cands([10, 40, 70, 100], ["step", "step", "transient", "step"]))
    s.accept("d000000")
    s.reject("d000001")
    s.set_label("d000002", "island")
    s.add(300, label="layer")  # manual: untouched by any scan
    s.close()

    s = _open(tmp_path, "fp-new")
    assert s.needs_reseed and any("movie changed" in n for n in s.notices)
    # new scan: 11 step (matches d000000 within 1 frame), 40 transient (kind differs: d000001 has no
    # match), 73 step (3 frames from the 70 transient: no match), 101 step (d000003, undecided)
    kept, orphaned = s.reseed(_cands([11, 40, 73, 101, 200], ["step", "transient", "step", "step",
                                                             "step"]))
    assert (kept, orphaned) == (1, 2)
    got = {e.event_id: (e.frame, e.kind, e.status, e.label, e.source) for e in s.events}
    assert got == {
        "d000000": (10, "step", "accepted", None, "detector"),      # decision kept
        "d000001": (40, "step", "rejected", None, "orphaned"),
        "d000002": (70, "transient", "accepted", "island", "orphaned"),
        "d000003": (101, "step", "candidate", None, "detector"),    # undecided: takes the new values
        "d000004": (40, "transient", "candidate", None, "detector"),
        "d000005": (73, "step", "candidate", None, "detector"),
        "d000006": (200, "step", "candidate", None, "detector"),
        "m000001": (300, "manual", "accepted", "layer", "manual"),
    }
    s.close()

    for _ in range(2):  # shown at every open until acknowledged
        s = _open(tmp_path, "fp-new")
        text = " ".join(s.notices)
        assert "movie changed" in text and "1 decisions kept" in text and "2 orphaned" in text
        assert "d000001, d000002" in text and not s.needs_reseed
        assert s.get("d000002").source == "orphaned"
        s.close()
    from reviewer.tui.eventlist import row_cells

    assert row_cells(s.get("d000001"))[2] == "step·orph"  # marked in the UI's event list
    s = _open(tmp_path, "fp-new")
    assert s.acknowledge_movie_change()
    s._journal.close()  # a crash right after: the acknowledgement is in the journal
    s._lock.release()
    s = _open(tmp_path, "fp-new")
    assert not s.movie_changes and not any("movie changed" in n for n in s.notices)
    assert s.get("d000002").label == "island"
    s.close()


def test_changed_movie_in_the_ui_reseeds_after_its_scan_and_acknowledges(tmp_path):
    from reviewer.tui.app import make_app
    from sample_movies.growth import PRESETS, generate, scaled

    data, _ = generate(scaled(PRESETS["sample"], 1500, 40, 48), seed=4)
    path = tmp_path / "growth.npy"
    np.save(path, data)
    subprocess.run([sys.executable, "-m", "reviewer", "scan", str(path), "--fps", "400"],
                   check=True, capture_output=True, timeout=120)
    app = make_app(path, fps=400.0, run_scan=False)
    decided = {}
    for i, ev in enumerate(e for e in app.session.events if e.kind != "global"):
        (app.session.accept if i % 2 else app.session.reject)(ev.event_id)
        decided[ev.event_id] = "accepted" if i % 2 else "rejected"
    app.session.close()
    assert len(decided) >= 4

    # the same recording, one frame later (a frame prepended): every event moves by one frame
    np.save(path, np.concatenate([data[:1], data[:-1]]))
    app = make_app(path, fps=400.0)  # not scanned yet: the background scan re-seeds

    async def run():
        async with app.run_test(size=(120, 40)) as pilot:
            for _ in range(400):
                await pilot.pause(0.05)
                if not app.scanning:
                    break
            await pilot.pause()
            banner = str(app.query_one("#banner").render())
            await pilot.press("exclamation_mark")
            await pilot.pause()
            after = app.query_one("#banner").display
            await app.action_quit()
            return banner, after

    banner, still_shown = asyncio.run(run())
    assert "MOVIE CHANGED" in banner and "re-seeded" in banner
    assert not still_shown
    s = Session.open(path, app.movie.fingerprint)
    assert not s.movie_changes
    for eid, status in decided.items():  # no decision lost, matched or orphaned
        assert s.get(eid).status == status
    orphans = [e for e in s.events if e.source == "orphaned"]
    assert len(orphans) <= len(decided) // 4  # a one-frame shift keeps nearly all of them matched
    s.close()
