"""The kymograph pane's keys, placing its line with a crosshair, and writing clips (mixin for
ReviewApp, part of SeeingMixin). Files go beside the movie (paths.output_beside, else the session
folder), under names not used yet, checked against the inputs (reviewer.outputs.guard)."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from reviewer.movie import regions

LINE_WIDTHS = (1, 3, 5, 9, 15)
LINE_LENGTH = 64  # pixels of the default line across the front
CLIP_FRAMES = 10  # before and from the event on, as `reviewer clip`'s defaults
CLIP_CROP = 96
META_LINE = "kymograph_line"  # the session's meta key (store/meta.py)


class KymoActions:
    # ---- the line -------------------------------------------------------------------------------
    def restore_line(self) -> None:
        """The line saved in the session, when the store keeps one."""
        value = self.session.meta.get(META_LINE)
        if isinstance(value, list | tuple) and len(value) == 5:
            try:
                x0, y0, x1, y1, w = (float(v) for v in value)
            except (TypeError, ValueError):
                return
            self.kymo_line = regions.fit_line(x0, y0, x1, y1, int(w), self.movie.height,
                                              self.movie.width)
            self.line_saved_in_session = self.kymo_line is not None

    def _keep_line(self) -> None:
        """Into the session's meta (kept for this run only when the session cannot be written)."""
        ln = self.kymo_line
        if ln is None:
            self.line_saved_in_session = False
            return
        ok, _ = self.write("saving the kymograph line", self.session.update_meta,
                           **{META_LINE: [ln.x0, ln.y0, ln.x1, ln.y1, ln.width]})
        self.line_saved_in_session = ok

    def default_line(self):
        image = self.seen_image()
        if image is None:
            return None
        x, y = self.seeing_place()
        return regions.line_across(image, x, y, LINE_LENGTH, self.kymo_width)

    def action_loupe_kymograph(self) -> None:
        """Off -> the frames around the cursor -> the whole movie, binned to fit -> off."""
        if self.kymo_on and self.kymo_scope == "cursor":
            self.kymo_scope = "movie"
            self.say("kymograph: the whole movie, in rows of several frames (read in the "
                     "background; the frames around the cursor until it is done)")
            self._refresh_seeing()
            return
        self.kymo_on, self.kymo_scope = not self.kymo_on, "cursor"
        if self.kymo_on and self.kymo_line is None:
            self.kymo_line = self.default_line()
            if self.kymo_line is None:
                self.kymo_on = False
                self.say("kymograph: no frame to place a line on", warn=True)
                return
            self._keep_line()
            self.say("kymograph: a line across the edge at the event's place "
                     f"({self.keymap_key('loupe_line') or 'the line key'} places another)")
        self._refresh_seeing()

    def action_loupe_line(self) -> None:
        """Start placing a line with the crosshair in the loupe; pressed again, stop."""
        if self.cross is not None:
            self.cross, self.cross_points = None, []
            self.set_focus(None)
            self.say("placing the line: cancelled")
        else:
            self.pause()
            x, y = self.seeing_place()
            self.cross, self.cross_points = (float(round(x)), float(round(y))), []
            self.say("line: arrows move the crosshair (shift: 10 px), Enter sets the start, "
                     "then the end")
        self._refresh_seeing()
        if self.cross is not None:
            self.call_after_refresh(self.set_focus, self._part("loupe"))

    def cross_move(self, dx: int, dy: int) -> None:
        if self.cross is None:
            return
        x, y = self.cross
        self.cross = (float(min(max(x + dx, 0), self.movie.width - 1)),
                      float(min(max(y + dy, 0), self.movie.height - 1)))
        self.show_seeing(self.seen_image())

    def cross_point(self) -> None:
        if self.cross is None:
            return
        self.cross_points.append(self.cross)
        if len(self.cross_points) < 2:
            self.say(f"line starts at x {self.cross[0]:.0f}, y {self.cross[1]:.0f}; move to the "
                     "end and press Enter")
            self.show_seeing(self.seen_image())
            return
        (x0, y0), (x1, y1) = self.cross_points
        line = regions.fit_line(x0, y0, x1, y1, self.kymo_width, self.movie.height,
                                self.movie.width)
        if line is None:
            self.cross_points.pop()
            self.say("the line must be at least 1 pixel long; move the crosshair", warn=True)
            return
        self.kymo_line, self.kymo_on = line, True
        self.cross, self.cross_points = None, []
        self.set_focus(None)
        self._keep_line()
        self.say(f"kymograph line x {x0:.0f},{y0:.0f} → {x1:.0f},{y1:.0f}, width {line.width}"
                 + ("" if self.line_saved_in_session else " (kept for this run)"))
        self._refresh_seeing()

    def action_loupe_line_width(self) -> None:
        i = LINE_WIDTHS.index(self.kymo_width) if self.kymo_width in LINE_WIDTHS else 0
        self.kymo_width = LINE_WIDTHS[(i + 1) % len(LINE_WIDTHS)]
        ln = self.kymo_line
        if ln is not None:
            self.kymo_line = regions.fit_line(ln.x0, ln.y0, ln.x1, ln.y1, self.kymo_width,
                                              self.movie.height, self.movie.width) or ln
            self._keep_line()
        self.say(f"kymograph: average across {self.kymo_width} pixel"
                 f"{'s' if self.kymo_width > 1 else ''}")
        self._refresh_seeing()

    # ---- the pane -------------------------------------------------------------------------------
    def _kymograph_now(self, image: np.ndarray | None):
        """(samples, first frame, frames per row) of what the pane shows, or None: the whole
        movie once its pass is done, else the frames around the cursor."""
        from reviewer.movie.kymograph_window import KymographWindow, centred_range

        pane = self._part("kymo")
        if not self.kymo_on or self.kymo_line is None or not pane.display:
            return None
        if self.kymo_scope == "movie":
            got = self._whole_movie_kymograph(pane.frames_shown())
            if got is not None:
                return got
        window = self._kymo_window
        if window is None or window.line != self.kymo_line:
            window = self._kymo_window = KymographWindow(self.movie, self.kymo_line)
        start, stop = centred_range(self.frame, pane.frames_shown(), self.movie.n_frames)
        known = {self.frame: image} if image is not None else None
        return window.image(start, stop, known), start, 1

    # ---- the whole movie, in a thread (one frame in memory at a time) ---------------------------
    def _whole_movie_kymograph(self, rows: int):
        """The finished pass for this line and pane height, or None (then one is started)."""
        from reviewer.movie.kymograph import auto_bin

        key = (self.kymo_line, auto_bin(self.movie.n_frames, max(rows, 2)))
        if self._whole is not None and self._whole[0] == key:
            return self._whole[1], 0, key[1]
        if self._whole_pending != key:
            self._whole_pending, self._whole_done_frames = key, 0
            self.run_worker(lambda: self._whole_thread(key), thread=True, exclusive=True,
                            group="kymograph", exit_on_error=False)
        return None

    def _whole_thread(self, key) -> None:
        import time

        from textual.worker import get_current_worker

        from reviewer.errors import BadInput
        from reviewer.movie.kymograph_window import whole_movie

        worker, done, last = get_current_worker(), [0], [0.0]

        class Stopped(Exception):
            pass

        def check() -> None:
            if worker.is_cancelled or self._whole_pending != key:
                raise Stopped

        def progress(n: int) -> None:
            done[0] += n
            if time.monotonic() - last[0] > 0.25:
                last[0] = time.monotonic()
                self.call_from_thread(self._whole_progress, key, done[0])

        try:
            image = whole_movie(self.movie, key[0], key[1], check, progress)
        except Stopped:
            return
        except (BadInput, OSError, ValueError) as exc:
            self.call_from_thread(self._whole_failed, key, str(exc))
            return
        self.call_from_thread(self._whole_finished, key, image)

    def _whole_progress(self, key, frames: int) -> None:
        if self._whole_pending == key:
            self._whole_done_frames = frames
            self._draw_kymograph(self.seen_image())

    def _whole_finished(self, key, image: np.ndarray) -> None:
        if self._whole_pending == key:
            self._whole, self._whole_pending = (key, image), None
            self._draw_kymograph(self.seen_image())

    def _whole_failed(self, key, text: str) -> None:
        if self._whole_pending == key:
            self._whole_pending, self.kymo_scope = None, "cursor"
            self.say(f"kymograph of the whole movie stopped: {text}", warn=True)

    def _draw_kymograph(self, image: np.ndarray | None) -> None:
        from reviewer.errors import BadInput

        try:
            got = self._kymograph_now(image)
        except (BadInput, OSError, ValueError) as exc:
            self.say(f"kymograph: frames cannot be read ({exc})", warn=True)
            return
        if got is None:
            return
        samples, start, bin_frames = got
        ln = self.kymo_line
        label = (f"x {ln.x0:.0f},{ln.y0:.0f} → {ln.x1:.0f},{ln.y1:.0f} · width {ln.width} · "
                 f"{samples.shape[1]} px")
        if self.kymo_scope == "movie" and bin_frames == 1 and self._whole_pending is not None:
            label += (f" · whole movie: {100 * self._whole_done_frames / self.movie.n_frames:.0f}"
                      " % read")
        bad = int(np.isnan(samples[:, 0]).sum())
        if bad:
            label += f" · {bad} unreadable frame{'s' if bad > 1 else ''} black"
        self._part("kymo").show(samples, start, self.frame, self._ev_frames,
                                clip=getattr(self.frameview, "clip", 0.5), label=label,
                                bin_frames=bin_frames)

    # ---- files ----------------------------------------------------------------------------------
    def _unused_beside(self, middle: str, *suffixes: str) -> list[Path]:
        """Paths <movie stem><middle>[-k]<suffix> beside the movie (else in the session folder),
        none of which exists yet."""
        from reviewer.paths import output_beside

        for k in range(1, 10_000):
            tag = "" if k == 1 else f"-{k}"
            paths = [output_beside(self.movie.path, f"{middle}{tag}{s}", self.session.folder)
                     for s in suffixes]
            if not any(p.exists() for p in paths):
                return paths
        raise OSError(f"no free name for {middle} beside the movie")

    def _guarded(self, middle: str, *suffixes: str) -> list[Path]:
        from reviewer.outputs import WriteFailed, guard, movie_files

        paths = self._unused_beside(middle, *suffixes)
        try:
            guard(paths, movie_files(self.movie), [self.session.folder])
        except WriteFailed:  # the movie's folder refused: the session folder, as export does
            paths = [self.session.folder / p.name for p in paths]
            guard(paths, movie_files(self.movie), [self.session.folder])
        return paths

    def action_loupe_kymograph_save(self) -> None:
        from reviewer.errors import BadInput
        from reviewer.movie.kymograph_image import save_kymograph

        if self.kymo_line is None:
            key = self.keymap_key("loupe_kymograph")
            self.say(f"no kymograph line yet{f' ({key} places one)' if key else ''}", warn=True)
            return
        ln = self.kymo_line
        try:
            got = self._kymograph_now(self.seen_image())
            if got is None:
                self.say("show the kymograph first (it saves what it shows)", warn=True)
                return
            samples, start, bin_frames = got
            png, _ = self._guarded(".kymograph", ".png", ".tif")
            frames = min(len(samples) * bin_frames, self.movie.n_frames - start)
            meta = {"movie": str(self.movie.path), "fingerprint": self.movie.fingerprint,
                    "line": [ln.x0, ln.y0, ln.x1, ln.y1], "width": ln.width, "first_frame": start,
                    "frames": frames, "bin_frames": bin_frames, "fps": self.movie.fps}
            tif = save_kymograph(samples, png, meta, self._ev_frames)
        except (BadInput, OSError) as exc:
            self.say(f"kymograph not saved: {exc}", warn=True)
            return
        self.say(f"kymograph frames {start}–{start + frames - 1}"
                 f"{f' in rows of {bin_frames}' if bin_frames > 1 else ''}: {png} + {tif.name}; "
                 f"headless: reviewer kymograph {self.movie.path.name} --line "
                 f"{ln.x0:g},{ln.y0:g},{ln.x1:g},{ln.y1:g} --width {ln.width} -o KYMO.png")

    def action_loupe_clip(self) -> None:
        """The viewed event's clip (GIF) and strip (PNG), as `reviewer clip` writes them."""
        from reviewer.errors import BadInput
        from reviewer.movie.clip import Window, default_zoom
        from reviewer.movie.clip_files import render, write

        self.pause()
        ev = self.current_event()
        frame = int(ev.frame) if ev is not None else int(self.frame)
        x, y = self.seeing_place()
        middle = f".{ev.event_id}.clip" if ev is not None else f".frame{frame}.clip"
        try:
            gif, png = self._guarded(middle, ".gif", ".png")
            window = Window.around(self.movie, frame, CLIP_FRAMES, CLIP_FRAMES, x, y, CLIP_CROP)
            frames = window.read(self.movie)
            zoom = default_zoom(window.width)
            for kind, out in (("animation", gif), ("strip", png)):
                images, facts = render(frames, window, self.movie, kind, self.pixel_m(), zoom,
                                       10.0)
                write(images, kind, out, facts)
        except (BadInput, OSError) as exc:
            self.say(f"clip not written: {exc}", warn=True)
            return
        self.say(f"clip of frames {window.first}–{window.stop - 1}: {gif} + strip {png.name}")
