"""`reviewer export MOVIE`: write the reviewed event table (CSV) and its provenance (JSON)."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from reviewer.commands._common import add_movie_arguments, open_checked, seed_from_scan
from reviewer.commands.review import add_pixel_size_option
from reviewer.errors import printable
from reviewer.paths import output_beside
from reviewer.store.export import export_events, parse_pixel_size, parse_statuses
from reviewer.store.table import STATUSES


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "export", help="write the event table (CSV) and its provenance (JSON)",
        description="Write the events of a movie's review session as CSV (RFC 4180) with a JSON "
                    "provenance file beside it. Works on a running or crashed session too.")
    add_movie_arguments(p)
    p.add_argument("-o", "--output", metavar="CSV", default=None,
                   help="CSV file to write (default: <movie name>.events.csv beside the movie, or "
                        "in the session folder when the movie's folder is read-only)")
    p.add_argument("--status", default=",".join(STATUSES), metavar="LIST",
                   help="comma list of statuses to include (default: %(default)s)")
    add_pixel_size_option(p)
    p.add_argument("--session", metavar="DIR", default=None,
                   help="session folder (default: <movie>.review/ beside the movie, else, and always "
                        "for a movie in the cache such as the demo's, the user data folder)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from reviewer.store.session import Session

    statuses = parse_statuses(args.status)
    pixel_nm = parse_pixel_size(args.pixel_size) if args.pixel_size else None
    movie = open_checked(args)
    try:
        timing = movie.timing
        meta = {"frames": movie.n_frames, "fps": timing.fps, "times_s": timing.times_s,
                "height": movie.height, "width": movie.width}
        session = Session.open(movie.path, movie.fingerprint, override=args.session, meta=meta,
                               readonly=True)
        for note in session.notices:
            print(f"reviewer: {printable(str(note))}", file=sys.stderr)
        if not session.seeded and not session.events:
            seed_from_scan(session, movie)
        out = Path(args.output) if args.output else output_beside(movie.path, ".events.csv", session.folder)
        try:
            csv_path, json_path = export_events(session, out, statuses, movie=movie,
                                                pixel_size_nm=pixel_nm)
        except OSError:  # WriteFailed: one line naming the file, nothing changed
            if args.output:
                raise
            out = session.folder / out.name  # the movie's folder refused: use the session folder
            csv_path, json_path = export_events(session, out, statuses, movie=movie,
                                                pixel_size_nm=pixel_nm)
        n = sum(1 for e in session.events if e.status in statuses)
        print(f"wrote {n} events ({', '.join(statuses)}) to {printable(str(csv_path))}")
        print(f"provenance in {printable(str(json_path))}")
        if not session.events:
            print("note: this movie has no reviewed or detected events yet", file=sys.stderr)
    finally:
        movie.close()
    return 0
