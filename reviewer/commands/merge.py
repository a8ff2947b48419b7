"""`reviewer merge A.csv B.csv -o MERGED.csv`: one table from two reviews; disagreements 'disputed'."""

from __future__ import annotations

import argparse
from pathlib import Path


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "merge", help="merge two exported reviews of one movie; disagreements become 'disputed'",
        description="Match the events of two exported tables as `reviewer compare` does and write one "
                    "table: decisions both reviewers agree on are kept, every other event gets the "
                    "status 'disputed' with both views in its note, for a third look.")
    p.add_argument("a", metavar="A.csv", help="one reviewer's exported table")
    p.add_argument("b", metavar="B.csv", help="the other's")
    p.add_argument("-o", "--output", required=True, metavar="MERGED.csv",
                   help="the merged table; its provenance goes beside it as MERGED.json")
    p.add_argument("--tolerance", type=int, default=2, metavar="FRAMES",
                   help="manual marks this close in frames are the same event (default 2)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    import reviewer
    from reviewer.commands.compare import reviewers
    from reviewer.outputs import guard, json_bytes, opened, replacing, table_files
    from reviewer.store.agreement import merged_rows, read_pair
    from reviewer.store.events import utc_now
    from reviewer.store.export import sidecar_path
    from reviewer.store.table import write_csv

    out = Path(args.output)
    side = sidecar_path(out)
    guard([out, (side, f"sidecar of {out.name}")], table_files(args.a) + table_files(args.b))
    result, ia, ib = read_pair(args.a, args.b, args.tolerance)
    rows = merged_rows(result)
    disputed = sum(r["status"] == "disputed" for r in rows)
    who = reviewers(result, ia, ib)
    info = {"program": "reviewer", "version": reviewer.__version__, "merged_at": utc_now(),
            "movie": ia.get("movie") or ib.get("movie"),
            "inputs": [{"csv": str(Path(args.a).resolve()), "exported_at": ia.get("exported_at"),
                        "reviewers": who["a"]},
                       {"csv": str(Path(args.b).resolve()), "exported_at": ib.get("exported_at"),
                        "reviewers": who["b"]}],
            "reviewers": list(dict.fromkeys(who["a"] + who["b"])),
            "kappa": result.kappa, "counts": {**result.counts, "disputed": disputed},
            "csv": out.name}
    with replacing(side, out) as (tmp_json, tmp_csv):  # the sidecar lands first (see export)
        with opened(tmp_csv, newline="", encoding="utf-8") as f:
            write_csv(rows, f)
        with opened(tmp_json, "wb") as f:
            f.write(json_bytes(info))
    print(f"wrote {len(rows)} events to {out}: {len(rows) - disputed} agreed, {disputed} disputed")
    print(f"provenance in {sidecar_path(out)}")
    return 0
