"""True pixels: the Kitty and Sixel sequences decode to the frame shown, and a terminal that does not
answer the capability query gets half-blocks without delay."""

from __future__ import annotations

import base64
import os
import re
import threading
import time

import numpy as np
import pytest
from test_tui_view_frames import One as Pane  # a 40 x 12 cell frame view
from test_tui_view_widgets import sync

from reviewer.tui import graphics
from reviewer.tui.frameview import FrameView
from reviewer.tui.graphics_query import (
    DEVICE_ATTRIBUTES,
    KITTY_QUERY,
    choose_graphics,
    parse_answers,
    query_terminal,
)
from reviewer.tui.render import to_indices

APC = re.compile(r"\x1b_G([^;]*);([^\x1b]*)\x1b\\")


def decode_kitty(seq: str) -> tuple[dict, np.ndarray]:
    """The first chunk's keys and the (v, s, 3) RGB pixels of a Kitty transmission (f=24)."""
    chunks = APC.findall(seq)
    assert chunks, "no graphics command"
    keys = dict(kv.split("=") for kv in chunks[0][0].split(","))
    for n, (control, payload) in enumerate(chunks):
        more = dict(kv.split("=") for kv in control.split(","))["m"]
        assert more == ("1" if n < len(chunks) - 1 else "0")
        assert len(payload) <= 4096
        if n < len(chunks) - 1:
            assert len(payload) % 4 == 0
    raw = base64.b64decode("".join(p for _, p in chunks))
    w, h = int(keys["s"]), int(keys["v"])
    return keys, np.frombuffer(raw, dtype=np.uint8).reshape(h, w, 3)


def decode_sixel(seq: str) -> tuple[np.ndarray, dict[int, tuple[int, int, int]]]:
    """Reference Sixel decoder written from the DEC VT330/VT340 Programmer Reference Manual, vol. 2,
    chapter "Sixel Graphics": DCS P1;P2;P3 q, raster attributes "Pan;Pad;Ph;Pv, colour
    introducer #Pc;Pu;Px;Py;Pz (Pu=2: RGB in percent), data characters ? (63) to ~ (126) carrying six
    vertical pixels (least significant bit on top), !Pn repeat, $ graphics carriage return,
    - graphics new line. Returns the image of register numbers (-1 where nothing was drawn) and
    the registers' RGB in 0-255."""
    start = seq.index("\x1bP")
    body = seq[seq.index("q", start) + 1: seq.index("\x1b\\", start)]
    m = re.match(r'"(\d+);(\d+);(\d+);(\d+)', body)
    assert m, "no raster attributes"
    w, h = int(m.group(3)), int(m.group(4))
    body = body[m.end():]
    image = np.full((h, w), -1, dtype=np.int64)
    colours: dict[int, tuple[int, int, int]] = {}
    x = y = 0
    reg = 0
    i = 0
    while i < len(body):
        ch = body[i]
        if ch == "#":
            m = re.match(r"#(\d+)(?:;(\d+);(\d+);(\d+);(\d+))?", body[i:])
            reg = int(m.group(1))
            if m.group(2) is not None:
                assert m.group(2) == "2"
                colours[reg] = tuple(round(int(v) * 255 / 100) for v in m.group(3, 4, 5))
            i += m.end()
            continue
        repeat = 1
        if ch == "!":
            m = re.match(r"!(\d+)", body[i:])
            repeat = int(m.group(1))
            i += m.end()
            ch = body[i]
        if ch == "$":
            x = 0
        elif ch == "-":
            x, y = 0, y + 6
        elif 63 <= ord(ch) <= 126:
            bits = ord(ch) - 63
            for col in range(x, min(x + repeat, w)):
                for r in range(6):
                    if bits >> r & 1 and y + r < h:
                        image[y + r, col] = reg
            x += repeat
        i += 1
    return image, colours


def test_kitty_payload_decodes_to_the_image_in_chunks():
    rgb = np.random.default_rng(0).integers(0, 256, (37, 53, 3), dtype=np.uint8)
    seq = graphics.kitty_image(rgb, 20, 6)
    keys, got = decode_kitty(seq)
    assert keys["a"] == "T" and keys["f"] == "24" and (keys["c"], keys["r"]) == ("20", "6")
    assert len(APC.findall(seq)) == -(-len(base64.b64encode(rgb.tobytes())) // 4096) > 1
    assert np.array_equal(got, rgb)


def test_sixel_decodes_to_the_grey_levels():
    rng = np.random.default_rng(1)
    grey = rng.integers(0, 256, (23, 41), dtype=np.uint8)  # 23 rows: the last band is partial
    grey[:, :12] = 90  # long runs: repeats
    image, colours = decode_sixel(graphics.grey_sixel(grey))
    assert (image >= 0).all()  # every pixel drawn
    shown = np.array([colours[r][0] for r in image.ravel()]).reshape(grey.shape)
    step = 255 / (graphics.SIXEL_LEVELS - 1)
    assert np.abs(shown.astype(int) - grey.astype(int)).max() <= step / 2 + 2.6  # + percent rounding


def expected_indices(frame: np.ndarray, k: int) -> np.ndarray:
    """k x k block means of the frame, mapped with the 0.5 / 99.5 % percentiles (numpy) of them."""
    h, w = frame.shape
    small = frame.reshape(h // k, k, w // k, k).mean(axis=(1, 3))
    lo, hi = np.percentile(small, [0.5, 99.5])
    return to_indices(small, lo, hi)


@pytest.mark.parametrize("kind", ["kitty", "sixel"])
@sync
async def test_frame_view_draws_the_expected_pixels(kind):
    yy, xx = np.mgrid[:192, :288]
    frame = (1000 + 8 * xx + 3 * yy + 40 * np.sin(yy / 5.0)).astype(np.uint16)
    fv = FrameView(system="truecolor", graphics=kind, cell_px=(4, 8), prefetch=False)
    async with Pane(fv).run_test(size=(40, 14)) as pilot:
        fv.show(frame)
        await pilot.pause()
        seq = fv.graphics_sequence(12, 40)
        # the pane is 40 x 12 cells of 4 x 8 px = 160 x 96 px: the frame fits at k = 2, in 36 cells
        want = expected_indices(frame, 2)
        if kind == "kitty":
            keys, rgb = decode_kitty(seq)
            assert rgb.shape == (96, 144, 3) and (keys["c"], keys["r"]) == ("36", "12")
            assert np.abs(rgb[..., 0].astype(int) - want).max() <= 1
            assert (rgb[..., 0] == rgb[..., 2]).all()  # grey
        else:
            image, colours = decode_sixel(seq)
            assert image.shape == (96, 144)
            shown = np.array([colours[r][0] for r in image.ravel()]).reshape(image.shape)
            step = 255 / (graphics.SIXEL_LEVELS - 1)
            assert np.abs(shown - want.astype(int)).max() <= step / 2 + 3
        lines = [fv.render_line(y).text for y in range(12)]
        assert all(set(line) <= {" "} for line in lines)  # the cells under the picture are blank


@sync
async def test_the_mark_is_burnt_into_the_pixels():
    fv = FrameView(system="truecolor", graphics="kitty", cell_px=(4, 8), prefetch=False)
    async with Pane(fv).run_test(size=(40, 14)) as pilot:
        fv.show(np.zeros((96, 144), dtype=np.uint16))
        fv.set_mark(72, 48)
        await pilot.pause()
        _, rgb = decode_kitty(fv.graphics_sequence(12, 40))
        pink = (rgb == (255, 64, 200)).all(axis=2)
        ys, xs = np.nonzero(pink)
        assert pink.any() and abs(ys.mean() - 48) < 2 and abs(xs.mean() - 72) < 2


def test_answers_are_read_as_kitty_sixel_or_neither():
    assert parse_answers(b"\x1b_Gi=31;OK\x1b\\\x1b[?62;22c") == "kitty"
    assert parse_answers(b"\x1b_Gi=31;ENOTSUPPORTED:x\x1b\\\x1b[?62;4;22c") == "sixel"
    assert parse_answers(b"\x1b[?62;22;44c") == "blocks"  # 44 is not 4
    assert parse_answers(b"") == "blocks"


def _answering(master: int, answer: bytes) -> threading.Thread:
    def run():
        got = b""
        while DEVICE_ATTRIBUTES not in got:
            got += os.read(master, 1024)
        assert KITTY_QUERY in got
        os.write(master, answer)

    t = threading.Thread(target=run, daemon=True)
    t.start()
    return t


@pytest.mark.parametrize("answer, kind", [(b"\x1b_Gi=31;OK\x1b\\\x1b[?62;c", "kitty"),
                                          (b"\x1b[?63;1;4c", "sixel"), (b"\x1b[?1;2c", "blocks")])
def test_a_terminal_that_answers_is_recognised(answer, kind):
    master, slave = os.openpty()
    try:
        _answering(master, answer)
        assert query_terminal(slave, slave, timeout=5) == kind
    finally:
        os.close(master), os.close(slave)


def test_a_terminal_that_never_answers_gets_half_blocks_within_a_second():
    master, slave = os.openpty()  # nobody reads or answers on the other side
    try:
        t0 = time.monotonic()
        got = choose_graphics("auto", environ={"TERM": "xterm-256color"}, fd_in=slave,
                              fd_out=slave)
        assert got == "blocks" and time.monotonic() - t0 < 1.0
        assert KITTY_QUERY in os.read(master, 4096)  # it did ask
    finally:
        os.close(master), os.close(slave)


def test_tmux_and_pipes_get_half_blocks_unless_forced():
    master, slave = os.openpty()
    try:
        assert choose_graphics("auto", environ={"TMUX": "/tmp/x,1,0"}, fd_in=slave,
                               fd_out=slave) == "blocks"
        assert choose_graphics("kitty", environ={"TMUX": "/tmp/x,1,0"}) == "kitty"
        r, w = os.pipe()
        assert choose_graphics("auto", environ={}, fd_in=r, fd_out=w) == "blocks"
        os.close(r), os.close(w)
        os.set_blocking(master, False)
        with pytest.raises(BlockingIOError):
            os.read(master, 10)  # nothing was sent to the terminal
    finally:
        os.close(master), os.close(slave)
    with pytest.raises(ValueError):
        choose_graphics("pictures")


def test_review_in_a_terminal_that_never_answers_starts_at_once(tmp_path):
    """`reviewer review --graphics auto` in a pty nobody answers: the UI starts (alternate screen)
    less than a second after the question was asked."""
    import contextlib
    import pty
    import select
    import signal
    import sys

    movie = tmp_path / "m.npy"
    np.save(movie, np.random.default_rng(0).integers(0, 255, (8, 32, 32), dtype=np.uint16))
    env = {k: v for k, v in os.environ.items() if k not in ("TMUX", "COLUMNS", "LINES")}
    env.update(TERM="xterm-256color", REVIEWER_CACHE_DIR=str(tmp_path / "cache"),
               REVIEWER_DATA_DIR=str(tmp_path / "data"), REVIEWER_CONFIG_DIR=str(tmp_path / "cfg"))
    pid, fd = pty.fork()
    if pid == 0:  # the child: the review in the pty
        os.execvpe(sys.executable, [sys.executable, "-m", "reviewer", "review", "--graphics", "auto",
                                    "--session", str(tmp_path / "s"), str(movie)], env)
    got, asked, started = b"", None, None
    end = time.monotonic() + 60
    try:
        while started is None and time.monotonic() < end:
            ready, _, _ = select.select([fd], [], [], 0.05)
            if ready:
                try:
                    got += os.read(fd, 65536)
                except OSError:
                    break
            if asked is None and KITTY_QUERY in got:
                asked = time.monotonic()
            if asked is not None and b"\x1b[?1049h" in got[got.index(KITTY_QUERY):]:
                started = time.monotonic()
    finally:
        os.kill(pid, signal.SIGTERM)
        # read on while it closes (restoring the screen writes to the pty: unread, that write would
        # block it); SIGKILL if it has not gone within 20 s
        gone, stop = False, time.monotonic() + 20
        while not gone and time.monotonic() < stop:
            if select.select([fd], [], [], 0.05)[0]:
                with contextlib.suppress(OSError):
                    os.read(fd, 65536)
            gone = os.waitpid(pid, os.WNOHANG)[0] == pid
        if not gone:
            os.kill(pid, signal.SIGKILL)
            os.waitpid(pid, 0)
        os.close(fd)
    assert asked is not None, got[-300:]
    assert started is not None and started - asked < 1.0, started - asked
    print(f"UI started {started - asked:.2f} s after the question")


async def _show_kitty(app, fv, pilot) -> list[str]:
    """Show a 96 x 144 ramp in a Kitty frame view; what is written to the terminal from then on."""
    sent: list[str] = []
    app._driver.write = sent.append
    fv.show(np.arange(96 * 144, dtype=np.uint16).reshape(96, 144))
    await pilot.pause()
    await pilot.pause()
    return sent


@sync
async def test_the_picture_is_sent_to_the_terminal_after_the_repaint():
    fv = FrameView(system="truecolor", graphics="kitty", cell_px=(4, 8), prefetch=False)
    app = Pane(fv)
    async with app.run_test(size=(40, 14)) as pilot:
        sent = await _show_kitty(app, fv, pilot)
        pictures = [s for s in sent if "\x1b_G" in s]
        assert pictures, "nothing sent"
        keys, rgb = decode_kitty(pictures[-1])
        assert rgb.shape == (96, 144, 3) and rgb[0, 0, 0] < rgb[-1, -1, 0]
        sent.clear()
        fv.show_unreadable("gone")
        await pilot.pause()
        await pilot.pause()
        assert any("a=d" in s for s in sent)  # the picture is taken away for the placeholder


@sync
async def test_the_kitty_picture_goes_while_a_dialog_covers_it_and_comes_back_after():
    # Kitty pictures lie over the text (kitty's graphics protocol: a=d deletes; common practice,
    # no source for the layering): a dialog pushed over the frame must not show under the picture
    from textual.screen import ModalScreen
    from textual.widgets import Static

    class Dialog(ModalScreen):
        def compose(self):
            yield Static("a dialog")

    fv = FrameView(system="truecolor", graphics="kitty", cell_px=(4, 8), prefetch=False)
    app = Pane(fv)
    async with app.run_test(size=(40, 14)) as pilot:
        sent = await _show_kitty(app, fv, pilot)
        assert any("a=T" in s for s in sent)
        sent.clear()
        app.push_screen(Dialog())
        await pilot.pause()
        await pilot.pause()
        assert any("a=d" in s for s in sent) and not any("a=T" in s for s in sent)
        sent.clear()
        app.pop_screen()
        await pilot.pause()
        await pilot.pause()
        await pilot.pause()
        pictures = [s for s in sent if "a=T" in s]
        assert pictures, "the picture was not drawn again"
        _, rgb = decode_kitty(pictures[-1])
        assert rgb.shape == (96, 144, 3)
