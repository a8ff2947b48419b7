"""`reviewer compare` and `reviewer merge`: two reviews of one movie, checked against outside
references for Cohen's kappa (scikit-learn's cohen_kappa_score) and its interval (statsmodels'
cohens_kappa, which implements the Fleiss, Cohen & Everitt 1969 large-sample variance)."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from reviewer.store.agreement import agreement, kappa_with_interval, match, rows_of

COLS = ["event_id", "frame", "time_s", "frame_end", "kind", "score", "x", "y", "status", "label",
        "note", "source", "reviewed_at"]


def table(rows):
    out = []
    for eid, frame, status, label in rows:
        out.append({"event_id": eid, "frame": frame, "time_s": frame / 400, "frame_end": None,
                    "kind": "manual" if eid.startswith("m") else "step", "score": 9.0,
                    "x": 10.0, "y": 12.0, "status": status, "label": label, "note": None,
                    "source": "manual" if eid.startswith("m") else "detector",
                    "reviewed_at": "2026-12-01T10:00:00.000Z"})
    return pd.DataFrame(out, columns=COLS)


def two_reviews(seed=4, n=60):
    """Reviewer B copies A's decisions but flips 9 of them and relabels 4 accepted events."""
    rng = np.random.default_rng(seed)
    a_status = rng.choice(["accepted", "rejected"], n, p=[0.6, 0.4])
    b_status = a_status.copy()
    flips = rng.choice(n, 9, replace=False)
    b_status[flips] = np.where(a_status[flips] == "accepted", "rejected", "accepted")
    a_label = np.where(a_status == "accepted", "layer", None)
    b_label = np.where(b_status == "accepted", "layer", None)
    both = np.flatnonzero((a_status == "accepted") & (b_status == "accepted"))
    b_label[both[:4]] = "nucleation"
    ids = [f"d{i:06d}" for i in range(n)]
    frames = 50 + 37 * np.arange(n)
    a = table(list(zip(ids, frames, a_status, a_label, strict=True)))
    b = table(list(zip(ids, frames, b_status, b_label, strict=True)))
    return a, b, a_status, b_status


def save(df, path, fingerprint="fp-1"):
    df.to_csv(path, index=False)
    path.with_suffix(".json").write_text(json.dumps({"movie": {"fingerprint": fingerprint}}))
    return path


def test_kappa_equals_scikit_learn_and_interval_equals_statsmodels():
    from sklearn.metrics import cohen_kappa_score
    from statsmodels.stats.inter_rater import cohens_kappa

    a, b, sa, sb = two_reviews()
    result = agreement(rows_of(a, "a"), rows_of(b, "b"))
    assert result.kappa == pytest.approx(cohen_kappa_score(sa, sb), abs=1e-12)
    ref = cohens_kappa(result.table)
    assert result.kappa_low == pytest.approx(ref.kappa_low, abs=1e-9)
    assert result.kappa_high == pytest.approx(ref.kappa_upp, abs=1e-9)
    assert result.counts["both_decided"] == 60
    assert result.counts["a_accepted_b_rejected"] + result.counts["a_rejected_b_accepted"] == 9
    assert result.labels_both - result.labels_same == 4
    assert len(result.disagreements()) == 13  # 9 decisions + 4 labels


@pytest.mark.parametrize("seed", range(5))
def test_kappa_on_random_three_way_tables(seed):
    # the formula is general: a 3x3 table against statsmodels (Fleiss, Cohen & Everitt 1969)
    from statsmodels.stats.inter_rater import cohens_kappa

    t = np.random.default_rng(seed).integers(1, 30, (3, 3))
    k, lo, hi = kappa_with_interval(t)
    ref = cohens_kappa(t)
    assert (k, lo, hi) == pytest.approx((ref.kappa, ref.kappa_low, ref.kappa_upp), abs=1e-9)


def test_undefined_kappa():
    assert kappa_with_interval(np.zeros((2, 2))) == (None, None, None)
    assert kappa_with_interval(np.array([[5, 0], [0, 0]])) == (None, None, None)


def test_manual_marks_match_by_nearest_frame():
    a = rows_of(table([("m000001", 100, "accepted", "layer"), ("m000002", 300, "accepted", None)]),
                "a")
    b = rows_of(table([("m000007", 102, "accepted", "layer"), ("m000008", 296, "accepted", None),
                       ("m000009", 101, "rejected", None)]), "b")
    pairs = match(a, b, tolerance=2)
    linked = [(p.a["event_id"] if p.a else None, p.b["event_id"] if p.b else None) for p in pairs]
    # 100 pairs with 101 (1 frame) rather than 102; 300 is 4 frames from 296: unmatched
    assert ("m000001", "m000009") in linked
    assert ("m000002", None) in linked and (None, "m000008") in linked
    assert (None, "m000007") in linked


def test_compare_and_merge_commands(tmp_path):
    a, b, sa, sb = two_reviews()
    pa, pb = save(a, tmp_path / "alice.csv"), save(b, tmp_path / "bob.csv")
    r = subprocess.run([sys.executable, "-m", "reviewer", "compare", pa, pb, "--json"],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    out = json.loads(r.stdout)
    from sklearn.metrics import cohen_kappa_score

    assert out["kappa"] == pytest.approx(cohen_kappa_score(sa, sb), abs=1e-12)
    assert len(out["disagreements"]) == 13
    text = subprocess.run([sys.executable, "-m", "reviewer", "compare", pa, pb],
                          capture_output=True, text=True, timeout=60)
    assert "kappa" in text.stdout and "disagreements   13" in text.stdout

    merged = tmp_path / "merged.csv"
    r = subprocess.run([sys.executable, "-m", "reviewer", "merge", pa, pb, "-o", merged],
                       capture_output=True, text=True, timeout=60)
    assert r.returncode == 0, r.stderr
    m = pd.read_csv(merged, dtype={"event_id": str})
    assert (m["status"] == "disputed").sum() == 13
    agreed = m[m["status"] != "disputed"].set_index("event_id")
    a_idx = a.set_index("event_id")
    assert (agreed["status"] == a_idx.loc[agreed.index, "status"]).all()
    assert json.loads(merged.with_suffix(".json").read_text())["counts"]["disputed"] == 13


def test_refusals_are_one_line(tmp_path):
    a, b, *_ = two_reviews()
    pa, pb = save(a, tmp_path / "a.csv"), save(b, tmp_path / "b.csv", fingerprint="other")
    before = pa.read_bytes()
    for args in (["compare", pa, pb], ["merge", pa, pb, "-o", tmp_path / "m.csv"],
                 ["merge", pa, pa, "-o", pa], ["merge", pa, pa, "-o", tmp_path / "a.json"],
                 ["compare", pa, tmp_path / "missing.csv"]):
        r = subprocess.run([sys.executable, "-m", "reviewer", *map(str, args)],
                           capture_output=True, text=True, timeout=60)
        assert r.returncode == 2, (args, r.stderr)
        assert len(r.stderr.strip().splitlines()) == 1 and "Traceback" not in r.stderr
    assert pa.read_bytes() == before


def test_reviewer_columns_compare_and_merge(tmp_path, capsys):
    """Exports with the reviewer, cause and x_nm/y_nm columns (appended last) against each other and
    against an export made before they existed."""
    from sklearn.metrics import cohen_kappa_score

    from reviewer.cli import main

    a, b, sa, sb = two_reviews(seed=7)
    for df, who in ((a, "ana"), (b, "NA")):  # "NA" is a name, not a missing value
        df["cause"] = None
        df["reviewer"] = who
        df["x_nm"], df["y_nm"] = df["x"] * 0.05, df["y"] * 0.05
    pa, pb = save(a, tmp_path / "ana.csv"), save(b, tmp_path / "na.csv")
    old = save(a.drop(columns=["cause", "reviewer", "x_nm", "y_nm"]), tmp_path / "old.csv")

    assert main(["compare", str(pa), str(pb), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["kappa"] == pytest.approx(cohen_kappa_score(sa, sb), abs=1e-12)
    assert out["reviewers"] == {"a": ["ana"], "b": ["NA"]}
    assert main(["compare", str(old), str(pb), "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["kappa"] == pytest.approx(
        cohen_kappa_score(sa, sb), abs=1e-12)
    assert main(["compare", str(pa), str(pb)]) == 0
    assert "reviewers       A: ana; B: NA" in capsys.readouterr().out

    merged = tmp_path / "merged.csv"
    assert main(["merge", str(pa), str(pb), "-o", str(merged)]) == 0
    m = pd.read_csv(merged, dtype=str, keep_default_na=False).set_index("event_id")
    disputed = m[m["status"] == "disputed"]
    agreed = m[m["status"] != "disputed"]
    assert len(disputed) == len(out["disagreements"]) > 0 and len(agreed) > 0
    assert set(agreed["reviewer"]) == {"ana+NA"} and set(disputed["reviewer"]) == {""}
    assert all(n.startswith("A (ana): ") and "; B (NA): " in n for n in disputed["note"])
    assert (agreed["x_nm"].astype(float) == a.set_index("event_id").loc[agreed.index, "x_nm"]).all()
    info = json.loads(merged.with_suffix(".json").read_text())
    assert info["reviewers"] == ["ana", "NA"]
    assert [i["reviewers"] for i in info["inputs"]] == [["ana"], ["NA"]]
