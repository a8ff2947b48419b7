"""`reviewer review --reviewer NAME --pixel-size L`: the session the UI gets journals the name, keeps the
pixel size (what quitting prints is the UI's: tests/test_tui_notes.py, tests/test_tmux_e2e.py).
The Textual app is replaced by a stand-in that decides and exports as the keys would."""

from __future__ import annotations

import argparse
import json
import sys
import types

import numpy as np
import pandas as pd
import pytest

import reviewer.commands.review as review_cmd
from reviewer.store.export import export_events
from reviewer.store.session import Session


class StandIn:
    """What review() needs of the app: a session, run(), close_session(), quit_note, return_code."""

    def __init__(self, movie, session_dir=None, **_):
        self.movie = movie
        self.session = Session.open(movie.path, movie.fingerprint, override=session_dir,
                                    meta={"frames": movie.n_frames, "fps": movie.fps})
        self.quit_note, self.return_code = None, 0

    def run(self, mouse=False):
        self.session.seed(pd.DataFrame({"frame": [4, 9], "kind": ["step", "step"], "x": [2.0, 8.0],
                                        "y": [1.0, 3.0]}))
        self.session.accept("d000001")
        export_events(self.session, self.session.folder / "e.csv", movie=self.movie)

    def close_session(self):
        self.session.close()

    def on_signal_exit(self, signum):
        pass


def test_review_passes_reviewer_and_pixel_size_and_reports_on_quit(tmp_path, monkeypatch, capsys):
    path = tmp_path / "m.npy"
    np.save(path, np.zeros((20, 6, 8), np.uint8))
    import reviewer.tui.app as app_module

    monkeypatch.setattr(app_module, "make_app", lambda movie, **kw: StandIn(movie, **kw))
    tty = types.SimpleNamespace(isatty=lambda: True)
    monkeypatch.setattr(review_cmd, "sys", types.SimpleNamespace(stdin=tty, stdout=tty,
                                                                 stderr=sys.stderr))
    args = argparse.Namespace(movie=str(path), fps=100.0, keymap=None, session=str(tmp_path / "s"),
                              advance=False, mouse=False, reclaim_lock=False, reviewer="ben",
                              pixel_size="2A", dataset=None, axes=None, channel=None, z=None,
                              series=None)
    assert review_cmd.run(args) == 0
    csv = (tmp_path / "s" / "e.csv").resolve()
    df = pd.read_csv(csv, dtype={"event_id": str}).set_index("event_id")
    assert df.loc["d000001", "reviewer"] == "ben" and df.loc["d000001", "x_nm"] == pytest.approx(8.0 * 0.2)
    info = json.loads(csv.with_suffix(".json").read_text())
    assert info["pixel_size_source"] == "--pixel-size" and info["reviewers"] == ["ben"]
    meta = json.loads((tmp_path / "s" / "meta.json").read_text())
    assert meta["pixel_size_nm"] == pytest.approx(0.2)  # kept for `reviewer export` later
