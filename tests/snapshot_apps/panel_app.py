"""Snapshot app: timeline above a short event list."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
from textual.app import App, ComposeResult

from reviewer.tui.eventlist import EventList
from reviewer.tui.timeline import Timeline

EVENTS = [
    SimpleNamespace(event_id=1, frame=120, time_s=0.3, kind="step", score=6.2,
                    status="accepted", label="layer"),
    SimpleNamespace(event_id=2, frame=410, time_s=1.025, kind="transient", score=3.1,
                    status="rejected", label=""),
    SimpleNamespace(event_id=3, frame=777, time_s=1.9425, kind="step", score=4.4,
                    status="candidate", label=""),
]


class PanelApp(App):
    def compose(self) -> ComposeResult:
        yield Timeline(id="timeline")
        yield EventList(id="events")

    def on_mount(self) -> None:
        score = np.zeros(1000, dtype=np.float32)
        for e in EVENTS:
            score[e.frame] = e.score
        timeline = self.query_one(Timeline)
        timeline.set_scores(score)
        timeline.set_marks(np.array([e.frame for e in EVENTS]), [e.status for e in EVENTS])
        timeline.set_position(410)
        events = self.query_one(EventList)
        events.set_rows(EVENTS)
        events.select_event(3)


app = PanelApp()
