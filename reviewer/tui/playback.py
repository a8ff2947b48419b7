"""Playback: space plays at a capped rate (tmux and SSH cannot show more), speeds, skip idle stretches."""

from __future__ import annotations

import os

import numpy as np

SPEEDS = (1, 2, 4, 8, 16, 32, 64, 128)  # frames advanced per playback tick
IDLE_SIGMAS = 3.0  # skip-idle playback: frames scoring above median + 3 robust SD (common practice)


class PlaybackMixin:
    """Mixin for ReviewApp: the play / speed / skip-idle keys."""

    def init_playback(self) -> None:
        self.playing = False
        self.speed_index = 0
        self.skip_idle = False
        self._play_timer = None
        self._active: np.ndarray | None = None
        self._hinted_ssh = False

    def action_play(self) -> None:
        self.playing = not self.playing
        if self._play_timer is not None:
            self._play_timer.stop()
            self._play_timer = None
        if self.playing:
            self._play_timer = self.set_interval(1.0 / self.play_fps, self._tick)
            if os.environ.get("SSH_CONNECTION") and not self._hinted_ssh:
                self._hinted_ssh = True
                self.notify(f"playback is capped at {self.play_fps:g} frames/s; over SSH, "
                            "`ssh -C` (compression) makes it smoother")
        self.update_status()

    def pause(self) -> None:
        if self.playing:
            self.action_play()

    def _tick(self) -> None:
        step = SPEEDS[self.speed_index]
        if self.skip_idle and self.active_frames() is not None:
            act = self._active
            i = int(np.searchsorted(act, self.frame + step - 1, side="right"))
            target = int(act[i]) if i < len(act) else self.movie.n_frames - 1
        else:
            target = self.frame + step
        if target >= self.movie.n_frames - 1:
            target = self.movie.n_frames - 1
            self.action_play()  # stop at the end
        self.go(target)

    def active_frames(self) -> np.ndarray | None:
        if self._active is None and self.scores is not None:
            s = np.nan_to_num(np.asarray(self.scores, dtype=np.float64))
            med = float(np.median(s))
            sd = 1.4826 * float(np.median(np.abs(s - med))) or float(np.std(s)) or 1.0
            self._active = np.flatnonzero(s > med + IDLE_SIGMAS * sd)
        return self._active

    def action_slower(self) -> None:
        self.speed_index = max(0, self.speed_index - 1)
        self.update_status()

    def action_faster(self) -> None:
        self.speed_index = min(len(SPEEDS) - 1, self.speed_index + 1)
        self.update_status()

    def action_skip_idle(self) -> None:
        if self.scores is None:
            self.notify("skipping idle stretches needs the scan's scores", severity="warning")
            return
        self.skip_idle = not self.skip_idle
        self.update_status()

    def play_text(self) -> str:
        speed = SPEEDS[self.speed_index]
        skip = " skip idle" if self.skip_idle else ""
        return f"{'▶' if self.playing else '⏸'} x{speed}{skip}"
