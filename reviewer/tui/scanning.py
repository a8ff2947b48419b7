"""The background scan: a cancellable thread worker posting batched progress; frames stay browsable."""

from __future__ import annotations

import threading
import time

import numpy as np
from textual.message import Message

PROGRESS_EVERY_S = 0.25  # at most four progress messages a second, however fast the scan runs


def scan_folder(movie):
    from reviewer import paths

    return paths.cache_dir(movie.fingerprint) / "scan"


def cached_scan(movie):
    """The stored scan of a movie, or None (no fingerprint, nothing stored, or stale)."""
    if not movie.fingerprint:
        return None
    from reviewer.detect import load_scan

    return load_scan(scan_folder(movie))


class ScanProgress(Message):
    def __init__(self, done: int) -> None:
        super().__init__()
        self.done = done


class ScanDone(Message):
    def __init__(self, result) -> None:
        super().__init__()
        self.result = result


class ScanFailed(Message):
    def __init__(self, text: str) -> None:
        super().__init__()
        self.text = text


class ScanMixin:
    """Mixin for ReviewApp: runs the scan when the cache has none, then seeds the session."""

    def init_scan(self, scan, run_scan: bool) -> None:
        self.scan = scan
        self.scores = None if scan is None else scan.features.get("score")
        self._want_scan = run_scan and scan is None
        self._cancel = threading.Event()
        self.scan_done = 0
        self.scanning = False

    def start_scan(self) -> None:
        bar = self.query_one("#scanbar")
        if self.scores is not None:
            self.timeline.set_scores(self.scores, n_frames=self.movie.n_frames)
        else:
            self.timeline.set_scores(np.zeros(0, np.float32), n_frames=self.movie.n_frames)
        if not self._want_scan:
            bar.display = False
            return
        self.scanning = True
        self.run_worker(self._scan_thread, thread=True, exclusive=True, group="scan",
                        exit_on_error=False)

    def cancel_scan(self) -> None:
        self._cancel.set()

    def _scan_thread(self) -> None:
        from reviewer.detect import DetectSettings, save_scan, scan_movie
        from reviewer.errors import BadInput

        last = [0.0]

        def progress(done: int) -> None:
            now = time.monotonic()
            if now - last[0] >= PROGRESS_EVERY_S:
                last[0] = now
                self.post_message(ScanProgress(int(done)))

        try:
            result = scan_movie(self.movie, DetectSettings(), progress=progress, cancel=self._cancel)
        except BadInput as exc:
            self.post_message(ScanFailed(str(exc)))
            return
        except Exception as exc:  # noqa: BLE001 - a cancelled scan or a reader error ends quietly
            if not self._cancel.is_set():
                self.post_message(ScanFailed(f"scan stopped: {exc}"))
            return
        if self._cancel.is_set():
            return
        try:
            save_scan(result, scan_folder(self.movie))
        except OSError as exc:
            self.post_message(ScanFailed(f"scan not cached ({exc})"))
        self.post_message(ScanDone(result))

    def on_scan_progress(self, message: ScanProgress) -> None:
        self.scan_done = message.done
        self.query_one("#scanbar").update(progress=message.done)
        self.update_status()

    def on_scan_done(self, message: ScanDone) -> None:
        self.scanning = False
        self.scan = message.result
        self.scores = message.result.features.get("score")
        self._active = None
        self.query_one("#scanbar").display = False
        if self.scores is not None:
            self.timeline.set_scores(self.scores, n_frames=self.movie.n_frames)
        if not self._session_closed:
            seed = self.session.seed
            if self.session.readonly:  # candidates in memory only
                self.session.update_meta(detector=message.result.settings)
                added = seed(message.result.candidates)
            else:
                self.write("saving the detector settings", self.session.update_meta,
                           detector=message.result.settings)  # export provenance
                if self.session.seeded and self.session.needs_reseed:
                    self.write("re-seeding the candidates", self.session.reseed,
                               message.result.candidates)
                    self.update_banner()
                _, added = self.write("saving the candidates", seed, message.result.candidates)
                added = added or 0
            self.refresh_events()
            if self.current_id is None:
                self.current_id = self.event_at(self.frame)
            self.notify(f"scan finished: {added} candidate events")
        self.show_frame()

    def on_scan_failed(self, message: ScanFailed) -> None:
        self.scanning = False
        self.query_one("#scanbar").display = False
        self.notify(message.text, severity="error", timeout=15)
        self.update_status()

    def scan_text(self) -> str:
        if not self.scanning:
            return ""
        return f"scanning {100 * self.scan_done / max(self.movie.n_frames, 1):.0f} %"
