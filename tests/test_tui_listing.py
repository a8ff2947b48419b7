"""The event list's filter (/), the jump to disputed events (d), and how a global candidate's cause
is shown in the list and the status line.

Same invented movie as tests/test_tui_app.py: candidates at frames 20, 50, 80, 120, 160 -> d000000..
d000004. Expected rows are written out by hand from the key presses.
"""

from __future__ import annotations

from types import SimpleNamespace

from rich.text import Text
from test_tui_app import SIZE, _app, _press, sync

from reviewer.tui.annotate import filter_cycle, next_filter
from reviewer.tui.eventlist import cause_text, row_cells
from reviewer.tui.status import StatusLine


def _listed(app) -> list[str]:
    return [app.eventlist._rows[i].event_id for i in range(app.eventlist.row_count)]


@sync
async def test_the_filter_key_steps_through_statuses_and_labels_and_heads_the_list(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "n 1 n r n 1")  # 20 layer, 50 rejected, 80 layer
        await _press(pilot, "slash")
        assert _listed(app) == ["d000003", "d000004"]  # pending first
        assert app.eventlist.render_line(0).text.strip() == "only candidate: 2 of 5"
        assert app.eventlist.render_line(1).text.split()[:2] == ["id", "frame"]
        assert app.alert_text == "list: only candidate (2 of 5); / for the next filter"
        await _press(pilot, "slash")
        assert _listed(app) == ["d000000", "d000002"]  # accepted
        await _press(pilot, "slash")
        assert _listed(app) == ["d000001"]  # rejected
        await _press(pilot, "slash")
        assert _listed(app) == ["d000000", "d000002"]  # label 'layer' (no disputed ones)
        assert app.eventlist.render_line(0).text.strip() == "only label 'layer': 2 of 5"
        await _press(pilot, "slash")
        assert len(_listed(app)) == 5 and app.alert_text == "list: every event (5)"
        assert app.eventlist.render_line(0).text.split()[:2] == ["id", "frame"]
        await app.action_quit()


def test_filter_cycle_has_what_the_events_have():
    ev = [SimpleNamespace(status="accepted", label="edge"), SimpleNamespace(status="disputed",
                                                                              label="zz"),
          SimpleNamespace(status="candidate", label=None)]
    assert filter_cycle(ev, ["layer", "edge"]) == [
        ("status", "candidate"), ("status", "accepted"), ("status", "disputed"),
        ("label", "edge"), ("label", "zz")]
    assert next_filter(None, ev, []) == ("status", "candidate")
    assert next_filter(("label", "zz"), ev, []) is None  # after the last: every event
    assert next_filter(("status", "rejected"), ev, []) is None  # gone meanwhile: every event


@sync
async def test_d_jumps_to_the_next_disputed_event_and_wraps(tmp_path):
    app = _app(tmp_path)
    for eid in ("d000001", "d000003"):  # as a merge of two reviews leaves them
        app.session._edit("merge", eid, status="disputed")
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "d")
        assert (app.frame, app.current_id) == (50, "d000001")
        await _press(pilot, "d")
        assert (app.frame, app.current_id) == (120, "d000003")
        await _press(pilot, "d")  # none after: back to the first
        assert (app.frame, app.current_id) == (50, "d000001")
        assert app.alert_text.startswith("no disputed event after this one")
        await _press(pilot, "a")  # the third look decides it
        assert app.session.get("d000001").status == "accepted"
        await app.action_quit()


@sync
async def test_d_without_disputed_events_says_so(tmp_path):
    app = _app(tmp_path)
    async with app.run_test(size=SIZE) as pilot:
        await _press(pilot, "d")
        assert app.frame == 0 and app.alert_text.startswith("no disputed events")
        await app.action_quit()


def _global(cause):
    return SimpleNamespace(event_id="d000007", frame=900, frame_end=None, time_s=2.25,
                           kind="global", score=30.0, x=None, y=None, status="candidate",
                           label=None, note=None, source="detector", cause=cause)


def test_a_global_candidate_says_its_cause_in_the_list_and_the_status_line():
    # the detector's causes (detect/candidates.py CAUSES) in words
    assert [cause_text(_global(c)) for c in ("blank", "beam", "stage", "unknown", "")] == \
        ["blank", "beam step", "stage jump", "unknown", ""]
    assert row_cells(_global("beam"))[2] == "beam step"  # the kind column
    assert row_cells(_global(""))[2] == "global"  # a session that does not know the cause
    local = SimpleNamespace(**{**vars(_global("stage")), "kind": "step"})
    assert cause_text(local) == "" and row_cells(local)[2] == "step"
    line = StatusLine()
    line.show(900, 2000, 2.25, _global("stage"), {"pending": 3})
    assert "d000007 global (stage jump) candidate" in line.plain
    line.show(900, 2000, 2.25, SimpleNamespace(**{**vars(_global("x")), "cause": None}), {})
    assert "d000007 global candidate" in line.plain and isinstance(line.render(), Text)
