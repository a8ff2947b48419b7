"""Redraw rate of FrameView at 200 x 60 cells, with a new frame every draw.

(a) Headless: the median CPU time of one full redraw (show a new frame, render every line through the
    compositor, encode the terminal escape sequence) for FrameView and for a naive widget that builds
    one parsed Style per cell, in the same run. Ratios are printed.
(b) tmux: a small app plays frames as fast as it can in a real 200 x 60 tmux pane for a few seconds
    and writes the achieved rate to a file this script reads. Target: >= 30 redraws/s.

    python benchmarks/bench_redraw.py [--frames 60] [--seconds 4] [--skip-tmux]
"""

from __future__ import annotations

import argparse
import asyncio
import io
import json
import os
import shlex
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from rich.console import Console
from rich.segment import Segment
from rich.style import Style
from textual.app import App, ComposeResult
from textual.strip import Strip
from textual.widget import Widget

from reviewer.tui import render
from reviewer.tui.frameview import FrameView

SIZE = (200, 60)


def make_frames(n: int, h: int = 256, w: int = 256, seed: int = 0) -> np.ndarray:
    """Invented frames: a platelet whose edge advances, shot noise, a drifting bright particle."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:h, 0:w]
    out = np.empty((n, h, w), dtype=np.uint16)
    for i in range(n):
        img = 400.0 + 0.5 * xx + 1500.0 * (xx < 80 + i) * (np.abs(yy - h / 2) < h / 4)
        img += 3000.0 * np.exp(-((xx - 3 * i % w) ** 2 + (yy - 60) ** 2) / 30.0)
        out[i] = rng.poisson(img).clip(0, 65535)
    return out


class NaiveView(Widget):
    """Baseline: same contrast and resampling, but one Style parsed per cell on every draw and
    Textual's default line filters."""

    def __init__(self) -> None:
        super().__init__()
        self.frame: np.ndarray | None = None

    def show(self, frame: np.ndarray) -> None:
        self.frame = frame
        self.refresh()

    def render_line(self, y: int) -> Strip:
        rows, cols = self.size.height, self.size.width
        if self.frame is None or y >= rows:
            return Strip.blank(cols)
        if y == 0 or getattr(self, "_img", None) is None:
            out_h, out_w, top, left = render.fit(*self.frame.shape, rows, cols)
            lo, hi = render.contrast_limits(self.frame, 0.5)
            img = np.zeros((2 * rows, cols), dtype=np.uint8)
            img[top:top + out_h, left:left + out_w] = render.to_indices(
                render.resample(self.frame, out_h, out_w), lo, hi)
            self._img = img.tolist()
        top_row, bottom_row = self._img[2 * y], self._img[2 * y + 1]
        return Strip([Segment("\u2580", Style.parse(f"rgb({t},{t},{t}) on rgb({b},{b},{b})"))
                      for t, b in zip(top_row, bottom_row, strict=True)], cols)


class BenchApp(App):
    CSS = "Screen { overflow: hidden; } FrameView, NaiveView { width: 1fr; height: 1fr; }"

    def __init__(self, widget: Widget) -> None:
        super().__init__()
        self.widget = widget

    def compose(self) -> ComposeResult:
        yield self.widget


async def _headless(widget: Widget, frames: np.ndarray, system: str) -> tuple[float, int]:
    """Median CPU seconds per full redraw and bytes per frame."""
    console = Console(color_system=system if system != "mono" else "256", file=io.StringIO(),
                      force_terminal=True, width=SIZE[0], height=SIZE[1])
    app = BenchApp(widget)
    times, sizes = [], []
    async with app.run_test(size=SIZE) as pilot:
        await pilot.pause()
        for i in range(len(frames) + 3):
            t0 = time.process_time()  # CPU time: robust on a shared machine
            widget.show(frames[i % len(frames)])
            update = app.screen._compositor.render_update(full=True)
            text = update.render_segments(console)
            if i >= 3:  # first draws build the segment tables
                times.append(time.process_time() - t0)
                sizes.append(len(text.encode()))
    return statistics.median(times), int(statistics.median(sizes))


class KeepAllFilters(FrameView):
    """FrameView with Textual's default filters (to show what dropping ANSIToTruecolor saves)."""

    def get_line_filters(self):
        return self.app.get_line_filters()


def run_headless(n: int) -> dict[str, float]:
    frames = make_frames(n)
    cases = {
        "FrameView truecolor": (FrameView(system="truecolor"), "truecolor"),
        "FrameView 256": (FrameView(system="256"), "256"),
        "FrameView truecolor, default filters": (KeepAllFilters(system="truecolor"), "truecolor"),
        "naive per-cell Style": (NaiveView(), "truecolor"),
    }
    results = {}
    for name, (widget, system) in cases.items():
        med, size = asyncio.run(_headless(widget, frames, system))
        results[name] = med
        print(f"  {name:40s} {med * 1e3:7.1f} ms/redraw  {1 / med:6.1f} redraws/s  "
              f"{size / 1024:6.0f} KiB/frame")
    base = results["naive per-cell Style"]
    print(f"  ratio FrameView truecolor / naive: {base / results['FrameView truecolor']:.1f}x "
          f"faster; dropping ANSIToTruecolor: "
          f"{results['FrameView truecolor, default filters'] / results['FrameView truecolor']:.2f}x")
    return results


class PlayerApp(App):
    """Plays frames as fast as the terminal takes them, then writes the rate to ``out``."""

    CSS = "FrameView { width: 1fr; height: 1fr; }"

    def __init__(self, frames: np.ndarray, seconds: float, out: Path) -> None:
        super().__init__()
        self.frames, self.seconds, self.out = frames, seconds, out
        self.count, self.t0, self.cpu0 = 0, 0.0, 0.0

    def compose(self) -> ComposeResult:
        yield FrameView(id="view")

    def on_mount(self) -> None:
        self.t0, self.cpu0 = time.perf_counter(), time.process_time()
        self.call_after_refresh(self.step)

    def step(self) -> None:
        view = self.query_one(FrameView)
        if time.perf_counter() - self.t0 < self.seconds:
            view.show(self.frames[self.count % len(self.frames)])
            self.count += 1
            self.call_after_refresh(self.step)
            return
        writer = getattr(self._driver, "_writer_thread", None)
        while writer is not None and writer._queue.qsize():  # let queued output reach tmux
            time.sleep(0.005)
        elapsed = time.perf_counter() - self.t0
        cpu = time.process_time() - self.cpu0
        self.out.write_text(json.dumps({
            "redraws": self.count, "seconds": elapsed, "rate": self.count / elapsed,
            "cpu_seconds": cpu, "load": os.getloadavg()[0],
            "size": list(self.size), "color_system": self.console.color_system,
            "system": view.system}))
        self.exit()


def run_player(out: Path, seconds: float) -> None:
    PlayerApp(make_frames(40), seconds, out).run(mouse=False)


def _cpu_seconds(pid: str) -> float:
    """User + system CPU seconds of a process (Linux /proc), 0 when unknown."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
        return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
    except (OSError, ValueError, IndexError):
        return 0.0


def run_tmux(seconds: float, colorterm: str | None) -> dict | None:
    if shutil.which("tmux") is None:
        print("  tmux not found: skipped")
        return None
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(tmp) / "rate.json"
        env = f"COLORTERM={colorterm} " if colorterm else ""
        cmd = (f"cd {shlex.quote(os.getcwd())} && {env}{shlex.quote(sys.executable)} "
               f"{shlex.quote(str(Path(__file__).resolve()))} --player {shlex.quote(str(out))} "
               f"--seconds {seconds}")
        server = f"bench{os.getpid()}"
        started = subprocess.run(["tmux", "-L", server, "-f", "/dev/null", "new-session", "-d",
                                  "-x", str(SIZE[0]), "-y", str(SIZE[1]), cmd],
                                 capture_output=True, text=True)
        if started.returncode:
            print(f"  tmux did not start: {started.stderr.strip()}")
            return None
        pid = subprocess.run(["tmux", "-L", server, "display-message", "-p", "#{pid}"],
                             capture_output=True, text=True).stdout.strip()
        cpu_start = _cpu_seconds(pid)
        try:
            deadline = time.monotonic() + seconds + 30
            while not out.exists() and time.monotonic() < deadline:
                time.sleep(0.2)
            time.sleep(0.2)
            result = json.loads(out.read_text()) if out.exists() else None
            tmux_cpu = _cpu_seconds(pid) - cpu_start
        finally:
            subprocess.run(["tmux", "-L", server, "kill-server"], capture_output=True)
            Path(f"/tmp/tmux-{os.getuid()}/{server}").unlink(missing_ok=True)
    if result is None:
        print("  player did not report (timeout)")
        return None
    print(f"  tmux {result['size'][0]}x{result['size'][1]} {result['system']:9s} "
          f"({'COLORTERM=' + colorterm if colorterm else 'no COLORTERM'}): "
          f"{result['rate']:5.1f} redraws/s ({result['redraws']} in {result['seconds']:.1f} s)"
          f"  target 30: {result['rate'] / 30:.2f}x")
    print(f"      player CPU {1e3 * result['cpu_seconds'] / result['redraws']:.1f} ms/redraw "
          f"(CPU-bound rate {result['redraws'] / result['cpu_seconds']:.1f}/s); "
          f"tmux server CPU {1e3 * tmux_cpu / result['redraws']:.1f} ms/redraw; "
          f"load average {result['load']:.1f} on {os.cpu_count()} cores")
    return result


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--frames", type=int, default=60)
    p.add_argument("--seconds", type=float, default=4.0)
    p.add_argument("--skip-tmux", action="store_true")
    p.add_argument("--player", type=Path, help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.player:
        run_player(a.player, a.seconds)
        return 0
    print("cache: none involved: frames are invented in memory before timing (no movie file, no "
          "scan, no reviewer cache); each timed redraw shows a frame not drawn before")
    print(f"(a) headless, {SIZE[0]}x{SIZE[1]} cells, 256x256 px frames, median of {a.frames}:")
    headless = run_headless(a.frames)
    if not a.skip_tmux:
        print(f"(b) tmux pane {SIZE[0]}x{SIZE[1]}, {a.seconds:g} s of playback:")
        for colorterm in ("truecolor", None):
            got = run_tmux(a.seconds, colorterm)
            if got:
                key = "FrameView truecolor" if colorterm else "FrameView 256"
                print(f"      tmux rate / headless {key} rate: {got['rate'] * headless[key]:.2f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
