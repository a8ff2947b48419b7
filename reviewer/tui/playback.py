"""Playback in movie time: at xN the movie moves N seconds of its own time per second of wall time
(x1 is real time). The screen draws at most `play_fps` frames a second (tmux and SSH cannot show
more), so faster playback skips frames to hold the movie-time rate; the status line shows the rate
actually drawn. Skip-idle jumps over stretches where no frame scores above the idle threshold.
"""

from __future__ import annotations

import math
import os
import time
from collections import deque

import numpy as np

SPEEDS = (0.1, 0.25, 0.5, 1, 2, 5, 10, 20, 50, 100)  # movie seconds per wall-clock second
REAL_TIME = SPEEDS.index(1)
IDLE_SIGMAS = 3.0  # skip-idle playback: frames scoring above median + 3 robust SD (common practice)
NOMINAL_FPS = 10.0  # a movie without timing plays as if it had this frame rate (and says so)
RATE_WINDOW_S = 2.0  # the drawn rate is measured over the last this many seconds


def speed_text(speed: float) -> str:
    return f"x{speed:g}"


def factor_text(factor: float) -> str:
    """A movie-time factor as measured: x0.10, x1.00, x4.97, x20, x100."""
    return f"x{factor:.0f}" if factor >= 10 else f"x{factor:.2f}"


def rate_text(per_s: float) -> str:
    return f"{per_s:,.0f}" if per_s >= 100 else f"{per_s:.3g}"


def movie_frame(base_frame: int, elapsed_s: float, fps: float, speed: float) -> int:
    """The frame movie time has reached `elapsed_s` wall seconds after `base_frame` was shown:
    base + elapsed x fps x speed, rounded down (so no frame is shown early)."""
    return base_frame + math.floor(max(elapsed_s, 0.0) * fps * speed + 1e-9)


def movie_frame_by_times(times_s: np.ndarray, base_frame: int, elapsed_s: float,
                         speed: float) -> int:
    """As movie_frame for a movie with a time per frame: the last frame whose time is at most the
    base frame's time + elapsed x speed."""
    t = float(times_s[base_frame]) + max(elapsed_s, 0.0) * speed
    return max(base_frame, int(np.searchsorted(times_s, t + 1e-12, side="right")) - 1)


def play_target(current: int, reached: int, n_frames: int,
                active: np.ndarray | None = None) -> tuple[int, bool]:
    """Where one playback tick goes: (frame, restart the clock there).

    Plain playback: the frame movie time has reached (at most the last one); frames in between are
    skipped. Skip-idle (`active`: the sorted frames that score above the idle threshold): when the
    stretch (current, reached] holds active frames, the last of them, so the movie-time rate holds
    and the frame drawn is an active one; when the whole stretch is idle, the next active frame
    after it, with the clock restarted there, so an idle stretch takes no time; with none left,
    the last frame. While movie time has not reached the next frame, the current one stays."""
    last = n_frames - 1
    reached = min(reached, last)
    if reached <= current:
        return current, False
    if active is None:
        return reached, False
    j = int(np.searchsorted(active, reached, side="right")) - 1
    if j >= 0 and int(active[j]) > current:
        return int(active[j]), False
    i = int(np.searchsorted(active, reached, side="right"))
    return (int(active[i]) if i < len(active) else last), True


def drawn_rate(draws, fps: float) -> tuple[float, float] | None:
    """(frames drawn per second, movie seconds per wall second) over `draws`, a sequence of
    (wall time, frame) of the frames drawn; None until they span a quarter of a second."""
    if len(draws) < 2:
        return None
    (t0, f0), (t1, f1) = draws[0], draws[-1]
    span = t1 - t0
    if span < 0.25:
        return None
    return (len(draws) - 1) / span, (f1 - f0) / fps / span


class PlaybackMixin:
    """Mixin for ReviewApp: the play / speed / skip-idle keys."""

    def init_playback(self) -> None:
        self.playing = False
        self.speed_index = REAL_TIME
        self.skip_idle = False
        self._play_timer = None
        self._active: np.ndarray | None = None
        self._hinted_ssh = False
        self._base = (0, 0.0)  # (frame, wall time) movie time counts from
        self.draws: deque[tuple[float, int]] = deque()  # (wall time, frame) of frames drawn

    @property
    def speed(self) -> float:
        return SPEEDS[self.speed_index]

    def movie_fps(self) -> tuple[float, bool]:
        """The movie's frame rate for playback, and whether it is known (else NOMINAL_FPS)."""
        fps = self.session.meta.get("fps") or getattr(self.movie, "fps", None)
        if not fps:
            times = self.session.times_s
            if times is not None and len(times) > 1:
                period = float(np.median(np.diff(times)))
                fps = 1.0 / period if period > 0 else None
        return (float(fps), True) if fps else (NOMINAL_FPS, False)

    def frame_times(self) -> np.ndarray | None:
        """Each frame's time when the movie has per-frame times (and no constant rate)."""
        if self.session.meta.get("fps") or getattr(self.movie, "fps", None):
            return None
        times = self.session.times_s
        if times is None or len(times) != self.movie.n_frames:
            return None
        return np.asarray(times, dtype=np.float64)

    def _restart_clock(self) -> None:
        self._base = (self.frame, time.monotonic())

    def action_play(self) -> None:
        self.playing = not self.playing
        if self._play_timer is not None:
            self._play_timer.stop()
            self._play_timer = None
        if self.playing:
            self.draws.clear()
            if self.frame >= self.movie.n_frames - 1:
                self.go(0)  # from the start again
            self._restart_clock()
            self.draws.append((self._base[1], self.frame))
            self._play_timer = self.set_interval(1.0 / self.play_fps, self._tick)
            if os.environ.get("SSH_CONNECTION") and not self._hinted_ssh:
                self._hinted_ssh = True
                self.notify(f"the screen draws at most {self.play_fps:g} frames/s; over SSH, "
                            "`ssh -C` (compression) makes it smoother")
        self.update_status()

    def pause(self) -> None:
        if self.playing:
            self.action_play()

    def _tick(self) -> None:
        now = time.monotonic()
        base_frame, base_time = self._base
        times = self.frame_times()
        if times is not None:
            reached = movie_frame_by_times(times, base_frame, now - base_time, self.speed)
        else:
            reached = movie_frame(base_frame, now - base_time, self.movie_fps()[0], self.speed)
        active = self.active_frames() if self.skip_idle else None
        target, restart = play_target(self.frame, reached, self.movie.n_frames, active)
        if target == self.frame:
            return  # movie time has not reached the next frame yet
        if restart:
            self._base = (target, now)
        self.draws.append((now, target))
        while len(self.draws) > 2 and now - self.draws[0][0] > RATE_WINDOW_S:
            self.draws.popleft()
        if target >= self.movie.n_frames - 1:
            self.action_play()  # stop at the end
        self.go(target)

    def active_frames(self) -> np.ndarray | None:
        if self._active is None and self.scores is not None:
            s = np.nan_to_num(np.asarray(self.scores, dtype=np.float64))
            med = float(np.median(s))
            sd = 1.4826 * float(np.median(np.abs(s - med))) or float(np.std(s)) or 1.0
            self._active = np.flatnonzero(s > med + IDLE_SIGMAS * sd)
        return self._active

    def _set_speed(self, index: int) -> None:
        self.speed_index = min(max(index, 0), len(SPEEDS) - 1)
        if self.playing:
            self._restart_clock()
            self.draws.clear()
            self.draws.append((self._base[1], self.frame))
        fps, known = self.movie_fps()
        wanted = fps * self.speed
        text = f"speed {speed_text(self.speed)} = {rate_text(wanted)} movie frames/s"
        if not known:
            text += f" (no timing: x1 = {NOMINAL_FPS:g}/s)"
        if wanted > self.play_fps:
            text += f"; drawn at most {self.play_fps:g}/s, the rest skipped"
        self.say(text)
        self.update_status()

    def action_slower(self) -> None:
        self._set_speed(self.speed_index - 1)

    def action_faster(self) -> None:
        self._set_speed(self.speed_index + 1)

    def action_skip_idle(self) -> None:
        if self.scores is None:
            self.say("skipping idle stretches needs the scan's scores", warn=True)
            return
        self.skip_idle = not self.skip_idle
        self.say("playback skips idle stretches" if self.skip_idle else
                 "playback shows every stretch")
        self.update_status()

    def play_text(self) -> str:
        """⏸ x5, or while playing also the rate drawn: ▶ x5 · 12/s drawn = x4.98."""
        skip = " skip idle" if self.skip_idle else ""
        if not self.playing:
            return f"⏸ {speed_text(self.speed)}{skip}"
        rate = drawn_rate(self.draws, self.movie_fps()[0])
        drawn = "" if rate is None else f" · {rate_text(rate[0])}/s drawn = {factor_text(rate[1])}"
        return f"▶ {speed_text(self.speed)}{skip}{drawn}"
