"""Which way of drawing pixels the terminal supports: asked once, before the UI starts. No Textual.

``choose_graphics("auto")`` sends two queries and reads the answers for at most QUERY_TIMEOUT_S:
the Kitty graphics protocol's query (a one-pixel transmission with ``a=q``, answered
``ESC _ G i=31;OK ESC \\`` by a terminal that speaks it) and the primary device attributes request
``ESC [ c`` (answered ``ESC [ ? 6x;...c`` by practically every terminal; a 4 among the numbers means
Sixel graphics, per the DEC VT330/VT340 manuals). Terminals answer in order, so the device
attributes answer ends the wait. No answer in time, not a terminal, or inside tmux (which passes
neither protocol through by default): half-blocks. ``kitty`` / ``sixel`` / ``blocks`` are taken as
they are.
"""

from __future__ import annotations

import contextlib
import os
import re
import select
import sys
import time
from collections.abc import Mapping

GRAPHICS = ("auto", "blocks", "kitty", "sixel")
QUERY_TIMEOUT_S = 0.3  # local terminals answer within milliseconds; allows a remote link
KITTY_QUERY = b"\x1b_Gi=31,s=1,v=1,a=q,t=d,f=24;AAAA\x1b\\"
DEVICE_ATTRIBUTES = b"\x1b[c"
_DA1 = re.compile(rb"\x1b\[\?([0-9;]*)c")
_KITTY_OK = re.compile(rb"\x1b_Gi=31;OK\x1b\\")


def read_answers(fd_in: int, timeout: float) -> bytes:
    """Bytes from fd_in until a device attributes answer has come or ``timeout`` s have passed."""
    got = b""
    end = time.monotonic() + timeout
    while not _DA1.search(got):
        left = end - time.monotonic()
        if left <= 0:
            break
        ready, _, _ = select.select([fd_in], [], [], left)
        if not ready:
            break
        chunk = os.read(fd_in, 1024)
        if not chunk:
            break
        got += chunk
    return got


def parse_answers(got: bytes) -> str:
    """"kitty", "sixel" or "blocks" from what the terminal answered."""
    if _KITTY_OK.search(got):
        return "kitty"
    m = _DA1.search(got)
    if m and "4" in m.group(1).decode().split(";"):
        return "sixel"
    return "blocks"


def query_terminal(fd_in: int, fd_out: int, timeout: float = QUERY_TIMEOUT_S) -> str:
    """Ask the terminal on these descriptors (the tty is put in non-canonical, no-echo mode for
    the time of the question and restored after)."""
    try:
        import termios
    except ImportError:  # pragma: no cover - not POSIX
        return "blocks"
    try:
        saved = termios.tcgetattr(fd_in)
    except termios.error:
        return "blocks"
    try:
        raw = termios.tcgetattr(fd_in)
        raw[3] &= ~(termios.ICANON | termios.ECHO)
        raw[6][termios.VMIN], raw[6][termios.VTIME] = 0, 0
        termios.tcsetattr(fd_in, termios.TCSANOW, raw)
        os.write(fd_out, KITTY_QUERY + DEVICE_ATTRIBUTES)
        got = read_answers(fd_in, timeout)
    except OSError:
        return "blocks"
    finally:
        with contextlib.suppress(termios.error):
            termios.tcsetattr(fd_in, termios.TCSANOW, saved)
    return parse_answers(got)


def choose_graphics(option: str, environ: Mapping[str, str] | None = None, fd_in: int | None = None,
                    fd_out: int | None = None, timeout: float = QUERY_TIMEOUT_S) -> str:
    """The drawing to use for ``--graphics option``: "blocks", "kitty" or "sixel"."""
    if option not in GRAPHICS:
        raise ValueError(f"--graphics must be one of {', '.join(GRAPHICS)}, not {option!r}")
    if option != "auto":
        return option
    env = os.environ if environ is None else environ
    if env.get("TMUX") or env.get("TERM", "").startswith(("screen", "tmux", "dumb", "linux")):
        return "blocks"
    fd_in = sys.stdin.fileno() if fd_in is None else fd_in
    fd_out = sys.stdout.fileno() if fd_out is None else fd_out
    if not (os.isatty(fd_in) and os.isatty(fd_out)):
        return "blocks"
    return query_terminal(fd_in, fd_out, timeout)


def cell_pixels(fd: int | None = None) -> tuple[int, int] | None:
    """(width, height) of one cell in pixels from the tty's window size, when it says."""
    try:
        import fcntl
        import struct
        import termios

        fd = sys.stdout.fileno() if fd is None else fd
        rows, cols, xpix, ypix = struct.unpack(
            "HHHH", fcntl.ioctl(fd, termios.TIOCGWINSZ, b"\0" * 8))
    except (OSError, ValueError, ImportError):
        return None
    if not (rows and cols and xpix and ypix):
        return None
    return xpix // cols, ypix // rows
