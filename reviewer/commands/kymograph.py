"""`reviewer kymograph MOVIE --line x0,y0,x1,y1 -o KYMO.png`: a line across a front against time."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

import numpy as np

from reviewer.commands._common import add_movie_arguments, open_checked
from reviewer.errors import BadInput


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "kymograph", help="intensity along a line across a front, against time (PNG + TIFF)",
        description="Sample a line across a growth front in every frame (bilinear, averaged over "
                    "--width parallel lines one pixel apart) and write the result as an image with "
                    "time downwards: a PNG to look at and a float32 TIFF of the samples for analysis. "
                    "Layer-by-layer growth shows as a staircase, step flow as a slope.")
    add_movie_arguments(p)
    p.add_argument("--line", required=True, metavar="x0,y0,x1,y1",
                   help="the line in pixels (x = column, y = row, pixel centres at integers)")
    p.add_argument("--width", type=int, default=1, metavar="W",
                   help="average W parallel lines, one pixel apart, across the line (default 1)")
    p.add_argument("--frames", default=None, metavar="A:B",
                   help="frames A..B-1 (default: the whole movie)")
    p.add_argument("--bin", type=int, default=None, metavar="K",
                   help="average K consecutive frames per row (default: 1, or as many as keep the "
                        "image to 4096 rows)")
    p.add_argument("--events", default=None, metavar="EVENTS.csv",
                   help="an exported or candidate table: mark its events' frames on the left edge")
    p.add_argument("-o", "--output", required=True, metavar="KYMO.png",
                   help="the PNG; the samples go beside it as KYMO.tif (float32, one row per bin)")
    p.set_defaults(func=run)


def _event_frames(path: str) -> np.ndarray:
    import pandas as pd

    try:
        table = pd.read_csv(path, usecols=["frame"])
    except (OSError, ValueError, UnicodeError) as exc:
        raise BadInput(f"{path}: cannot read its 'frame' column ({exc})") from None
    frames = pd.to_numeric(table["frame"], errors="coerce").dropna()
    return frames.to_numpy(dtype=np.int64)


def run(args: argparse.Namespace) -> int:
    from reviewer.movie.kymograph import Line, auto_bin, frame_range, kymograph
    from reviewer.movie.kymograph_image import outputs_of, save_kymograph
    from reviewer.outputs import guard, movie_files, table_files
    from reviewer.progress import Progress

    line = Line.parse(args.line, args.width)
    png = Path(args.output)
    if png.suffix.lower() != ".png":
        raise BadInput(f"{png}: the kymograph image must be a .png (the samples go beside it as .tif)")
    events = _event_frames(args.events) if args.events else None
    movie = open_checked(args)
    try:
        start, stop = frame_range(args.frames, movie.n_frames)
        if args.bin is not None and args.bin < 1:
            raise BadInput(f"--bin {args.bin}: must be 1 or more frames")
        bin_frames = args.bin or auto_bin(stop - start)
        guard(outputs_of(png), movie_files(movie, args.movie)
              + (table_files(args.events) if args.events else []))
        progress = Progress(stop - start, stream=sys.stderr)
        done = [0]

        def advance(n: int) -> None:
            done[0] += n
            progress.update(done[0])

        image = kymograph(movie, line, start, stop, bin_frames, progress=advance)
        progress.close()
        meta = {"movie": str(movie.path), "fingerprint": movie.fingerprint,
                "line": [line.x0, line.y0, line.x1, line.y1], "width": line.width,
                "first_frame": start, "frames": stop - start, "bin_frames": bin_frames,
                "fps": movie.fps}
        tif = save_kymograph(image, png, meta, events)
    finally:
        movie.close()
    print(json.dumps({"png": str(png), "tiff": str(tif), "rows": image.shape[0],
                      "points": image.shape[1], "bin_frames": bin_frames}))
    return 0
