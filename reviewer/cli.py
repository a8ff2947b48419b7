"""The `reviewer` command line: `main(argv) -> int`, one subcommand per module in reviewer.commands."""

from __future__ import annotations

import argparse
import contextlib
import importlib
import os
import pkgutil
import sys

from reviewer import __version__
from reviewer.errors import PRINTABLE, BadInput, printable

# Order in `reviewer --help`; modules not listed here are appended alphabetically.
ORDER = ("demo", "info", "scan", "review", "export", "kinetics")


def _command_modules() -> list[str]:
    import reviewer.commands as pkg

    found = {m.name for m in pkgutil.iter_modules(pkg.__path__) if not m.name.startswith("_")}
    return [n for n in ORDER if n in found] + sorted(found.difference(ORDER))


class Parser(argparse.ArgumentParser):
    """Usage errors as one line on stderr and exit 2, like every other bad input."""

    def error(self, message: str):
        self.exit(2, printable(f"{self.prog}: {' '.join(message.split())} "
                               f"(see {self.prog} --help)") + "\n")


def build_parser(only: str | None = None) -> argparse.ArgumentParser:
    """The argument parser; with `only`, just that subcommand's module is imported (fast start-up:
    `reviewer info` need not load pandas or scipy for the other commands)."""
    parser = Parser(
        prog="reviewer",
        description="Find, confirm and time-stamp growth events in long microscopy movies.",
    )
    parser.add_argument("--version", action="version", version=f"reviewer {__version__}")
    parser.add_argument("--debug", action="store_true", help="show a full traceback on errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name in [only] if only else _command_modules():
        importlib.import_module(f"reviewer.commands.{name}").register(sub)
    return parser


def _requested(argv: list[str]) -> str | None:
    """The subcommand named on the command line, if it is one we have."""
    known = set(_command_modules())
    for token in argv:
        if not token.startswith("-"):
            return token if token in known else None
    return None


def _subject(args: argparse.Namespace) -> str:
    """The file a command works on, to name when an error does not say which file it was."""
    for name in ("movie", "events", "output"):
        if getattr(args, name, None):
            return str(getattr(args, name))
    return "reviewer"


def _failure(exc: BaseException, args: argparse.Namespace) -> str:
    """One line for an error that escaped the command: the file, then what went wrong."""
    if isinstance(exc, OSError):
        from reviewer.outputs import reason

        where = exc.filename if exc.filename is not None else _subject(args)
        return f"{os.fsdecode(where)}: {reason(exc)}"
    if isinstance(exc, UnicodeError):
        return f"{_subject(args)}: text that is not valid UTF-8 ({exc.__class__.__name__})"
    return f"{_subject(args)}: not enough memory for this input (try a smaller part of it)"


def _safe_streams() -> None:
    """Printing a file name that is not UTF-8 must not crash: such bytes come out as \\xNN."""
    for stream in (sys.stdout, sys.stderr):
        with contextlib.suppress(AttributeError, ValueError, OSError):
            stream.reconfigure(errors=PRINTABLE)


def main(argv: list[str] | None = None) -> int:
    _safe_streams()
    argv = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in argv  # accepted anywhere on the line
    if debug:
        argv = [a for a in argv if a != "--debug"]
    parser = build_parser(_requested(argv))
    args = parser.parse_args(argv)
    args.debug = debug
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        return int(args.func(args) or 0)
    except BadInput as exc:
        if args.debug:
            raise
        print(f"reviewer: {printable(str(exc))}", file=sys.stderr)
        return 2
    except BrokenPipeError:
        return 0
    except (OSError, UnicodeError, MemoryError) as exc:
        if args.debug:
            raise
        print(f"reviewer: {printable(_failure(exc, args))}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("reviewer: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
