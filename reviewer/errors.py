"""Errors that reach the user as one line and exit code 2, and text safe to print."""

import codecs

PRINTABLE = "reviewer.printable"  # codec error handler: see printable()


class BadInput(Exception):
    """Input the program cannot use: the message is one line that names the file and the problem."""

    def __init__(self, message: str) -> None:
        super().__init__(" ".join(str(message).split()))


def _escape(exc: UnicodeError) -> tuple[str, int]:
    if not isinstance(exc, UnicodeEncodeError):
        raise exc
    chunk = exc.object[exc.start:exc.end]
    return "".join(f"\\x{ord(c) - 0xDC00:02x}" if 0xDC80 <= ord(c) <= 0xDCFF else f"\\u{ord(c):04x}"
                   for c in chunk), exc.end


codecs.register_error(PRINTABLE, _escape)


def printable(text: str) -> str:
    """Text safe to print anywhere: bytes of a file name that are not UTF-8 (which Python holds as
    surrogates, see os.fsdecode) are shown as \\xNN, e.g. ``caf\\xe9.npy``."""
    return text.encode("utf-8", PRINTABLE).decode("utf-8")
