"""Two reviews of one movie side by side: events matched, agreement measured, tables merged.

Events are matched by id when both tables hold it (detector events keep their id from the scan to
every export), and manual marks -- which each reviewer numbers independently -- by frame: each mark
of one table goes to the nearest unmatched mark of the other within `tolerance` frames.

Agreement on the decision (accepted / rejected) is Cohen's kappa over the events both reviewers
decided, with its large-sample 95 % interval (standard error of Fleiss, Cohen & Everitt 1969,
Psychol. Bull. 72:323). Label agreement is the share of events both accepted that carry the same label.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from reviewer.errors import BadInput

DECIDED = ("accepted", "rejected")
Z95 = 1.959963984540054  # standard normal 97.5 % quantile


@dataclass
class Pair:
    """One event as the two tables have it (None where a table lacks it)."""

    key: str
    frame: int
    a: dict | None
    b: dict | None

    def status(self, side: str) -> str | None:
        row = self.a if side == "a" else self.b
        return None if row is None else row["status"]

    def label(self, side: str) -> str | None:
        row = self.a if side == "a" else self.b
        return None if row is None else row["label"]

    @property
    def agreed(self) -> bool:
        return (self.a is not None and self.b is not None and self.a["status"] == self.b["status"]
                and (self.a["status"] != "accepted" or self.a["label"] == self.b["label"]))


@dataclass
class Agreement:
    pairs: list[Pair]
    table: np.ndarray  # 2x2: rows A accepted/rejected, columns B accepted/rejected
    kappa: float | None
    kappa_low: float | None
    kappa_high: float | None
    labels_same: int
    labels_both: int
    counts: dict = field(default_factory=dict)

    def disagreements(self) -> list[Pair]:
        return [p for p in self.pairs if not p.agreed]


def _text(v) -> str | None:
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return None
    s = str(v)
    return s or None


def rows_of(table: pd.DataFrame, name: str) -> list[dict]:
    for col in ("event_id", "frame", "status"):
        if col not in table.columns:
            raise BadInput(f"{name}: no '{col}' column; is this an exported event table?")
    frames = pd.to_numeric(table["frame"], errors="coerce")
    if frames.isna().any():
        raise BadInput(f"{name}: row {int(frames.isna().to_numpy().argmax()) + 2} has no frame")
    rows = []
    for rec, frame in zip(table.to_dict("records"), frames, strict=True):
        rows.append({**rec, "event_id": str(rec["event_id"]), "frame": int(frame),
                     "status": str(rec["status"]).strip().lower(),
                     "label": _text(rec.get("label")),
                     "source": _text(rec.get("source")) or (
                         "manual" if str(rec["event_id"]).startswith("m") else "detector")})
    ids = [r["event_id"] for r in rows]
    if len(set(ids)) != len(ids):
        dup = next(i for i in ids if ids.count(i) > 1)
        raise BadInput(f"{name}: event id {dup} appears more than once")
    return rows


def match(a: list[dict], b: list[dict], tolerance: int = 2) -> list[Pair]:
    """Detector events by id; manual marks one-to-one by nearest frame within `tolerance`."""
    pairs: list[Pair] = []
    b_by_id = {r["event_id"]: r for r in b if r["source"] != "manual"}
    used: set[str] = set()
    for r in a:
        if r["source"] == "manual":
            continue
        other = b_by_id.get(r["event_id"])
        if other is not None:
            used.add(other["event_id"])
        pairs.append(Pair(r["event_id"], r["frame"], r, other))
    pairs += [Pair(r["event_id"], r["frame"], None, r) for r in b_by_id.values()
              if r["event_id"] not in used]
    ma = sorted((r for r in a if r["source"] == "manual"), key=lambda r: r["frame"])
    mb = [r for r in b if r["source"] == "manual"]
    # all candidate (distance, a, b) links, nearest first: a greedy one-to-one matching
    links = sorted((abs(x["frame"] - y["frame"]), i, j) for i, x in enumerate(ma)
                   for j, y in enumerate(mb) if abs(x["frame"] - y["frame"]) <= tolerance)
    ta: dict[int, int] = {}
    tb: set[int] = set()
    for _, i, j in links:
        if i not in ta and j not in tb:
            ta[i] = j
            tb.add(j)
    for i, x in enumerate(ma):
        y = mb[ta[i]] if i in ta else None
        key = x["event_id"] if y is None else f"{x['event_id']}~{y['event_id']}"
        pairs.append(Pair(key, x["frame"], x, y))
    pairs += [Pair(y["event_id"], y["frame"], None, y) for j, y in enumerate(mb) if j not in tb]
    pairs.sort(key=lambda p: (p.frame, p.key))
    return pairs


def kappa_with_interval(table: np.ndarray) -> tuple[float | None, float | None, float | None]:
    """Cohen's kappa of a square agreement table and its 95 % interval (Fleiss, Cohen & Everitt
    1969 large-sample variance). None where it is undefined (no items, or chance agreement 1)."""
    t = np.asarray(table, dtype=np.float64)
    n = t.sum()
    if n == 0:
        return None, None, None
    p = t / n
    rows, cols = p.sum(axis=1), p.sum(axis=0)
    po = np.trace(p)
    pe = float(rows @ cols)
    if pe >= 1:
        return None, None, None
    k = (po - pe) / (1 - pe)
    diag = np.diag(p) * (1 - (rows + cols) * (1 - k)) ** 2
    off = p * (cols[:, None] + rows[None, :]) ** 2
    np.fill_diagonal(off, 0.0)
    var = (diag.sum() + (1 - k) ** 2 * off.sum() - (k - pe * (1 - k)) ** 2) / ((1 - pe) ** 2 * n)
    se = math.sqrt(max(var, 0.0))
    return float(k), float(k - Z95 * se), float(k + Z95 * se)


def agreement(a: list[dict], b: list[dict], tolerance: int = 2) -> Agreement:
    pairs = match(a, b, tolerance)
    table = np.zeros((2, 2), dtype=np.int64)
    same = both = 0
    only_a = only_b = undecided = 0
    for p in pairs:
        sa, sb = p.status("a"), p.status("b")
        if p.a is None:
            only_b += 1
            continue
        if p.b is None:
            only_a += 1
            continue
        if sa in DECIDED and sb in DECIDED:
            table[DECIDED.index(sa), DECIDED.index(sb)] += 1
            if sa == sb == "accepted":
                both += 1
                same += p.label("a") == p.label("b")
        else:
            undecided += 1
    k, lo, hi = kappa_with_interval(table)
    counts = {"events": len(pairs), "both_decided": int(table.sum()),
              "both_accepted": int(table[0, 0]), "both_rejected": int(table[1, 1]),
              "a_accepted_b_rejected": int(table[0, 1]), "a_rejected_b_accepted": int(table[1, 0]),
              "undecided_by_one_or_both": undecided, "only_in_a": only_a, "only_in_b": only_b}
    return Agreement(pairs, table, k, lo, hi, same, both, counts)


def _view(side: str, row: dict | None) -> str:
    if row is None:
        return f"{side}: absent"
    who = _text(row.get("reviewer"))
    return f"{side}{f' ({who})' if who else ''}: {row['status']}/{row['label'] or '-'}"


def merged_rows(result: Agreement) -> list[dict]:
    """One row per event: agreed decisions kept, `reviewer` naming both reviewers ('ana+ben') and
    `reviewed_at` the later of the two; anything else marked 'disputed' (both views, with who took
    them, in its note; no reviewer, no reviewed_at) for a third look."""
    out = []
    for p in result.pairs:
        base = dict(p.a or p.b)
        if not p.agreed:
            base["status"] = "disputed"
            base["note"] = f"{_view('A', p.a)}; {_view('B', p.b)}"
            base["reviewed_at"] = None
            base["reviewer"] = None
        else:
            who = [w for w in (_text(p.a.get("reviewer")), _text(p.b.get("reviewer"))) if w]
            base["reviewer"] = "+".join(dict.fromkeys(who)) or None
            times = [t for t in (_text(p.a.get("reviewed_at")), _text(p.b.get("reviewed_at"))) if t]
            base["reviewed_at"] = max(times) if times else None
        out.append(base)
    return out


def reviewers_of(rows: list[dict], info: dict) -> list[str]:
    """Who made a table: its sidecar's `reviewers`, then any other name in its reviewer column."""
    listed = info.get("reviewers")
    named = [str(r) for r in listed if r] if isinstance(listed, list) else []
    return list(dict.fromkeys(named + [w for r in rows if (w := _text(r.get("reviewer")))]))


def read_review(path: str) -> tuple[list[dict], dict]:
    """An exported table and its JSON sidecar (empty when missing)."""
    import json

    from reviewer.store.export import sidecar_path

    try:
        # only empty cells are missing: a reviewer or label called "NA" or "null" stays text
        table = pd.read_csv(path, dtype={"event_id": str, "label": str, "status": str,
                                         "reviewer": str, "cause": str},
                            keep_default_na=False, na_values=[""])
    except (OSError, ValueError, UnicodeError) as exc:
        raise BadInput(f"{path}: cannot read the event table ({exc})") from None
    side = sidecar_path(path)
    try:
        info = json.loads(side.read_text(encoding="utf-8"))
    except FileNotFoundError:
        info = {}
    except (OSError, ValueError, UnicodeError) as exc:
        raise BadInput(f"{side}: cannot read the provenance file ({exc})") from None
    return rows_of(table, str(path)), info if isinstance(info, dict) else {}


def same_movie(a_path: str, a_info: dict, b_path: str, b_info: dict) -> str | None:
    """BadInput when the sidecars name different movies; a warning text when one cannot tell."""
    fa = (a_info.get("movie") or {}).get("fingerprint")
    fb = (b_info.get("movie") or {}).get("fingerprint")
    if fa and fb and fa != fb:
        raise BadInput(f"{b_path}: reviews a different movie than {a_path} (fingerprints {fa} "
                       f"and {fb})")
    if not (fa and fb):
        return "a provenance file (.json) is missing: cannot confirm both tables are of one movie"
    return None


def read_pair(a_path: str, b_path: str, tolerance: int) -> tuple[Agreement, dict, dict]:
    """Two exported reviews of one movie, matched: (agreement, A's sidecar, B's sidecar). A missing
    sidecar is a warning on stderr; sidecars naming different movies are BadInput."""
    import sys

    if tolerance < 0:
        raise BadInput(f"--tolerance {tolerance}: 0 frames or more")
    a, ia = read_review(a_path)
    b, ib = read_review(b_path)
    warning = same_movie(a_path, ia, b_path, ib)
    if warning:
        print(f"reviewer: warning: {warning}", file=sys.stderr)
    return agreement(a, b, tolerance), ia, ib
