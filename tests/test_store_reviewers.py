"""Who decided, what undo did, where the last export went, and ids from older sessions."""

from __future__ import annotations

import getpass
import json

import pandas as pd
import pytest

from reviewer.errors import BadInput
from reviewer.store.export import export_events, sidecar_path
from reviewer.store.session import Session
from reviewer.store.who import login_name, reviewer_name


def _open(folder, movie, **kw):
    return Session.open(movie, "fp-who", override=folder, meta={"frames": 500, "fps": 100.0}, **kw)


@pytest.fixture
def movie(tmp_path):
    path = tmp_path / "platelets.tif"
    path.write_bytes(b"x")
    return path


def _seed(s):
    s.seed(pd.DataFrame({"frame": [10, 20, 30, 40], "kind": ["step", "global", "global", "step"],
                         "cause": ["", "blank", "stage", None], "score": [4.0, 9.0, 8.0, 5.0]}))


def _journal(folder):
    return [json.loads(line) for line in (folder / "journal.jsonl").read_text().splitlines()]


def test_every_action_carries_its_reviewer_and_the_event_the_last_decider(tmp_path, movie):
    folder = tmp_path / "s"
    with _open(folder, movie, reviewer="ana") as s:
        _seed(s)
        s.accept("d000000")
        s.set_note("d000001", "looks blanked")
        s.add(77)
        recs = _journal(folder)
        assert [r["op"] for r in recs] == ["accept", "note", "add"]
        assert {r["reviewer"] for r in recs} == {"ana"}
        assert s.get("d000000").reviewer == "ana" and s.get("m000001").reviewer == "ana"
        assert s.get("d000001").reviewer is None  # a note is not a decision (as for reviewed_at)
    with _open(folder, movie, reviewer="ben") as s:
        s.reject("d000000")
        s.reject_kind("global")
        assert s.get("d000000").reviewer == "ben" and s.get("d000002").reviewer == "ben"
        s.undo()
        s.undo()
        assert s.get("d000000").reviewer == "ana" and s.get("d000000").status == "accepted"
        assert s.get("d000002").reviewer is None
        assert s.reviewers == ["ana", "ben"]
    with _open(folder, movie, readonly=True) as s:  # after compaction: from the snapshot
        assert s.reviewers == ["ana", "ben"] and s.get("d000000").reviewer == "ana"


def test_cause_is_carried_from_candidates_to_events_and_export(tmp_path, movie):
    with _open(tmp_path / "s", movie) as s:
        _seed(s)
        assert [e.cause for e in s.events] == [None, "blank", "stage", None]
        assert [e.cause_words for e in s.events] == [None, "blank", "stage jump", None]
        out, _ = export_events(s, tmp_path / "e.csv")
    df = pd.read_csv(out, dtype=str, keep_default_na=False)
    assert list(df["cause"]) == ["", "blank", "stage", ""]
    assert list(df.columns[-4:]) == ["cause", "reviewer", "x_nm", "y_nm"]


def test_every_detector_cause_has_words():
    from reviewer.detect.candidates import CAUSES
    from reviewer.store.table import CAUSE_WORDS

    assert set(CAUSE_WORDS) == set(CAUSES)


def test_login_name_is_the_default_and_its_absence_is_no_failure(tmp_path, movie, monkeypatch):
    monkeypatch.setenv("LOGNAME", "carla")
    assert login_name() == "carla"
    with _open(tmp_path / "a", movie) as s:
        assert s.reviewer == "carla"

    def broken():
        raise OSError("no user")

    monkeypatch.setattr(getpass, "getuser", broken)
    assert login_name() is None
    with _open(tmp_path / "b", movie) as s:
        _seed(s)
        s.accept("d000000")
        assert s.get("d000000").reviewer is None
        assert "reviewer" not in _journal(tmp_path / "b")[0]


@pytest.mark.parametrize("bad", ["", "   ", "a\nb", "x" * 65, "tab\there"])
def test_bad_reviewer_names_are_refused(bad):
    with pytest.raises(BadInput, match="--reviewer"):
        reviewer_name(bad)
    assert reviewer_name("  Dr. Ana Lí  ") == "Dr. Ana Lí"


def test_undo_and_redo_say_what_they_did(tmp_path, movie):
    with _open(tmp_path / "s", movie) as s:
        _seed(s)
        assert s.undo() is None and s.redo() is None
        s.accept("d000003")
        s.set_label("d000000", "layer")
        s.add(99)
        s.nudge("d000000", 2)
        s.reject_kind("global")
        assert s.undo() == "undid reject of 2 events"
        assert s.undo() == "undid nudge of d000000"
        assert s.undo() == "undid mark of m000001"
        assert s.undo() == "undid label 'layer' of d000000"
        assert s.redo() == "redid label 'layer' of d000000"
        assert s.get("d000000").label == "layer"
        assert s.undo() == "undid label 'layer' of d000000"
        assert s.undo() == "undid accept of d000003"
        assert s.get("d000003").status == "candidate" and s.undo() is None


def test_the_session_remembers_its_last_export(tmp_path, movie):
    folder = tmp_path / "s"
    with _open(folder, movie, reviewer="ana") as s:
        _seed(s)
        assert s.last_export is None
        export_events(s, tmp_path / "first.csv")
        out, side = export_events(s, tmp_path / "second.csv")
        assert s.last_export == out.resolve()
        assert s.undo() is None  # an export is not an undoable action
    info = json.loads(side.read_text())
    assert info["reviewers"] == ["ana"]
    with _open(folder, movie, readonly=True) as s:
        assert s.last_export == out.resolve()  # journaled, then in the snapshot
        export_events(s, tmp_path / "third.csv")  # read-only: remembered in memory only
        assert s.last_export == (tmp_path / "third.csv").resolve()
    with _open(folder, movie, readonly=True) as s:
        assert s.last_export == out.resolve()


def test_sessions_with_four_digit_manual_ids_still_open(tmp_path, movie):
    """A snapshot written before cause/reviewer existed, with the old m0001 id."""
    folder = tmp_path / "old"
    folder.mkdir()
    cols = ["event_id", "frame", "time_s", "frame_end", "kind", "score", "x", "y", "status", "label",
            "note", "source", "reviewed_at"]
    rows = [["d000000", 10, 0.1, None, "step", 4.0, 1.0, 2.0, "accepted", "layer", None,
             "detector", "2026-01-02T03:04:05.000Z"],
            ["m0001", 50, 0.5, None, "manual", None, 3.0, 4.0, "accepted", None, None, "manual",
             "2026-01-02T03:04:06.000Z"]]
    snap = {"format": 1, "seq": 3, "position": 0, "next_manual": 2, "seeded": True,
            "columns": cols, "events": rows, "undo": [], "redo": []}
    (folder / "snapshot.json").write_text(json.dumps(snap))
    with _open(folder, movie) as s:
        old = s.get("m0001")
        assert old.frame == 50 and old.reviewer is None and old.cause is None
        assert s.add(60).event_id == "m000002"  # numbered on from the old ids
        out, _ = export_events(s, tmp_path / "e.csv")
    df = pd.read_csv(out, dtype=str, keep_default_na=False).set_index("event_id")
    assert list(df.index) == ["d000000", "m0001", "m000002"]
    assert df.loc["d000000", "reviewer"] == "" and df.loc["d000000", "label"] == "layer"
    assert sidecar_path(out).exists()
