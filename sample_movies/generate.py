"""Write a synthetic movie and its ground truth.

    python -m sample_movies.generate [--preset NAME] [--seed S] [-o PATH] [--frames N]
"""

from __future__ import annotations

import argparse
import sys
import time
from dataclasses import replace

from sample_movies.growth import PRESETS, write_movie


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m sample_movies.generate",
                                 description="Write a synthetic growth movie (ImageJ TIFF) and "
                                             "<path>.truth.csv beside it.")
    ap.add_argument("--preset", default="sample", choices=sorted(PRESETS))
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("-o", "--output", default=None, help="output .tif (default: PRESET-SEED.tif)")
    ap.add_argument("--frames", type=int, default=None, help="override the preset's frame count")
    ap.add_argument("--size", type=int, nargs=2, metavar=("H", "W"), default=None)
    ap.add_argument("--zlib", action="store_true", help="zlib-compress each frame")
    args = ap.parse_args(argv)
    sc = PRESETS[args.preset]
    if args.frames:
        sc = replace(sc, n_frames=args.frames)
    if args.size:
        sc = replace(sc, height=args.size[0], width=args.size[1])
    out = args.output or f"{args.preset}-{args.seed}.tif"
    t0 = time.perf_counter()
    truth = write_movie(out, sc, args.seed, fps=sc.fps, compression="zlib" if args.zlib else None)
    dt = time.perf_counter() - t0
    print(f"{out}: {sc.n_frames} frames {sc.height}x{sc.width}, {len(truth)} true events, "
          f"{dt:.1f} s ({sc.n_frames / dt:.0f} frames/s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
