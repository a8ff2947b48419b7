"""`reviewer info MOVIE [--json]`: what a movie holds (frames, size, pixel type, timing, layout)."""

from __future__ import annotations

import argparse

from reviewer.commands._common import add_movie_arguments, open_checked, show_notices
from reviewer.outputs import json_text


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "info", help="show frames, frame size, pixel type, timing and layout of a movie",
        description="Show what a movie holds. Notices (truncation, colour, ...) go to stderr.")
    add_movie_arguments(parser)
    parser.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    parser.set_defaults(func=run)


def _size(n: int | None) -> str:
    if n is None:
        return "unknown"
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if n < 1024 or unit == "TiB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.2f} {unit}"
        n /= 1024
    return str(n)


def text_lines(d: dict) -> list[str]:
    fps = (f"{d['fps']:g}" if d["fps"] else
           f"per-frame times, median {d['median_fps']:.6g}" if d.get("median_fps") else "unknown")
    dur = f"{d['duration_s']:.6g} s" if d["duration_s"] is not None else "unknown"
    timing = d["timing_source"] if d["timing_source"] != "unknown" else "none stored (use --fps)"
    return [f"movie     {d['path']}",
            f"frames    {d['frames']}",
            f"frame     {d['height']} x {d['width']} (height x width), {d['dtype']}",
            f"fps       {fps}",
            f"duration  {dur}",
            f"timing    {timing}",
            f"size      {_size(d['file_size'])}",
            f"layout    {d['layout']}",
            f"axes      {d.get('axes', 'TYX')}" + "".join(
                f", {k} {v}" for k, v in (d.get("selection") or {}).items())] + (
            [f"pixel     {d['pixel_size_nm']:.6g} nm"] if d.get("pixel_size_nm") else [])


def run(args: argparse.Namespace) -> int:
    movie = open_checked(args, notices=False)
    try:
        d = movie.describe()
        if args.json:
            print(json_text(d))
        else:
            print("\n".join(text_lines(d)))
            show_notices(movie)
    finally:
        movie.close()
    return 0
