"""Options and helpers shared by the subcommands."""

from __future__ import annotations

import argparse


def positive_float(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a number: {text!r}") from None
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"must be a positive number: {text!r}")
    return value


def add_movie_arguments(parser: argparse.ArgumentParser) -> None:
    """MOVIE and --fps, as every command that reads a movie takes them."""
    parser.add_argument("movie", metavar="MOVIE",
                        help="movie file or folder (TIFF, .npy, folder of PNG/TIFF frames, raw + .json)")
    parser.add_argument("--fps", type=positive_float, default=None,
                        help="frames per second; overrides any timing stored with the movie")


def open_movie_from_args(args: argparse.Namespace):
    """Open args.movie with the --fps override (raises BadInput on anything unreadable)."""
    from reviewer.movie import open_movie

    return open_movie(args.movie, fps=args.fps)
