"""Save the session and exit on SIGTERM / SIGHUP (a closed SSH connection sends SIGHUP)."""

from __future__ import annotations

import signal
from collections.abc import Callable


def install_signal_savers(session, on_exit: Callable[[int], None] | None = None,
                          signals: tuple[int, ...] = (signal.SIGTERM, signal.SIGHUP)
                          ) -> Callable[[], None]:
    """On each signal: close the session (compact + unlock), then call on_exit(signum) if given, else
    raise SystemExit(128 + signum). A signal that lands in the middle of an action waits for it to
    finish; a snapshot that cannot be written is left in `session.close_error` (the journal keeps every
action). Call from the main thread. Returns a function that restores the previous handlers."""

    def save_and_exit(signum: int) -> None:
        try:
            session.close()
        except OSError as exc:  # the snapshot could not be written; the journal holds everything
            session.close_error = exc
        finally:
            if on_exit is not None:
                on_exit(signum)
            else:
                raise SystemExit(128 + signum)

    def handler(signum, _frame) -> None:
        if session.busy:
            session.defer(lambda: save_and_exit(signum))
        else:
            save_and_exit(signum)

    previous = {s: signal.signal(s, handler) for s in signals}

    def restore() -> None:
        for s, h in previous.items():
            signal.signal(s, h)

    return restore
