"""The what-changed view's legend: one row under the frame saying which colour (or, without colour,
which glyph) is brighter and which darker, the scale in noise standard deviations, and the windows
compared."""

from __future__ import annotations

from rich.style import Style
from rich.text import Text
from textual.widget import Widget

from reviewer.tui import render


def legend_text(sds: float, window: int, smooth_px: float, system: str) -> Text:
    """E.g. '██ brighter  ██ darker  ±6 noise SD · mean 12 after − 12 before · 1 px blur' (full
    colour at ±6 SD; frames after minus frames before); in mono the shade and punctuation glyphs
    take the colours' place."""
    t = Text(" ", no_wrap=True, overflow="ellipsis")
    if system == "mono":
        t.append(render.SHADES[-1] * 2, "bold")
        t.append(" brighter  ")
        t.append(render.DARKER[-1] * 2, "bold")
        t.append(" darker  ")
    else:
        for index, word in ((255, "brighter"), (0, "darker")):
            r, g, b = render.change_rgb(index)
            t.append("\u2588\u2588", Style(color=f"rgb({r},{g},{b})"))
            t.append(f" {word}  ")
    t.append(f"±{sds:g} noise SD · mean {window} after − {window} before · {smooth_px:g} px blur",
             "dim" if system != "mono" else "")  # fits 80 columns
    return t


class ChangeLegend(Widget):
    """One row under the body, shown only in the what-changed view."""

    DEFAULT_CSS = "ChangeLegend { height: 1; }"

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.text = Text("")

    def set_legend(self, text: Text) -> None:
        if text.plain != self.text.plain:
            self.text = text
            self.refresh()

    def render(self) -> Text:
        return self.text
