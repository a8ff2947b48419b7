"""Options and helpers shared by the subcommands."""

from __future__ import annotations

import argparse
import math
import sys

from reviewer.errors import BadInput, printable


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


# Frame rates outside this range are refused, from --fps and from a movie's metadata alike: below one
# frame in 11.6 days or above ten million frames a second is a wrong value, not a recording (common
# practice, no source: electron-microscope cameras run at 1e-3 to about 1e5 frames/s).
FPS_RANGE = (1e-6, 1e7)


def _fps_problem(fps: float) -> str | None:
    lo, hi = FPS_RANGE
    if not math.isfinite(fps) or not lo <= fps <= hi:
        return f"{fps:g} frames/s is outside {lo:g} to {hi:g}"
    return None


def check_timing(movie) -> None:
    """BadInput when the movie's frame rate (from --fps or its metadata) is absurd, or its frame
    times are not finite and in order."""
    import numpy as np

    timing = movie.timing
    where = "--fps" if timing.source == "--fps" else f"{printable(str(movie.path))}: {timing.source}"
    if timing.fps is not None and (why := _fps_problem(float(timing.fps))):
        raise BadInput(f"{where}: {why}" + ("" if timing.source == "--fps" else
                                            "; give the right rate with --fps"))
    times = timing.times_s
    if times is not None and len(times) and (not np.all(np.isfinite(times))
                                             or np.any(np.diff(times) < 0)):
        raise BadInput(f"{where}: frame times are not finite and increasing; give a rate with --fps")


def show_notices(movie) -> None:
    """The movie's notices (truncation, colour, single image, ...) on stderr, as every command that
    opens a movie prints them."""
    for note in movie.notices:
        print(f"reviewer: notice: {printable(str(note))}", file=sys.stderr)


def open_checked(args: argparse.Namespace, notices: bool = True):
    """open_movie_from_args, then the frame-rate check and (unless notices=False) the notices."""
    if args.fps is not None and (why := _fps_problem(args.fps)):
        raise BadInput(f"--fps: {why}")
    movie = open_movie_from_args(args)
    try:
        check_timing(movie)
    except BadInput:
        movie.close()
        raise
    if notices:
        show_notices(movie)
    return movie


def seed_from_scan(session, movie) -> None:
    """A movie scanned but never reviewed: its detector candidates into `session` (in memory only
    for a read-only session), as export and clip read them."""
    from reviewer.detect import load_scan
    from reviewer.paths import cache_dir

    result = load_scan(cache_dir(movie.fingerprint, create=False) / "scan")
    if result is not None:
        session.meta.setdefault("detector", result.settings)
        session.seed(result.candidates)
