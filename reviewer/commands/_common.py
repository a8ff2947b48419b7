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
    """MOVIE, --fps and the choices inside a container, as every command that reads a movie takes them."""
    parser.add_argument("movie", metavar="MOVIE",
                        help="movie file or folder (TIFF, .npy, HDF5, Zarr, folder of PNG/TIFF frames, "
                             "raw + .json)")
    parser.add_argument("--fps", type=positive_float, default=None,
                        help="frames per second; overrides any timing stored with the movie")
    where = parser.add_argument_group("choosing inside a file that holds more than one movie")
    where.add_argument("--dataset", metavar="PATH", default=None,
                       help="HDF5 dataset / Zarr array to read (default: the largest 3-D one)")
    where.add_argument("--axes", choices=("TYX", "YXT"), type=str.upper, default=None,
                       help="frames first (TYX) or last (YXT) in a 3-D dataset (default: from its "
                            "chunks and sizes)")
    where.add_argument("--channel", metavar="C", type=int, default=None,
                       help="channel of a hyperstack or OME image (default: the first)")
    where.add_argument("--z", metavar="Z", type=int, default=None,
                       help="z-plane of a hyperstack or OME image (default: the first)")
    where.add_argument("--series", metavar="N", type=int, default=None,
                       help="image series of a multi-series TIFF (default: the one with most frames)")


def open_movie_from_args(args: argparse.Namespace):
    """Open args.movie with --fps and the choices inside the file (BadInput on anything unreadable)."""
    from reviewer.movie import open_movie

    return open_movie(args.movie, fps=args.fps,
                      **{k: getattr(args, k, None) for k in ("dataset", "axes", "channel", "z", "series")})
