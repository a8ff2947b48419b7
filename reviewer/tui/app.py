"""The review app: frame pane, event list, timeline, status line; keys from the key map data.

`make_app(...)` opens the movie, the key map, the label set, the scan cache and the session, and returns
a ReviewApp; the `review` command and the tests both use it. Key actions live in tui/actions.py, the
background scan in tui/scanning.py.
"""

from __future__ import annotations

import contextlib
import os
import sys
from pathlib import Path
from typing import ClassVar

import numpy as np
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.widgets import ProgressBar

from reviewer.tui import keymap as km
from reviewer.tui.actions import ReviewActions
from reviewer.tui.guard import AlertLine, Banner, GuardMixin
from reviewer.tui.labels import load_labels
from reviewer.tui.legend import ChangeLegend, legend_text
from reviewer.tui.scanning import ScanMixin
from reviewer.tui.seeing import SeeingMixin
from reviewer.tui.status import LONG_MOVIE_S, KeyBar, StatusLine, decimals_for

MIN_SIZE = (80, 24)
NARROW_BELOW = 110  # columns: below this the event list shrinks to a narrow column
CONTEXT_FRAMES = 12  # frames averaged before / after for the what-changed and average views
POSITION_SAVE_S = 2.0  # the position is journaled this long after the cursor stops
VIEW_TOLERANCE = 2  # a decision key acts on an event within this many frames of the viewed one


class ReviewApp(SeeingMixin, GuardMixin, ScanMixin, ReviewActions, App):
    """Review one movie's events. Use make_app() to build one."""

    CSS_PATH = "app.tcss"
    ENABLE_COMMAND_PALETTE = False
    AUTO_FOCUS = None  # the review keys act globally; the event list is not focused
    TITLE = "reviewer"
    DEFAULT_SPECS = tuple(km.default_specs())
    BINDINGS: ClassVar = km.make_bindings(DEFAULT_SPECS) + [
        Binding("ctrl+q", "quit", show=False, priority=True),
        Binding("ctrl+c", "quit", show=False, priority=True)]  # our quit (saves), not Textual's

    def __init__(self, movie, session, *, keymap: km.KeyMap, labels: list[str], scan=None,
                 advance: bool = False, run_scan: bool = True, play_fps: float = 12.0,
                 graphics: str = "blocks") -> None:
        super().__init__()
        self.graphics = graphics  # how the frame view draws: half-blocks, or kitty / sixel pixels
        self.movie = movie
        self.session = session
        self.keymap = keymap
        self.labels = labels
        self.advance = advance
        self.play_fps = play_fps
        self.frame = min(max(int(session.position), 0), movie.n_frames - 1)
        self.current_id: str | None = None
        self._ev_frames = np.empty(0, dtype=np.int64)
        self._ev_ends = np.empty(0, dtype=np.int64)
        self._max_span = 0
        self._ev_ids: list[str] = []
        self._ev_index: dict[str, int] = {}
        self._ev_dirty = True
        self._position_timer = None
        self._session_closed = False
        self._unreadable: set[int] = set()  # frames already reported as unreadable
        self.said_on_exit = ""  # printed after the screen closes (where the decisions are)
        self.init_actions()
        self.init_guard()
        self.init_scan(scan, run_scan)
        self.init_seeing()

    # ---- layout ---------------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        from reviewer.tui.eventlist import EventList
        from reviewer.tui.frameview import FrameView
        from reviewer.tui.timeline import Timeline

        yield Banner(id="banner")
        with Horizontal(id="body"):
            yield FrameView(id="frame", graphics=self.graphics)
            yield from self.compose_seeing()  # loupe and kymograph column (tui/seeing.py)
            yield EventList(id="events")
        yield from self.compose_scale()
        yield ChangeLegend(id="legend")
        yield Timeline(id="timeline")
        yield ProgressBar(id="scanbar", total=self.movie.n_frames, show_eta=True)
        yield AlertLine(id="alert")
        yield StatusLine(id="status")
        yield KeyBar(self.keymap, id="keybar")

    def on_mount(self) -> None:
        self.set_keymap(self.keymap.overrides(self.DEFAULT_SPECS))
        self.frameview = self.query_one("#frame")
        self.timeline = self.query_one("#timeline")
        self.eventlist = self.query_one("#events")
        self.status = self.query_one("#status", StatusLine)
        fps = self.session.meta.get("fps") or getattr(self.movie, "fps", None)
        self.status.period_s = 1.0 / fps if fps else None
        last = self.session.time_of(self.movie.n_frames - 1)
        self.status.long_movie = last is not None and last >= LONG_MOVIE_S
        self.eventlist.time_decimals = decimals_for(self.status.period_s)
        self.fit_layout()
        self.update_banner()
        self.clear_alert()
        self.start_scan()
        self.refresh_events()
        self.current_id = self.event_at(self.frame)
        self.show_frame()
        for note in [*getattr(self.movie, "notices", []), *self.session.notices]:
            self.notify(note, severity="warning", timeout=8)
        self.check_size()

    def on_timeline_seek(self, message) -> None:
        self.go(message.frame)

    def on_resize(self, event) -> None:
        self.fit_layout(event.size)  # self.size is still the old one here
        self.check_size(event.size)

    def fit_layout(self, size=None) -> None:
        """Below NARROW_BELOW columns the event list becomes a narrow column (o hides it)."""
        width = (size or self.size).width
        with contextlib.suppress(Exception):  # before compose / after unmount: nothing to fit
            self.query_one("#body").set_class(width < NARROW_BELOW, "narrow")
        self.fit_seeing(size)

    def check_size(self, size=None) -> None:
        """Whenever the window is below MIN_SIZE, the too-small screen covers it (and closes
        itself once the window is large enough again)."""
        from reviewer.tui.screens import TooSmallScreen

        w, h = size or self.size
        small = w < MIN_SIZE[0] or h < MIN_SIZE[1]
        if small and not any(isinstance(s, TooSmallScreen) for s in self.screen_stack):
            self.push_screen(TooSmallScreen(MIN_SIZE))  # it closes itself once big enough

    # ---- events (the session's list, indexed by frame) ------------------------------------------
    def refresh_events(self, rows: bool = True) -> None:
        """Re-read the session's events after a change; update the list and the timeline marks."""
        events = self.session.events
        self._ev_frames = np.fromiter((e.frame for e in events), dtype=np.int64, count=len(events))
        self._ev_ends = np.fromiter((max(e.frame, e.frame_end if e.frame_end is not None else e.frame)
                                     for e in events), dtype=np.int64, count=len(events))
        self._max_span = int((self._ev_ends - self._ev_frames).max()) if len(events) else 0
        self._ev_ids = [e.event_id for e in events]
        self._ev_index = {eid: i for i, eid in enumerate(self._ev_ids)}
        if rows:
            self.eventlist.set_rows(events)
        self.timeline.set_marks(self._ev_frames, [e.status for e in events])
        self._ev_dirty = False

    def event_near(self, frame: int) -> str | None:
        """The event at (or else nearest to) a frame."""
        if not len(self._ev_frames):
            return None
        i = int(np.searchsorted(self._ev_frames, frame))
        options = [j for j in (i - 1, i) if 0 <= j < len(self._ev_frames)]
        j = min(options, key=lambda j: abs(int(self._ev_frames[j]) - frame))
        return self._ev_ids[j]

    def event_at(self, frame: int, prefer: str | None = None) -> str | None:
        """The event the viewer is looking at: its frame…frame_end span holds `frame`, or it is
        within VIEW_TOLERANCE frames of it (`prefer` wins among several, else the closest)."""
        if not len(self._ev_frames):
            return None
        tol = VIEW_TOLERANCE
        lo = int(np.searchsorted(self._ev_frames, frame - tol - self._max_span, side="left"))
        hi = int(np.searchsorted(self._ev_frames, frame + tol, side="right"))
        best, best_d = None, tol + 1
        for j in range(lo, hi):
            start, end = int(self._ev_frames[j]), int(self._ev_ends[j])
            d = 0 if start <= frame <= end else min(abs(frame - start), abs(frame - end))
            if d > tol:
                continue
            if self._ev_ids[j] == prefer:
                return prefer
            if d < best_d:
                best, best_d = self._ev_ids[j], d
        return best

    def current_event(self):
        if self.current_id is None:
            return None
        try:
            return self.session.get(self.current_id)
        except KeyError:
            self.current_id = None
            return None

    # ---- drawing --------------------------------------------------------------------------------
    def context(self, frame: int) -> tuple[np.ndarray | None, np.ndarray | None]:
        """The frames just before and just after this one (for the change and average views)."""
        if self.frameview.mode == "frame":
            return None, None
        return (self.movie.block(frame - CONTEXT_FRAMES, frame),
                self.movie.block(frame + 1, frame + 1 + CONTEXT_FRAMES))

    def show_frame(self) -> None:
        """Draw the current frame, its mark, the timeline cursor and the status line."""
        from reviewer.errors import BadInput

        try:  # reduced to the pane as it is read; damaged neighbours are left out of the windows
            self.frameview.show_at(self.movie, self.frame, window=CONTEXT_FRAMES)
        except (BadInput, OSError, ValueError) as exc:
            self.frameview.show_unreadable(f"frame {self.frame}: {exc}")
            if self.frame not in self._unreadable:
                self._unreadable.add(self.frame)
                self.notify(f"frame {self.frame} cannot be read ({exc}); shown as a placeholder",
                            severity="warning", timeout=8)
        ev = self.current_event()
        if ev is not None and ev.x is not None and ev.y is not None:
            self.frameview.set_mark(ev.x, ev.y)
        else:
            self.frameview.set_mark(None)
        self.show_seeing()
        self.timeline.set_position(self.frame)
        if ev is not None:
            self.eventlist.select_event(ev.event_id)
        self.update_status()

    def update_status(self) -> None:
        self.status.show(self.frame, self.movie.n_frames, self.session.time_of(self.frame),
                         self.current_event(), self.status_extras())
        self.show_legend()

    def show_legend(self) -> None:
        """The what-changed view's legend row, only while that view is shown."""
        from reviewer.tui.frameview import CHANGE_SMOOTH_PX

        legend = self.query_one("#legend", ChangeLegend)
        shown = self.frameview.mode == "change"
        if legend.display != shown:  # a change of display costs a layout pass
            legend.display = shown
        if shown:
            legend.set_legend(legend_text(self.frameview.change_sds, CONTEXT_FRAMES,
                                          CHANGE_SMOOTH_PX, self.frameview.system))

    def status_extras(self) -> dict:
        counts = self.session.counts()
        return {"pending": counts.get("candidate", 0), "mode": self.seeing_text() or self.frameview.status_text,
                "play": self.play_text(), "scan": self.scan_text()}

    def go(self, frame: int, *, jumped_to: str | None = None) -> None:
        """Move the cursor; the current event becomes the one jumped to, else the one viewed at
        the frame (None when there is none: decision keys then change nothing)."""
        frame = int(min(max(frame, 0), self.movie.n_frames - 1))
        if frame != self.frame and not self.playing:  # playback's steps leave what a key said
            self.clear_said()
        self.frame = frame
        if jumped_to is not None:
            self.current_id = jumped_to
        else:
            self.current_id = self.event_at(self.frame, prefer=self.current_id)
        self.show_frame()
        self.save_position_later()

    def save_position_later(self) -> None:
        if self._position_timer is not None:
            self._position_timer.stop()
        self._position_timer = self.set_timer(POSITION_SAVE_S, self.save_position)

    def save_position(self) -> None:
        if not self._session_closed and not self.session.readonly:
            self.write("saving the position", self.session.set_position, self.frame)

    # ---- leaving --------------------------------------------------------------------------------
    def close_session(self) -> None:
        """Journal the position, compact and unlock (every decision is already on disk). When the
        folder refuses, `quit_note` says what was kept."""
        from reviewer.store.journal import StoreWriteError

        if self._session_closed:
            return
        self.cancel_scan()
        self._session_closed = True
        if self.session.readonly:
            self.session.close()
            return
        with contextlib.suppress(StoreWriteError):  # only the position would be lost
            self.session.set_position(self.frame)
        try:
            self.session.close()
        except StoreWriteError as exc:
            self.quit_note = self.kept_note(exc)

    def kept_note(self, exc: OSError) -> str:
        return (f"{exc.strerror or exc}; the snapshot was not updated, but every decision is kept "
                f"in {self.session.folder / 'journal.jsonl'} and is replayed on the next open")

    async def action_quit(self) -> None:
        self.close_session()
        if not self.quit_note:  # else the review command says what was kept
            self.said_on_exit = self.farewell()
        self.exit(0)

    def run(self, *args, **kwargs):
        """App.run, then what quitting says, on stderr once the screen is gone (as plain text, so a
        long path stays in one piece)."""
        try:
            return super().run(*args, **kwargs)
        finally:
            stop_input_threads()
            if self.said_on_exit:
                print(self.said_on_exit, file=sys.stderr)

    def on_signal_exit(self, signum: int) -> None:
        """Called by the store's signal saver (the session is already closed)."""
        self._session_closed = True
        if self.session.close_error is not None:
            self.quit_note = self.kept_note(self.session.close_error)
        self.cancel_scan()
        self.exit(return_code=128 + signum)


def stop_input_threads(wait_s: float = 1.0) -> int:
    """End the terminal input threads Textual's drivers left running; how many there were.

    A driver ends its input thread (not a daemon) when the app stops; when the terminal went away
    while the app was quitting (a closed window, a dropped SSH link), it did not, and the thread
    kept the finished process alive, reading end-of-file in a loop on a whole core."""
    import threading

    from textual.driver import Driver

    stopped = 0
    for thread in threading.enumerate():
        owner = getattr(getattr(thread, "_target", None), "__self__", None)
        event = getattr(owner, "exit_event", None)
        if isinstance(owner, Driver) and thread.is_alive() and isinstance(event, threading.Event):
            event.set()
            thread.join(wait_s)
            stopped += 1
    return stopped


def make_app(movie, *, fps: float | None = None, keymap: str | None = None,
             session_dir: str | os.PathLike | None = None, advance: bool = False,
             run_scan: bool = True, play_fps: float | None = None,
             reclaim: bool = False, graphics: str = "blocks") -> ReviewApp:
    """Open everything the review needs; BadInput for any bad file (before the screen opens)."""
    from reviewer.store.session import Session

    if isinstance(movie, str | Path):
        from reviewer.movie import open_movie

        movie = open_movie(movie, fps=fps)
    keys = km.load_keymap(keymap)
    labels = load_labels()
    from reviewer.tui.scanning import cached_scan

    scan = cached_scan(movie)
    meta = {"frames": movie.n_frames, "fps": movie.fps,
            "times_s": movie.timing.times_s if movie.timing.fps is None else None,
            "height": movie.height, "width": movie.width}
    if scan is not None:
        meta["detector"] = scan.settings
    session = Session.open(movie.path, movie.fingerprint, override=session_dir, meta=meta,
                           reclaim=reclaim)
    if scan is not None:
        try:
            if not session.seeded:  # a read-only session holds them in memory only
                session.seed(scan.candidates)
            elif session.needs_reseed and not session.readonly:  # the movie changed
                session.reseed(scan.candidates)
        except OSError as exc:  # nothing changed; the review opens on what the session has
            session.notices.append(f"{exc}; the candidates of the scan were not saved")
    if play_fps is None:
        play_fps = float(os.environ.get("REVIEWER_PLAY_FPS", "12") or 12)
    return ReviewApp(movie, session, keymap=keys, labels=labels, scan=scan, advance=advance,
                     run_scan=run_scan, play_fps=play_fps, graphics=graphics)
