"""Notes typed in the review (w), and what undo / redo / export / quit / Ctrl-C say.

Same invented movie as tests/test_tui_app.py: candidates at frames 20, 50, 80 (span 80…84), 120, 160
(d000003 at 120 is a global one). Expected texts and statuses are written out by hand.
"""

from __future__ import annotations

import csv

from test_tui_app import SIZE, _app, _press, sync
from test_tui_viewed import _goto

from reviewer.tui.annotate import NoteScreen, one_line_note


def _type(text: str) -> str:
    """Pilot key names for typing `text` into an input."""
    return " ".join("space" if c == " " else c for c in text)


@sync
async def test_a_note_typed_on_the_viewed_event_is_journaled_listed_exported_and_undoable(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n n w")  # d000001 at frame 50
        assert isinstance(app.screen, NoteScreen)
        await _press(pilot, _type("edge of  grid") + " enter")
        assert app.session.get("d000001").note == "edge of grid"  # one line, single spaces
        assert app.alert_text == "note on d000001: edge of grid (u undoes)"
        assert app.session.get("d000001").status == "candidate"  # a note is not a decision
        assert "✎" in app.status.plain
        row = next(i for i in range(app.eventlist.row_count)
                   if app.eventlist._rows[i].event_id == "d000001")
        assert "edge of gr" in app.eventlist.render_line(row + 1).text  # the note column
        await _press(pilot, "e")
        path = app.export_path()
        assert app.alert_text.startswith(f"exported 5 events to {path}")
        await _press(pilot, "u")
        assert app.session.get("d000001").note is None
        assert app.alert_text.startswith("undid")
        await _press(pilot, "U")
        assert app.session.get("d000001").note == "edge of grid"
        assert app.alert_text.startswith("redid")
        await app.action_quit()
    with open(path, newline="", encoding="utf-8") as f:
        rows = {r["event_id"]: r for r in csv.DictReader(f)}
    assert rows["d000001"]["note"] == "edge of grid" and rows["d000000"]["note"] == ""


@sync
async def test_note_with_no_event_in_view_says_so_and_escape_keeps_the_old_note(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _goto(pilot, 35)  # 15 frames from 20 and from 50
        await _press(pilot, "w")
        assert not isinstance(app.screen, NoteScreen)
        assert app.alert_text == "no event at frame 35 — note: nothing changed; m marks one"
        await _goto(pilot, 82)  # inside d000002's span 80…84
        await _press(pilot, "w " + _type("bright") + " enter")
        assert app.session.get("d000002").note == "bright"
        await _press(pilot, "w backspace backspace escape")  # escape: nothing changes
        assert app.session.get("d000002").note == "bright"
        assert app.alert_text == "note on d000002 unchanged"
        await _press(pilot, "w ctrl+u enter")  # emptied: the note is cleared
        assert app.session.get("d000002").note is None
        assert app.alert_text == "note on d000002 cleared (u undoes)"
        await _press(pilot, "u")
        assert app.session.get("d000002").note == "bright"
        await app.action_quit()


def test_a_note_is_kept_on_one_line():
    assert one_line_note("  two\tlines\nhere ") == "two lines here"
    assert len(one_line_note("x" * 2000)) == 500


@sync
async def test_nothing_to_undo_says_so(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "u")
        assert app.alert_text == "nothing to undo"
        await _press(pilot, "U")
        assert app.alert_text == "nothing to redo"
        await app.action_quit()


@sync
async def test_ctrl_c_is_our_quit_and_quitting_says_where_things_are(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n a")
        assert app.farewell() == (f"reviewer: decisions saved in {app.session.folder}; not exported "
                                  "yet (e in the review, or reviewer export MOVIE)")
        await _press(pilot, "e")
        path = app.export_path()
        assert app.farewell() == (f"reviewer: decisions saved in {app.session.folder}; "
                                  f"last export: {path}")
        await _press(pilot, "ctrl+c")
        assert not app.is_running or app._exit  # ctrl+c quit by itself (Textual's would not)
    assert app.return_code == 0
    assert app.said_on_exit == app.farewell()  # set by our quit; printed by App.run after the screen
    from reviewer.store.session import Session

    again = Session.open(app.movie.path, app.movie.fingerprint, override=tmp_path / "session")
    assert again.get("d000000").status == "accepted"  # saved, and the lock was released
    again.close()


@sync
async def test_undo_says_the_sessions_description_when_it_gives_one(tmp_path):
    app = _app(tmp_path)
    undo = app.session.undo
    app.session.undo = lambda: (undo(), "accept of d000000")[1]  # a session that describes it
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n a u")
        assert app.session.get("d000000").status == "candidate"
        assert app.alert_text == "undid accept of d000000"
        await app.action_quit()
