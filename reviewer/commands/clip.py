"""`reviewer clip MOVIE EVENT_ID -o OUT`: the frames around one event as GIF/APNG, strip PNG or TIFF."""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

from reviewer.commands._common import add_movie_arguments, open_checked
from reviewer.errors import BadInput


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "clip", help="the frames around an event as an animation, a strip or a TIFF stack",
        description="Cut the frames around one event out of the movie: .gif or .apng (an animation "
                    "for slides), .png (a strip: mean before | event frame | mean after, for "
                    "papers) or .tif (the raw crop of every frame, for analysis). Contrast is "
                    "fixed over the clip; the time and a scale bar (with --pixel-size) are burnt in.")
    add_movie_arguments(p)
    p.add_argument("event", metavar="EVENT_ID", nargs="?", default=None,
                   help="the event's id in --events (or in the movie's review session); leave it "
                        "out with --frame")
    p.add_argument("--events", metavar="TABLE.csv", default=None,
                   help="an exported or candidate table that holds EVENT_ID (default: the movie's "
                        "review session, else its scan)")
    p.add_argument("--frame", type=int, default=None, help="clip around this frame instead")
    p.add_argument("--x", type=float, default=None, help="with --frame: centre column of the crop")
    p.add_argument("--y", type=float, default=None, help="with --frame: centre row of the crop")
    p.add_argument("--before", type=int, default=10, metavar="N", help="frames before (default 10)")
    p.add_argument("--after", type=int, default=10, metavar="N",
                   help="frames from the event on (default 10)")
    p.add_argument("--crop", default="96", metavar="PX|full",
                   help="side of the square crop around the event's place, or 'full' (default 96)")
    p.add_argument("--zoom", type=int, default=None, metavar="K",
                   help="enlarge K times, nearest neighbour (default: about 320 px wide)")
    p.add_argument("--pixel-size", default=None, metavar="LENGTH",
                   help="size of one movie pixel, e.g. 0.05nm, 0.5A, 0.01um: draws a scale bar "
                        "(default: the pixel size stored with the movie, if any)")
    p.add_argument("--playback-fps", type=float, default=10.0, metavar="F",
                   help="frames per second of the animation (default 10)")
    p.add_argument("-o", "--output", required=True, metavar="OUT",
                   help="clip.gif, clip.apng, strip.png or frames.tif")
    p.set_defaults(func=run)


def _from_table(path: str, event_id: str) -> dict:
    import pandas as pd

    try:
        table = pd.read_csv(path, dtype={"event_id": str})
    except (OSError, ValueError, UnicodeError) as exc:
        raise BadInput(f"{path}: cannot read the event table ({exc})") from None
    if "event_id" not in table or "frame" not in table:
        raise BadInput(f"{path}: no event_id and frame columns")
    rows = table[table["event_id"] == event_id]
    if rows.empty:
        raise BadInput(f"{path}: no event {event_id!r}")
    row = rows.iloc[0]
    return {"frame": int(row["frame"]), "x": row.get("x"), "y": row.get("y")}


def _from_session(movie, event_id: str) -> dict:
    from reviewer.commands._common import seed_from_scan
    from reviewer.store.session import Session

    session = Session.open(movie.path, movie.fingerprint, readonly=True,
                           meta={"frames": movie.n_frames, "fps": movie.timing.fps})
    if not session.events:
        seed_from_scan(session, movie)
    for e in session.events:
        if e.event_id == event_id:
            return {"frame": int(e.frame), "x": e.x, "y": e.y}
    raise BadInput(f"{movie.path}: no event {event_id!r} in its review session or scan "
                   f"(give --events TABLE.csv or --frame)")


def _number(v) -> float | None:
    try:
        v = float(v)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def run(args: argparse.Namespace) -> int:
    from reviewer.movie.clip import Window, default_zoom
    from reviewer.movie.clip_files import kind_of, render, write
    from reviewer.movie.units import parse_length
    from reviewer.outputs import guard, movie_files, table_files

    out = Path(args.output)
    kind = kind_of(out)
    pixel_m = parse_length(args.pixel_size) if args.pixel_size else None
    if args.crop == "full":
        crop = None
    else:
        try:
            crop = int(args.crop)
        except ValueError:
            crop = 0
        if crop < 8:
            raise BadInput(f"--crop {args.crop!r}: a side of 8 pixels or more, or 'full'")
    if not (math.isfinite(args.playback_fps) and 0.1 <= args.playback_fps <= 100):
        raise BadInput(f"--playback-fps {args.playback_fps}: between 0.1 and 100")
    if (args.event is None) == (args.frame is None):
        raise BadInput("give either EVENT_ID or --frame F")
    movie = open_checked(args)
    try:
        guard([out], movie_files(movie, args.movie)
              + (table_files(args.events) if args.events else []))
        if args.frame is not None:
            where = {"frame": args.frame, "x": args.x, "y": args.y}
        elif args.events:
            where = _from_table(args.events, args.event)
        else:
            where = _from_session(movie, args.event)
        window = Window.around(movie, where["frame"], args.before, args.after,
                               _number(where["x"]), _number(where["y"]), crop)
        if pixel_m is None and getattr(movie, "pixel_size_nm", None):
            pixel_m = movie.pixel_size_nm * 1e-9  # stored with the movie (MRC voxel size, ...)
        zoom = args.zoom or default_zoom(window.width)
        if not 1 <= zoom <= 16:
            raise BadInput(f"--zoom {zoom}: between 1 and 16")
        frames = window.read(movie)
        images, facts = render(frames, window, movie, kind, pixel_m, zoom, args.playback_fps)
        write(images, kind, out, facts)
    finally:
        movie.close()
    print(json.dumps({"output": str(out), "kind": kind, **facts}))
    return 0
