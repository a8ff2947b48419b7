"""`reviewer compare A.csv B.csv`: how far two reviews of one movie agree, and where they differ."""

from __future__ import annotations

import argparse
import json

from reviewer.errors import printable


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "compare", help="agreement between two exported reviews of one movie (Cohen's kappa)",
        description="Match the events of two exported event tables of the same movie (detector "
                    "events by id, manual marks by frame within --tolerance) and report counts, "
                    "Cohen's kappa on accept/reject with its 95 %% interval, label agreement and "
                    "every disagreement.")
    p.add_argument("a", metavar="A.csv", help="one reviewer's exported table")
    p.add_argument("b", metavar="B.csv", help="the other's")
    p.add_argument("--tolerance", type=int, default=2, metavar="FRAMES",
                   help="manual marks this close in frames are the same event (default 2)")
    p.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    p.set_defaults(func=run)


def _fmt(v: float | None) -> str:
    return "n/a" if v is None else f"{v:.3f}"


def reviewers(result, ia: dict, ib: dict) -> dict:
    """Who made each table (sidecar `reviewers`, then the names in its reviewer column)."""
    from reviewer.store.agreement import reviewers_of

    return {"a": reviewers_of([p.a for p in result.pairs if p.a is not None], ia),
            "b": reviewers_of([p.b for p in result.pairs if p.b is not None], ib)}


def summary(result, who: dict | None = None) -> dict:
    dis = [{"event": p.key, "frame": p.frame,
            "a": None if p.a is None else {"status": p.a["status"], "label": p.a["label"]},
            "b": None if p.b is None else {"status": p.b["status"], "label": p.b["label"]}}
           for p in result.disagreements()]
    share = result.labels_same / result.labels_both if result.labels_both else None
    return {"counts": result.counts, "kappa": result.kappa,
            "kappa_95": [result.kappa_low, result.kappa_high] if result.kappa is not None else None,
            "labels_same": result.labels_same, "labels_both_accepted": result.labels_both,
            "label_agreement": share, "disagreements": dis,
            "reviewers": who or {"a": [], "b": []}}


def run(args: argparse.Namespace) -> int:
    from reviewer.store.agreement import read_pair

    result, ia, ib = read_pair(args.a, args.b, args.tolerance)
    out = summary(result, reviewers(result, ia, ib))
    if args.json:
        print(json.dumps(out, allow_nan=False))
        return 0
    c = out["counts"]
    names = {k: ", ".join(printable(w) for w in v) or "not named" for k, v in out["reviewers"].items()}
    lines = [f"reviewers       A: {names['a']}; B: {names['b']}",f"events          {c['events']} ({c['only_in_a']} only in A, {c['only_in_b']} only in B)",
             f"both decided    {c['both_decided']}: accepted by both {c['both_accepted']}, rejected "
             f"by both {c['both_rejected']}, A yes/B no {c['a_accepted_b_rejected']}, A no/B yes "
             f"{c['a_rejected_b_accepted']}",
             f"undecided       {c['undecided_by_one_or_both']} (a candidate left open by A or B)",
             f"kappa           {_fmt(result.kappa)}"
             + (f"  (95 % interval {_fmt(result.kappa_low)} to {_fmt(result.kappa_high)}, "
                f"large-sample)" if result.kappa is not None else
                "  (needs events both decided, not all in one class)"),
             f"labels          {out['labels_same']} of {out['labels_both_accepted']} accepted by "
             f"both carry the same label"]
    print("\n".join(lines))
    if out["disagreements"]:
        print(f"disagreements   {len(out['disagreements'])}:")
        for d in out["disagreements"]:
            sa = "absent" if d["a"] is None else f"{d['a']['status']} {d['a']['label'] or ''}".strip()
            sb = "absent" if d["b"] is None else f"{d['b']['status']} {d['b']['label'] or ''}".strip()
            print(f"  {d['event']:<16} frame {d['frame']:>8}   A: {sa:<22} B: {sb}")
    return 0
