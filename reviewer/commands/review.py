"""`reviewer review MOVIE`: the terminal UI to go through the candidates and decide with single keys."""

from __future__ import annotations

import argparse
import os
import sys

from reviewer.commands._common import add_movie_arguments


def add_pixel_size_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--pixel-size", default=None, metavar="LENGTH",
                   help="size of one movie pixel, e.g. 0.05nm, 0.5A, 50pm, 0.01um: the export gets "
                        "each event's place in nm (x_nm, y_nm; default: the pixel size stored "
                        "with the movie, if any)")


def add_review_options(p: argparse.ArgumentParser) -> None:
    p.add_argument("--keymap", metavar="NAME|PATH", default=None,
                   help="key map: a shipped one by name (default, one-handed) or a .toml file; "
                        "keymap.toml in the settings folder changes single bindings by id")
    p.add_argument("--session", metavar="DIR", default=None,
                   help="session folder (default: <movie>.review/ beside the movie, else, and always "
                        "for a movie in the cache such as the demo's, the user data folder)")
    p.add_argument("--reviewer", metavar="NAME", default=None,
                   help="who reviews: written with every decision and into the export's reviewer "
                        "column (default: the login name)")
    add_pixel_size_option(p)
    p.add_argument("--advance", action="store_true",
                   help="after a decision, go on to the next pending candidate")
    p.add_argument("--mouse", action="store_true", help="enable the mouse (off by default)")
    p.add_argument("--graphics", choices=("auto", "blocks", "kitty", "sixel"), default="auto",
                   help="draw the frame in true pixels with the Kitty graphics protocol or Sixel; "
                        "auto asks the terminal (half-blocks when it does not answer, and in tmux)")
    p.add_argument("--reclaim-lock", action="store_true",
                   help="take over a session left locked by a reviewer that is no longer running "
                        "(killed or crashed); without it such a session opens read-only")


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "review", help="go through the candidate events and decide with single keys",
        description="Open the review UI on a movie. If the movie has not been scanned yet, the scan "
                    "runs in the background while frames can be browsed. Every decision is saved "
                    "as it is made; press ? for the keys, q to quit.")
    add_movie_arguments(p)
    add_review_options(p)
    p.set_defaults(func=run)


def review(movie, args: argparse.Namespace) -> int:
    """Open the app on a movie (path or Movie) with the review options of args; its exit code."""
    from reviewer.errors import BadInput

    check_settings(args)
    who, pixel_nm = check_session_options(args)
    if not sys.stdin.isatty() or not sys.stdout.isatty():
        raise BadInput(f"{getattr(args, 'movie', movie)}: the review needs a terminal "
                       "(stdin and stdout must be a TTY)")
    from reviewer.store.signals import install_signal_savers
    from reviewer.tui.app import make_app

    if isinstance(movie, str | os.PathLike):  # the frame-rate check and notices, as elsewhere
        from reviewer.commands._common import open_checked

        args.movie = str(movie)
        movie = open_checked(args)

    from reviewer.tui.graphics_query import choose_graphics

    app = make_app(movie, fps=args.fps, keymap=args.keymap, session_dir=args.session,
                   advance=args.advance, reclaim=args.reclaim_lock)
    set_session_options(app.session, who, pixel_nm)
    app.graphics = choose_graphics(getattr(args, "graphics", "blocks"))  # just before the UI
    restore = install_signal_savers(app.session, app.on_signal_exit)
    try:
        app.run(mouse=args.mouse)
    finally:
        restore()
        app.close_session()
    if app.quit_note:
        print(f"reviewer: {app.quit_note}", file=sys.stderr)
        return 2
    code = app.return_code
    return 0 if code is None else int(code)


def check_settings(args: argparse.Namespace) -> None:
    """Bad key maps and label sets are reported before anything opens."""
    from reviewer.tui.keymap import load_keymap
    from reviewer.tui.labels import load_labels

    load_keymap(args.keymap)
    load_labels()


def check_session_options(args: argparse.Namespace) -> tuple[str | None, float | None]:
    """--reviewer and --pixel-size checked before anything opens: (name or None, nm or None)."""
    from reviewer.store.export import parse_pixel_size
    from reviewer.store.who import reviewer_name

    who = reviewer_name(args.reviewer) if getattr(args, "reviewer", None) is not None else None
    text = getattr(args, "pixel_size", None)
    return who, (parse_pixel_size(text) if text else None)


def set_session_options(session, who: str | None, pixel_nm: float | None) -> None:
    """The reviewer journaled with every action from now on; a given pixel size kept in the
    session's meta.json for every later export (in memory only when the session is read-only)."""
    from reviewer.store.export import GIVEN

    if who is not None:
        session.reviewer = who
    if pixel_nm is not None:
        try:
            session.update_meta(pixel_size_nm=pixel_nm, pixel_size_source=GIVEN)
        except OSError:  # meta.json refused: this run's exports still use it
            session.meta.update(pixel_size_nm=pixel_nm, pixel_size_source=GIVEN)


def run(args: argparse.Namespace) -> int:
    return review(args.movie, args)
