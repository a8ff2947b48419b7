"""Looking closely at an event (mixin for ReviewApp): the loupe, the before/after blink, scale bars,
the kymograph pane with its line, and clips.

Frames read: the loupe uses the frame the frame view shows; the blink reads its 2 x N frames once per
event (means kept until the event or N changes); the kymograph reads each frame it shows once while
the line stays the same. Nothing else is read.
"""

from __future__ import annotations

import contextlib

import numpy as np

from reviewer.movie import regions
from reviewer.tui.loupe import MAGNIFICATIONS
from reviewer.tui.seeing_kymo import KymoActions

BLINK_NS = (1, 2, 3, 5, 8, 12, 20, 30, 50)  # frames averaged on each side of the blink
DEFAULT_BLINK_N = 5
BLINK_HZ = 2.0  # the auto-alternating blink: flips per second


class SeeingMixin(KymoActions):
    """Keys loupe_* (keymaps/default.toml, group [see])."""

    def init_seeing(self) -> None:
        self.loupe_on = False
        self.loupe_mag = 1
        self.blink_side: str | None = None  # None (the live frame), "before" or "after"
        self.blink_n = DEFAULT_BLINK_N
        self._blink_timer = None
        self._blink_means: dict[tuple[int, int], np.ndarray | None] = {}
        self._blink_saved_mode: str | None = None
        self.kymo_on = False
        self.kymo_line = None  # movie.kymograph.Line
        self.kymo_width = 1
        self.line_saved_in_session = False
        self.kymo_scope = "cursor"  # or "movie": the whole movie, binned
        self._whole = None  # ((line, bin), samples) of the last whole-movie pass
        self._whole_pending = None  # (line, bin) being read
        self._whole_done_frames = 0
        self._kymo_window = None
        self.cross: tuple[float, float] | None = None  # while a line is placed
        self.cross_points: list[tuple[float, float]] = []
        self._seen: tuple[int, np.ndarray | None] | None = None  # (frame, full-resolution pixels)
        self.restore_line()

    # ---- composing and layout -------------------------------------------------------------------
    def compose_seeing(self):
        """The loupe and kymograph column (inside #body, after the frame view)."""
        from textual.containers import Vertical

        from reviewer.tui.kymopane import KymoPane
        from reviewer.tui.loupe import Loupe

        column = Vertical(Loupe(id="loupe"), KymoPane(id="kymo"), id="seeing")
        column.styles.width = 48
        column.display = False
        yield column

    def compose_scale(self):
        """The frame view's scale bar row (under #body), shown when the pixel size is known."""
        from reviewer.tui.loupe import ScaleRow

        row = ScaleRow(id="framescale")
        row.display = False
        yield row

    def _part(self, name: str):
        return self.query_one(f"#{name}")

    def pixel_m(self) -> float | None:
        """Metres per movie pixel: --pixel-size (the app's pixel_size_nm), else the movie's own."""
        nm = getattr(self, "pixel_size_nm", None) or getattr(self.movie, "pixel_size_nm", None)
        try:
            nm = float(nm) if nm else None
        except (TypeError, ValueError):
            nm = None
        return nm * 1e-9 if nm and nm > 0 else None

    def fit_seeing(self, size=None) -> None:
        """Show the column when the loupe or the kymograph is on; when the body is narrow (app.
        fit_layout, below app.NARROW_BELOW columns) it takes the frame view's place, wider it sits
        beside it."""
        with contextlib.suppress(Exception):  # before compose / after unmount
            width = (size or self.size).width
            column, loupe, kymo = self._part("seeing"), self._part("loupe"), self._part("kymo")
            want_loupe = self.loupe_on or self.cross is not None
            column.display = want_loupe or self.kymo_on
            loupe.display, kymo.display = want_loupe, self.kymo_on
            narrow = self.query_one("#body").has_class("narrow")
            self.frameview.display = not (column.display and narrow)
            column.styles.width = "1fr" if narrow else max(40, int(width * 0.38))
            self._part("framescale").display = (self.pixel_m() is not None
                                                 and self.frameview.display)

    # ---- where to look --------------------------------------------------------------------------
    def seeing_place(self) -> tuple[float, float]:
        """The crosshair while placing a line, else the current event's place, else the centre of
        what the frame view shows."""
        if self.cross is not None:
            return self.cross
        ev = self.current_event()
        if ev is not None and ev.x is not None and ev.y is not None and np.isfinite(ev.x) \
                and np.isfinite(ev.y):
            return float(ev.x), float(ev.y)
        try:
            y0, y1, x0, x1 = self.frameview.view_region()
            return (x0 + x1 - 1) / 2, (y0 + y1 - 1) / 2
        except (AssertionError, AttributeError, TypeError):
            return (self.movie.width - 1) / 2, (self.movie.height - 1) / 2

    def blink_frame(self) -> int:
        """The frame the blink is about: the current event's, else the cursor."""
        ev = self.current_event()
        return int(ev.frame) if ev is not None else int(self.frame)

    def blink_images(self) -> tuple[np.ndarray | None, np.ndarray | None, tuple, tuple]:
        """Means before / after the blink frame and their frame ranges (read once, then kept)."""
        before, after = regions.blink_ranges(self.blink_frame(), self.blink_n, self.movie.n_frames)
        wanted = {before, after}
        for key in [k for k in self._blink_means if k not in wanted]:
            del self._blink_means[key]
        for rng in (before, after):
            if rng not in self._blink_means:
                self._blink_means[rng] = regions.window_mean(self.movie, *rng)
        return self._blink_means[before], self._blink_means[after], before, after

    # ---- drawing (app.show_frame calls show_seeing with the frame it shows) ---------------------
    def seen_image(self) -> np.ndarray | None:
        """The viewed frame at full resolution, read once per frame and only when the loupe, the
        blink, the kymograph or the crosshair asks (the frame view reads reduced frames); None when
        it cannot be read."""
        from reviewer.errors import BadInput

        if self._seen is None or self._seen[0] != self.frame:
            try:
                image = self.movie.frame(self.frame)
            except (BadInput, OSError, ValueError):
                image = None
            self._seen = (self.frame, image)
        return self._seen[1]

    def seeing_shown(self) -> bool:
        """Whether anything of ours needs the full-resolution frame now."""
        return bool(self.loupe_on or self.kymo_on or self.blink_side is not None
                    or self.cross is not None)

    def show_seeing(self, image: np.ndarray | None = None) -> None:
        from reviewer.errors import BadInput

        if not self.seeing_shown():
            self._draw_scale()
            return
        image = self.seen_image() if image is None else image
        if self.blink_side is not None and self.frameview.mode != "frame":
            self._end_blink(restore=False)  # another view was chosen
        shown, others, label = image, (), ""
        if self.blink_side is not None:
            try:
                b, a, rb, ra = self.blink_images()
            except (BadInput, OSError, ValueError) as exc:
                self._end_blink()
                self.say(f"blink: the frames around the event cannot be read ({exc})", warn=True)
            else:
                side, other, rng = (b, a, rb) if self.blink_side == "before" else (a, b, ra)
                label = f"{self.blink_side}: mean of frames {rng[0]}–{rng[1] - 1}"
                if side is None:  # at the movie's start one side is empty: the other is shown
                    side, rng = other, (ra if self.blink_side == "before" else rb)
                    label = (f"{self.blink_side}: no frames; showing frames "
                             f"{rng[0]}–{rng[1] - 1}")
                shown, others = side, tuple(x for x in (other,) if x is not None)
                self.frameview.show(side)
                pin_frame_contrast(self.frameview, [side, *others])
        if self.cross is not None:
            self.frameview.set_mark(*self.cross)
        self._draw_loupe(shown, others, label)
        self._draw_kymograph(image)
        self._draw_scale()

    def _draw_loupe(self, shown, others, label) -> None:
        loupe = self._part("loupe")
        if shown is None or not loupe.display:
            return
        mark = None
        ev = self.current_event()
        if ev is not None and ev.x is not None and ev.y is not None:
            mark = (ev.x, ev.y)
        pts = list(self.cross_points)
        if self.kymo_line is not None and self.cross is None:
            ln = self.kymo_line
            pts = [(ln.x0, ln.y0), (ln.x1, ln.y1)]
        elif self.cross is not None and len(pts) == 1:
            pts = [pts[0], self.cross]
        if self.cross is not None:
            label = (label + " · " if label else "") + (
                f"line: Enter sets {'the end' if self.cross_points else 'the start'}, arrows move")
        clip = getattr(self.frameview, "clip", 0.5)
        loupe.show(shown, self.seeing_place(), mag=self.loupe_mag, clip=clip, contrast_with=others,
                   label=label, mark=mark, cross=self.cross, line_points=pts,
                   pixel_m=self.pixel_m())

    def _draw_scale(self) -> None:
        row = self._part("framescale")
        pixel_m = self.pixel_m()
        if pixel_m is None or not self.frameview.display:
            return
        with contextlib.suppress(AssertionError, AttributeError, TypeError):
            from reviewer.tui import render

            y0, y1, x0, x1 = self.frameview.view_region()
            size = self.frameview.size
            out_h, out_w, _, _ = render.fit(y1 - y0, x1 - x0, size.height, size.width)
            row.set_scale(pixel_m, x1 - x0, out_w)

    def seeing_text(self) -> str:
        """For the status line while the blink is on: which side, N."""
        if self.blink_side is None:
            return ""
        auto = " auto" if self._blink_timer is not None else ""
        return f"blink{auto} {self.blink_side} · N {self.blink_n}"

    def _refresh_seeing(self) -> None:
        self.fit_seeing()
        if self.seen_image() is not None:
            self.call_after_refresh(self.show_seeing, self.seen_image())
        self.update_status()

    # ---- loupe keys -----------------------------------------------------------------------------
    def action_loupe_toggle(self) -> None:
        self.loupe_on = not self.loupe_on
        self._refresh_seeing()

    def action_loupe_magnify(self) -> None:
        self.loupe_mag = MAGNIFICATIONS[(MAGNIFICATIONS.index(self.loupe_mag) + 1)
                                        % len(MAGNIFICATIONS)]
        if not self.loupe_on:
            self.loupe_on = True
        self._refresh_seeing()
        self.say(f"loupe {self.loupe_mag}×: one movie pixel = {self.loupe_mag}×{self.loupe_mag} "
                 "half-cells")

    # ---- blink keys -----------------------------------------------------------------------------
    def action_loupe_blink(self) -> None:
        """Before / after: each press shows the other side."""
        if self.blink_side is None:
            self._blink_saved_mode = self.frameview.mode
            self.frameview.mode = "frame"
            self.blink_side = "before"
        else:
            self.blink_side = "after" if self.blink_side == "before" else "before"
        self._show_blink()

    def _show_blink(self) -> None:
        if self.seen_image() is None:
            self.show_frame()
        else:
            self.show_seeing(self.seen_image())
        self.update_status()

    def action_loupe_blink_auto(self) -> None:
        if self._blink_timer is not None:
            self._blink_timer.stop()
            self._blink_timer = None
            self.update_status()
            return
        if self.blink_side is None:
            self.action_loupe_blink()
        self._blink_timer = self.set_interval(1.0 / BLINK_HZ, self.action_loupe_blink)
        self.update_status()

    def _end_blink(self, restore: bool = True) -> None:
        if self._blink_timer is not None:
            self._blink_timer.stop()
            self._blink_timer = None
        self.blink_side = None
        self._blink_means.clear()
        self.frameview.pin_limits(None)
        if restore and self._blink_saved_mode is not None:
            self.frameview.mode = self._blink_saved_mode
        self._blink_saved_mode = None

    def action_loupe_blink_off(self) -> None:
        if self.blink_side is None:
            self.say("the live frame is already shown (blink is off)")
            return
        self._end_blink()
        self.show_frame()

    def _blink_step(self, step: int) -> None:
        i = min(range(len(BLINK_NS)), key=lambda k: abs(BLINK_NS[k] - self.blink_n))
        self.blink_n = BLINK_NS[min(max(i + step, 0), len(BLINK_NS) - 1)]
        self.say(f"blink: mean of {self.blink_n} frame{'s' if self.blink_n > 1 else ''} before "
                 "and from the event on")
        if self.blink_side is not None:
            self._show_blink()

    def action_loupe_blink_fewer(self) -> None:
        self._blink_step(-1)

    def action_loupe_blink_more(self) -> None:
        self._blink_step(+1)


def pin_frame_contrast(frameview, images) -> bool:
    """Give the frame view the same contrast for both blink images: its limits for every contrast
    step from the pixels of all `images` together (sampled on a grid, as the frame view samples);
    False when there is no finite pixel (the frame view then uses its own contrast)."""
    from reviewer.tui.frameview import CLIPS

    samples = []
    for a in images:
        step = max(1, int(np.ceil(np.sqrt(a.size / (1 << 14)))))
        samples.append(np.asarray(a[::step, ::step], dtype=np.float64).ravel())
    values = np.concatenate(samples)
    values = values[np.isfinite(values)]
    if values.size == 0:
        return False
    qs = np.percentile(values, [q for c in CLIPS for q in (c, 100.0 - c)])
    frameview.pin_limits({i: (float(qs[2 * i]), float(qs[2 * i + 1])) for i in range(len(CLIPS))})
    return True
