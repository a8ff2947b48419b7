"""Progress reporting for long headless work: a bar on a terminal, sparse plain lines otherwise."""

from __future__ import annotations

import sys
import time
from typing import TextIO


def _clock(seconds: float) -> str:
    seconds = max(0, int(seconds))
    h, rest = divmod(seconds, 3600)
    m, s = divmod(rest, 60)
    return f"{h}:{m:02d}:{s:02d}" if h else f"{m:02d}:{s:02d}"


class Progress:
    """Report `done` of `total` items (frames) with rate and ETA.

    On a terminal the line is redrawn at most ``redraw_s`` apart; on a pipe or log file a plain line is
    written at most every ``plain_every_s`` seconds, so logs stay short.
    """

    def __init__(self, total: int, label: str = "frames", stream: TextIO | None = None,
                 redraw_s: float = 0.1, plain_every_s: float = 10.0, enabled: bool = True) -> None:
        self.total = max(int(total), 0)
        self.label = label
        self.stream = stream if stream is not None else sys.stderr
        self.tty = bool(getattr(self.stream, "isatty", lambda: False)())
        self.every = redraw_s if self.tty else plain_every_s
        self.enabled = enabled
        self.start = time.monotonic()
        self.last = -float("inf")
        self.done = 0

    def line(self) -> str:
        elapsed = max(time.monotonic() - self.start, 1e-9)
        rate = self.done / elapsed
        frac = self.done / self.total if self.total else 1.0
        eta = (self.total - self.done) / rate if rate > 0 else float("inf")
        eta_s = _clock(eta) if eta != float("inf") else "--:--"
        if self.tty:
            width = 28
            fill = int(round(frac * width))
            bar = "#" * fill + "." * (width - fill)
            return (f"[{bar}] {frac:6.1%} {self.done}/{self.total} {self.label}"
                    f"  {rate:,.0f}/s  ETA {eta_s}")
        return f"{self.done}/{self.total} {self.label} ({frac:.0%}), {rate:,.0f}/s, ETA {eta_s}"

    def update(self, done: int) -> None:
        self.done = min(int(done), self.total) if self.total else int(done)
        if not self.enabled:
            return
        now = time.monotonic()
        if now - self.last < self.every and self.done < self.total:
            return
        self.last = now
        if self.tty:
            self.stream.write("\r\x1b[2K" + self.line())
        else:
            self.stream.write(self.line() + "\n")
        self.stream.flush()

    def close(self, message: str | None = None) -> None:
        if not self.enabled:
            return
        if self.tty:
            self.stream.write("\r\x1b[2K")
        if message:
            self.stream.write(message + "\n")
        self.stream.flush()
