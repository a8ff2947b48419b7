"""`reviewer demo`: build the bundled sample movie on first use, then open the review UI on it."""

from __future__ import annotations

import argparse

from reviewer.commands.review import add_review_options, review


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "demo", help="open the review UI on the bundled sample movie (built on first use)",
        description="Build the invented sample movie (nickel-oxide platelets on a carbon membrane, "
                    "400 frames/s) into the cache on first use, then review it: the scan runs in "
                    "the background the first time. Its session and exports are kept in the user "
                    "data folder, not in the cache.")
    add_review_options(p)
    p.set_defaults(func=run, fps=None)


def run(args: argparse.Namespace) -> int:
    from sample_movies.growth import ensure_sample

    path = ensure_sample()
    print(f"sample movie: {path}")
    args.movie = str(path)
    return review(path, args)
