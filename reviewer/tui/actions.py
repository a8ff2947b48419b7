"""What each key does (the action_* methods of ReviewApp). Ids and keys live in keymaps/*.toml."""

from __future__ import annotations

import numpy as np

from reviewer.tui.annotate import AnnotateMixin
from reviewer.tui.playback import PlaybackMixin

VIEW_MODES = ("frame", "change", "average")


class ReviewActions(PlaybackMixin, AnnotateMixin):
    """Mixin for ReviewApp: navigation, decisions, view and session keys."""

    def init_actions(self) -> None:
        self.init_playback()
        self.last_export = None  # the CSV `e` wrote last (said again on quit)

    # ---- moving ---------------------------------------------------------------------------------
    def _start_index(self, forward: bool) -> int:
        """Index in the sorted events where a forward / backward search begins."""
        cur = self.current_event()
        if cur is not None and cur.frame == self.frame and cur.event_id in self._ev_index:
            i = self._ev_index[cur.event_id]
            return i + 1 if forward else i - 1
        side = "right" if forward else "left"
        i = int(np.searchsorted(self._ev_frames, self.frame, side=side))
        return i if forward else i - 1

    def _jump(self, forward: bool, pending: bool | str, quiet: bool = False) -> bool:
        """Go to the next / previous event (pending: a pending one; a status: one with that
        status); False, saying so unless quiet, when there is none."""
        want = "candidate" if pending is True else (pending or None)
        if not self._ev_ids:
            self.say("no events yet" + (" (the scan is running)" if self.scanning else ""))
            return False
        i = self._start_index(forward)
        events = self.session.events
        step = 1 if forward else -1
        while 0 <= i < len(events):
            if want is None or events[i].status == want:
                self.go(events[i].frame, jumped_to=events[i].event_id)
                return True
            i += step
        if not quiet:
            which = {None: "", "candidate": "pending "}.get(want, f"{want} ")
            self.say(f"no {which}event {'after' if forward else 'before'} frame {self.frame}")
        return False

    def action_next_event(self) -> None:
        self._jump(True, False)

    def action_prev_event(self) -> None:
        self._jump(False, False)

    def action_next_pending(self) -> None:
        self._jump(True, True)

    def action_prev_pending(self) -> None:
        self._jump(False, True)

    def action_frame_forward(self) -> None:
        self.go(self.frame + 1)

    def action_frame_back(self) -> None:
        self.go(self.frame - 1)

    def action_forward_10(self) -> None:
        self.go(self.frame + 10)

    def action_back_10(self) -> None:
        self.go(self.frame - 10)

    def _page(self) -> int:
        return max(1, round(self.movie.n_frames / 100))

    def action_page_forward(self) -> None:
        self.go(self.frame + self._page())

    def action_page_back(self) -> None:
        self.go(self.frame - self._page())

    def action_first_frame(self) -> None:
        self.go(0)

    def action_last_frame(self) -> None:
        self.go(self.movie.n_frames - 1)

    def action_go_to(self) -> None:
        from reviewer.tui.screens import GoToScreen

        def done(frame: int | None) -> None:
            if frame is not None:
                self.go(frame)

        self.push_screen(GoToScreen(self.movie.n_frames, self.session.time_of, self.session.times_s,
                                    self.session.meta.get("fps")), done)

    def on_event_list_chosen(self, message) -> None:
        ev = self.session.get(message.event_id)
        self.go(ev.frame, jumped_to=ev.event_id)

    # ---- deciding -------------------------------------------------------------------------------
    def _target(self, what: str):
        """The event at the viewed frame (app.event_at), or None with one line saying so.
        Playback pauses first: a decision is about what is on the screen."""
        self.pause()
        if self._ev_dirty:
            self.refresh_events()
        eid = self.event_at(self.frame, prefer=self.current_id)
        if eid is None:
            self.current_id = None
            self.update_status()
            mark = self.keymap_key("mark")
            self.say(f"no event at frame {self.frame} — {what}: nothing changed"
                     + (f"; {mark} marks one" if mark else ""), warn=True)
            return None
        self.current_id = eid
        return self.session.get(eid)

    def _after_change(self, decided: bool = True) -> None:
        self.refresh_events()
        if decided and self.advance:
            self._jump(True, True)
        else:
            self.show_frame()

    def _decide(self, what: str, method: str, *args) -> None:
        if (ev := self._target(what)) is not None and \
                self.write(what, getattr(self.session, method), ev.event_id, *args)[0]:
            self._after_change()

    def action_accept(self) -> None:
        self._decide("accept", "accept")

    def action_reject(self) -> None:
        self._decide("reject", "reject")

    def action_label(self, k: int) -> None:
        if k > len(self.labels):
            self.say(f"no label {k}: the label set has {len(self.labels)}", warn=True)
            return
        self._decide(f"label {k}", "set_label", self.labels[k - 1])

    def action_mark(self) -> None:
        self.pause()
        ok, ev = self.write("mark", self.session.add, self.frame)
        if not ok:
            return
        self.current_id = ev.event_id
        self._after_change(decided=False)

    def _nudge(self, delta: int) -> None:
        if (ev := self._target("move")) is not None:
            ok, ev = self.write("move", self.session.nudge, ev.event_id, delta)
            if not ok:
                return
            self.refresh_events()
            self.go(ev.frame, jumped_to=ev.event_id)

    def action_nudge_earlier(self) -> None:
        self._nudge(-1)

    def action_nudge_later(self) -> None:
        self._nudge(+1)

    def action_reject_global(self) -> None:
        from reviewer.tui.screens import ConfirmScreen

        if self.session.readonly:
            self.write("reject all 'global'", self.session.reject_kind, "global")  # says why not
            return
        n = sum(1 for e in self.session.events if e.kind == "global" and e.status == "candidate")
        if not n:
            self.say("no pending 'global' candidates")
            return

        def done(yes: bool | None) -> None:
            if yes:
                ok, count = self.write("reject all 'global'", self.session.reject_kind, "global")
                if not ok:
                    return
                self.say(f"rejected {count} 'global' candidates (u undoes)")
                self._after_change(decided=False)

        self.push_screen(ConfirmScreen(f"Reject all {n} pending 'global' candidates "
                                       "(blanked frames, beam and stage jumps)?"), done)

    def _history(self, redo: bool) -> None:
        """u / U, saying in one line what was undone or redone (the session's description of the
        action when it gives one)."""
        verb = "redo" if redo else "undo"
        pending = getattr(self.session, "_redo" if redo else "_undo", None)
        if isinstance(pending, list) and not pending:
            self.say(f"nothing to {verb}")
            return
        ok, done = self.write(verb, self.session.redo if redo else self.session.undo)
        if not ok:
            return
        if done is False:
            self.say(f"nothing to {verb}")
            return
        self._after_change(decided=False)
        past = "redid" if redo else "undid"
        self.say(f"{past} {done}" if isinstance(done, str) and done else f"{past} last action")

    def action_undo(self) -> None:
        self._history(False)

    def action_redo(self) -> None:
        self._history(True)

    # ---- view -----------------------------------------------------------------------------------
    def action_change_view(self) -> None:
        mode = getattr(self.frameview, "mode", "frame")
        self.frameview.mode = VIEW_MODES[(VIEW_MODES.index(mode) + 1) % len(VIEW_MODES)]
        self.show_frame()

    def _view(self, method: str, *args) -> None:
        getattr(self.frameview, method)(*args)
        self.update_status()

    def action_contrast_stronger(self) -> None:
        self._view("contrast_narrower")

    def action_contrast_flatter(self) -> None:
        self._view("contrast_wider")

    def action_zoom_in(self) -> None:
        self._view("zoom_in")

    def action_zoom_out(self) -> None:
        self._view("zoom_out")

    def action_zoom_event(self) -> None:
        ev = self.current_event()
        if ev is None or ev.x is None or ev.y is None:
            self.say("the current event has no place to zoom to")
            return
        self._view("zoom_to", ev.x, ev.y)

    def action_pan_left(self) -> None:
        self._view("pan", -1, 0)

    def action_pan_right(self) -> None:
        self._view("pan", 1, 0)

    def action_pan_up(self) -> None:
        self._view("pan", 0, -1)

    def action_pan_down(self) -> None:
        self._view("pan", 0, 1)

    def action_toggle_list(self) -> None:
        self.eventlist.toggle_class("hidden")
        if self.eventlist.has_class("hidden") and self.focused is self.eventlist:
            self.set_focus(None)

    def action_focus_list(self) -> None:
        """Tab: the event list takes the arrow keys; Tab again gives them back to the frame."""
        if self.focused is self.eventlist:
            self.set_focus(None)
        elif not self.eventlist.has_class("hidden"):
            self.set_focus(self.eventlist)

    def action_timeline_in(self) -> None:
        self.timeline.zoom_in()

    def action_timeline_out(self) -> None:
        self.timeline.zoom_out()

    # ---- panels and session ---------------------------------------------------------------------
    def action_kinetics(self) -> None:
        from reviewer.tui.kinetics_panel import KineticsScreen

        self.push_screen(KineticsScreen(self.session, self.movie))

    def action_help(self) -> None:
        from reviewer.tui.screens import HelpScreen

        self.push_screen(HelpScreen(self.keymap, self.labels))

    def export_path(self):
        """Where `e` writes: the same default as `reviewer export MOVIE`."""
        from reviewer.paths import output_beside

        return output_beside(self.movie.path, ".events.csv", self.session.folder)

    def action_export(self) -> None:
        from reviewer.errors import BadInput
        from reviewer.store.export import export_events

        out = self.export_path()
        source = self.export_source()
        try:
            try:
                csv_path, json_path = export_events(source, out, movie=self.movie)
            except OSError:  # the movie's folder refused: the session folder, as `export` does
                out = self.session.folder / out.name
                csv_path, json_path = export_events(source, out, movie=self.movie)
        except (BadInput, OSError) as exc:
            self.alert(f"export failed: {exc}")
            return
        self.last_export = csv_path
        self.say(f"exported {len(source.events)} events to {csv_path} (+ {json_path.name})")

    def farewell(self) -> str:
        """What quitting prints once the screen is gone: where the decisions and the last export
        are."""
        folder = self.session.folder
        if self.session.readonly:
            text = f"the session in {folder} was read-only: this review changed nothing there"
        else:
            text = f"decisions saved in {folder}"
        last = self.last_export or self.session.last_export
        if last:
            return f"reviewer: {text}; last export: {last}"
        key = self.keymap_key("export")
        how = f"{key} in the review, or " if key else ""
        return f"reviewer: {text}; not exported yet ({how}reviewer export MOVIE)"

    async def action_help_quit(self) -> None:
        """Ctrl-C: our own quit (saves), not Textual's hint."""
        await self.action_quit()

    def export_source(self):
        """What `e` exports: this session; when read-only, the session as its writer has it now
        (read again, consistently), unless nothing is on disk yet."""
        if not self.session.readonly:
            return self.session
        from reviewer.errors import BadInput
        from reviewer.store.session import Session

        try:
            fresh = Session.open(self.movie.path, self.movie.fingerprint,
                                 override=self.session.folder, readonly=True)
        except BadInput:
            return self.session
        if not fresh.seeded and not fresh.events:
            return self.session
        fresh.meta = {**self.session.meta, **fresh.meta}
        return fresh
