"""Redraw rate with the loupe shown beside the frame view, in a real 200 x 60 tmux pane.

Same method as benchmarks/bench_redraw.py (its frames, its player and its tmux runner are imported,
not copied): an app shows a new frame on every redraw for a few seconds and writes the rate it
reached. Cases, side by side in one run, each in 256 colours (no COLORTERM) and truecolor:
  frame view alone | frame view + loupe at 2x (new frame in both on every redraw)
at 256 x 256 px frames (bench_redraw's) and at 1024 x 1024. Target: >= 30 redraws/s with the loupe.
Also the median CPU time of one loupe build (region, contrast, strips) headless.

    python benchmarks/bench_loupe.py [--seconds 4] [--skip-tmux] [--px 256 1024] [--only-256]
"""

from __future__ import annotations

import argparse
import contextlib
import os
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
import bench_redraw  # noqa: E402 - the shared frames, player and tmux runner
from textual.containers import Horizontal  # noqa: E402

from reviewer.tui.frameview import FrameView  # noqa: E402
from reviewer.tui.loupe import Loupe, loupe_view  # noqa: E402

MODE_VAR, SIZE_VAR = "BENCH_LOUPE_MODE", "BENCH_LOUPE_PX"


class LoupePlayer(bench_redraw.PlayerApp):
    """bench_redraw's player with a loupe beside the frame view (or without, for the baseline)."""

    CSS = "FrameView { width: 1fr; height: 1fr; } Loupe { width: 70; height: 1fr; }"

    def __init__(self, frames, seconds, out, with_loupe: bool) -> None:
        super().__init__(frames, seconds, out)
        self.with_loupe = with_loupe

    def compose(self):
        with Horizontal():
            yield FrameView(id="view")
            if self.with_loupe:
                yield Loupe(id="loupe")

    def step(self) -> None:
        if self.with_loupe and time.perf_counter() - self.t0 < self.seconds:
            frame = self.frames[self.count % len(self.frames)]
            h, w = frame.shape
            self.query_one(Loupe).show(frame, (w / 2, h / 4), mag=2, clip=0.5, pixel_m=0.05e-9,
                                       mark=(w / 2, h / 4))
        super().step()


@contextlib.contextmanager
def _runner_starts_this_script():
    """bench_redraw.run_tmux starts the script it was loaded from; point it at this one."""
    saved = bench_redraw.__file__
    bench_redraw.__file__ = __file__
    try:
        yield
    finally:
        bench_redraw.__file__ = saved


def headless_build_ms(px: int, n: int = 40) -> float:
    frames = bench_redraw.make_frames(8, px, px)
    times = []
    for i in range(n + 3):
        t0 = time.process_time()
        loupe_view(frames[i % len(frames)], px / 2, px / 4, 57, 70, 2, 0.5)
        if i >= 3:
            times.append(time.process_time() - t0)
    return statistics.median(times) * 1e3


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--seconds", type=float, default=4.0)
    p.add_argument("--skip-tmux", action="store_true")
    p.add_argument("--px", type=int, nargs="+", default=[256, 1024], help="frame sizes")
    p.add_argument("--only-256", action="store_true", help="256 colours only (the target)")
    p.add_argument("--player", type=Path, help=argparse.SUPPRESS)
    a = p.parse_args(argv)
    if a.player:
        px = int(os.environ.get(SIZE_VAR, "256"))
        frames = bench_redraw.make_frames(40, px, px)
        LoupePlayer(frames, a.seconds, a.player, os.environ.get(MODE_VAR) == "loupe").run(
            mouse=False)
        return 0
    print("cache: none involved: frames are invented in memory before timing; each timed redraw "
          "shows a frame not drawn before")
    for px in a.px:
        print(f"headless loupe picture (70 x 57 cells, 2x) from {px}x{px} frames: "
              f"{headless_build_ms(px):.2f} ms median CPU")
    if a.skip_tmux:
        return 0
    for px in a.px:
        for colorterm in (None,) if a.only_256 else (None, "truecolor"):
            rates = {}
            for mode in ("frame", "loupe"):
                os.environ[MODE_VAR], os.environ[SIZE_VAR] = mode, str(px)
                print(f"{px}x{px} px, {'frame view alone' if mode == 'frame' else 'with loupe'}:")
                with _runner_starts_this_script():
                    got = bench_redraw.run_tmux(a.seconds, colorterm)
                rates[mode] = got["rate"] if got else None
            if all(rates.values()):
                print(f"  -> {px}x{px} {'truecolor' if colorterm else '256 colours'}: loupe / "
                      f"alone = {rates['loupe'] / rates['frame']:.2f}; with loupe "
                      f"{rates['loupe']:.1f}/s, target 30: {rates['loupe'] / 30:.2f}x")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
