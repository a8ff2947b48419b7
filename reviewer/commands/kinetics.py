"""`reviewer kinetics EVENTS.csv`: waiting times, rates and growth velocity from an exported table."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np

from reviewer.commands._common import positive_float
from reviewer.errors import BadInput
from reviewer.outputs import guard, replacing, table_files

STATUS_CHOICES = ("accepted", "rejected", "candidate")


def _statuses(text: str) -> tuple[str, ...]:
    items = tuple(s.strip() for s in text.split(",") if s.strip())
    bad = [s for s in items if s not in STATUS_CHOICES]
    if not items or bad:
        raise argparse.ArgumentTypeError(
            f"status must be one or more of {', '.join(STATUS_CHOICES)} (comma-separated)")
    return items


def _seed(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"not a whole number: {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError("seed must be >= 0")
    return value


MAX_LAYER_NM = 1e4  # a "layer" thicker than 10 um is a typing error, not a crystal layer


def register(subparsers) -> None:
    from reviewer.kinetics.groups import DEFAULT_RADIUS_PX
    from reviewer.kinetics.spacings import SPACINGS

    p = subparsers.add_parser(
        "kinetics", help="waiting-time statistics, rates and growth velocity from an event table",
        description="Read an exported event table (CSV, with its .json sidecar when present) and "
                    "report, per group: intervals between events, their CV, the event rate with "
                    "exact intervals, exponential and gamma fits, and a plain reading.",
        epilog="Named layer heights: " + "; ".join(sp.describe() for sp in SPACINGS.values()),
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("events", metavar="EVENTS.csv",
                   help="event table written by `reviewer export`; or a run table (columns table, "
                        "temperature_K or temperature_C, run) for an Arrhenius fit across runs")
    p.add_argument("--label", default=None, help="only events with this label")
    p.add_argument("--status", type=_statuses, default=("accepted",), metavar="S[,S]",
                   help="statuses to use (default: accepted)")
    p.add_argument("--by", choices=("label", "region"), default=None,
                   help="separate statistics per label, or per place in the field")
    p.add_argument("--radius", type=positive_float, default=DEFAULT_RADIUS_PX, metavar="PX",
                   help=f"--by region: events closer than this (pixels, chained) share a region "
                        f"(default {DEFAULT_RADIUS_PX:g})")
    p.add_argument("--roi", metavar="FILE", default=None,
                   help="named rectangles (CSV name,x0,y0,x1,y1 or JSON {\"regions\": [...]}); "
                        "implies --by region and replaces the clustering")
    layer = p.add_mutually_exclusive_group()
    layer.add_argument("--layer-nm", type=positive_float, default=None, metavar="H",
                       help="layer height in nm: growth velocity = rate x H")
    layer.add_argument("--layer", choices=sorted(SPACINGS), default=None, metavar="NAME",
                       help=f"layer height by name: {', '.join(SPACINGS)} (sources below)")
    p.add_argument("--json", action="store_true", help="print one JSON object instead of the table")
    p.add_argument("--plot", metavar="OUT.png", default=None,
                   help="write interval histogram and cumulative count to a PNG")
    p.add_argument("--seed", type=_seed, default=0, help="random seed of the bootstraps (default 0)")
    p.set_defaults(func=run)


def _layer(args) -> tuple[float | None, str | None]:
    if args.layer:
        from reviewer.kinetics.spacings import layer_height

        spacing = layer_height(args.layer)
        return spacing.d_nm, spacing.describe()
    if args.layer_nm and args.layer_nm > MAX_LAYER_NM:
        raise BadInput(f"--layer-nm {args.layer_nm:g}: not a layer height (at most "
                       f"{MAX_LAYER_NM:g} nm)")
    if args.layer_nm:
        return args.layer_nm, f"{args.layer_nm:g} nm (given with --layer-nm)"
    return None, None


def _groups(args, sel):
    from reviewer.kinetics import groups

    if args.roi:
        return groups.by_roi(sel, groups.read_roi(args.roi)), "roi"
    if args.by == "region":
        return groups.by_region(sel, args.radius), "region"
    if args.by == "label":
        return groups.by_label(sel), "label"
    return None, None


def _per_area(name: str, g: dict, info: dict, args) -> dict:
    """ROI groups: the area and the count rate per area n / (T x area) with its Garwood interval."""
    if not args.roi or g.get("error") or not info.get("duration_s"):
        return {}
    from reviewer.kinetics.groups import read_roi
    from reviewer.kinetics.stats import garwood_ci95

    box = {r.name: (r.x1 - r.x0 + 1) * (r.y1 - r.y0 + 1) for r in read_roi(args.roi)}
    if name not in box:
        return {}
    exposure = info["duration_s"] * box[name]
    lo, hi = garwood_ci95(g["events"])
    return {"area_px2": box[name], "count_rate_per_s_px2": g["events"] / exposure,
            "count_rate_ci95_per_s_px2": [lo / exposure, hi / exposure]}


def _comparison(parts, summaries, sel, info, args) -> dict | None:
    """The first two analysed groups compared over the recording (or the events' span)."""
    from reviewer.kinetics.compare import compare

    done = [(name, part) for (name, part), g in zip(parts, summaries, strict=True)
            if not g.get("error")]
    if len(done) < 2:
        return None
    times = sel["time_s"].to_numpy(float)
    window = info.get("duration_s") or float(times.max() - times.min())
    areas = None
    if args.roi:
        from reviewer.kinetics.groups import read_roi

        box = {r.name: (r.x1 - r.x0 + 1) * (r.y1 - r.y0 + 1) for r in read_roi(args.roi)}
        if done[0][0] in box and done[1][0] in box:
            areas = (box[done[0][0]], box[done[1][0]])
    (n1, p1), (n2, p2) = done[:2]
    return compare(n1, p1["time_s"].to_numpy(float), n2, p2["time_s"].to_numpy(float), window,
                   areas, args.seed)


def run(args: argparse.Namespace) -> int:
    from reviewer.kinetics import arrhenius, read_events, summarise
    from reviewer.kinetics.read import select_events
    from reviewer.kinetics.report import render

    if arrhenius.is_run_table(args.events):
        if args.plot or args.by or args.roi:
            raise BadInput(f"{args.events}: a run table takes no --plot, --by or --roi "
                           "(run kinetics on each table for those)")
        runs = arrhenius.summarise_runs(args.events, args.status, args.label, args.seed)
        if args.json:
            from reviewer.kinetics.report import finite

            print(json.dumps(finite(runs), indent=2, allow_nan=False, ensure_ascii=False))
        else:
            print(arrhenius.render_runs(runs), end="")
        return 0
    if args.plot:
        roi = [("the region file", Path(args.roi))] if args.roi else []
        guard([Path(args.plot)], table_files(args.events) + roi)
    df = read_events(args.events)
    sel = select_events(df, args.label, args.status)
    info = df.attrs.get("movie", {})
    fps = info.get("fps")
    layer_nm, layer_source = _layer(args)
    what = "/".join(args.status) + (f" {args.label!r}" if args.label is not None else "")

    share = {"budget": 1.0}

    def one(part) -> dict:
        if part.attrs.get("skip"):
            return {"events": len(part), "error": part.attrs["skip"]}
        multi = int(np.sum(part["frame_end"].to_numpy(float) > part["frame"].to_numpy(float)))
        return summarise(part["time_s"].to_numpy(float), info.get("duration_s"), layer_nm,
                         frame_s=1.0 / fps if fps else None, seed=args.seed,
                         multi_frame_events=multi, budget=share["budget"])

    if len(sel) < 2:
        raise BadInput(f"{args.events}: only {len(sel)} {what} event: two events are the "
                       "minimum for an interval")
    try:
        result = one(sel)
    except ValueError as exc:
        raise BadInput(f"{args.events}: {exc}") from None
    parts, by = _groups(args, sel)
    result = {"source": str(args.events), "statuses": list(args.status), "label": args.label,
              "by": by, "radius_px": args.radius if by == "region" else None,
              "layer_source": layer_source, "movie": info, **result, "groups": None}
    if parts is not None:
        result["groups"] = []
        share["budget"] = 1.0 / max(1, len(parts))  # the groups share one run's resampling work
        for name, part in parts:
            try:
                g = one(part)
            except ValueError as exc:
                g = {"events": len(part), "error": str(exc)}
            result["groups"].append({"group": name, **g, **_per_area(name, g, info, args)})
        result["pooled_note"] = ("The top-level figures of --json pool all selected events; "
                                 "read the groups.")
        result["comparison"] = _comparison(parts, result["groups"], sel, info, args)
    if args.plot:
        from reviewer.kinetics.plot import plot_groups

        rows = ([(g["group"], p["time_s"].to_numpy(float), g)
                 for (_, p), g in zip(parts, result["groups"], strict=True)]
                if parts is not None else [(what, sel["time_s"].to_numpy(float), result)])
        try:
            with replacing(args.plot) as (tmp,):
                plot_groups(tmp, rows)
        except ValueError as exc:
            raise BadInput(f"{args.plot}: cannot draw the plot ({exc})") from None
    if args.json:
        from reviewer.kinetics.report import finite

        print(json.dumps(finite(result), indent=2, allow_nan=False, ensure_ascii=False))
    else:
        result["title"] = (f"{args.events}: {len(sel)} {what} events"
                           + (f", grouped by {by}" if by else ""))
        print(render(result), end="")
    return 0
