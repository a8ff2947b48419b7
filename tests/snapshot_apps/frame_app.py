"""Snapshot app: one tiny frame with a mark, in truecolor."""

from __future__ import annotations

from _tiny import platelet
from textual.app import App, ComposeResult

from reviewer.tui.frameview import FrameView


class FrameApp(App):
    def compose(self) -> ComposeResult:
        yield FrameView(id="frame", system="truecolor")

    def on_mount(self) -> None:
        view = self.query_one(FrameView)
        view.show(platelet())
        view.set_mark(7, 3)


app = FrameApp()
