"""Snapshot app: the what-changed view of a growth front advancing one column and an island
dissolving."""

from __future__ import annotations

import numpy as np
from _tiny import platelet
from textual.app import App, ComposeResult

from reviewer.tui.frameview import FrameView


class ChangeApp(App):
    def compose(self) -> ComposeResult:
        yield FrameView(id="frame", system="truecolor")

    def on_mount(self) -> None:
        before = np.stack([platelet(edge=7)] * 3)
        after = np.stack([platelet(edge=8)] * 3)
        after[:, 6, 10] = 300 + 50  # the island is gone
        view = self.query_one(FrameView)
        view.mode = "change"
        view.show(after[0], before=before, after=after)


app = ChangeApp()
