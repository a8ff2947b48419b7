"""Snapshot tests of the display widgets on tiny frames (SVG screenshots under __snapshots__)."""

from __future__ import annotations

from pathlib import Path

APPS = Path(__file__).parent / "snapshot_apps"


def test_frame_with_mark(snap_compare):
    assert snap_compare(APPS / "frame_app.py", terminal_size=(30, 12))


def test_change_view(snap_compare):
    assert snap_compare(APPS / "change_app.py", terminal_size=(30, 12))


def test_timeline_and_event_list(snap_compare):
    assert snap_compare(APPS / "panel_app.py", terminal_size=(50, 8))
