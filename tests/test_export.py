"""Export: the CSV read back by reference RFC 4180 readers, formula neutralisation, the JSON sidecar."""

from __future__ import annotations

import csv
import json
from datetime import datetime

import numpy as np
import pandas as pd
import pytest

from reviewer.errors import BadInput
from reviewer.movie.base import ArrayMovie, Timing
from reviewer.store.export import export_events, sidecar_path
from reviewer.store.session import Session
from reviewer.store.table import COLUMNS

NOTE = 'edge A, then B; "fast"\nsecond line'


@pytest.fixture
def session(tmp_path):
    movie = tmp_path / "platelets.tif"
    movie.write_bytes(b"x")
    s = Session.open(movie, "fp-export", meta={"frames": 2000, "fps": 400.0,
                                               "detector": {"sensitivity": 1.5, "window": 4}})
    s.seed(pd.DataFrame({"frame": [10, 20, 30, 40], "kind": ["step", "transient", "global", "step"],
                         "frame_end": pd.array([None, 24, None, None], dtype="Int64"),
                         "score": [4.0, 5.5, 9.0, 3.25], "x": [10.0, 20.0, np.nan, 40.0],
                         "y": [5.0, 6.0, np.nan, 7.0]}))
    s.accept("d000000", label="layer")
    s.reject("d000002")
    s.set_note("d000000", NOTE)
    s.add(1500, x=3.0, y=4.0, label="=cmd|' /C calc'!A0")
    s.set_note("d000001", "+1")
    s.set_note("d000003", "-1")
    yield s
    s.close()


def test_csv_reads_back_with_python_csv_module(session, tmp_path):
    # Reference reader 1: Python's csv module, which reads RFC 4180 quoting (doubled quotes, quoted
    # line breaks, CRLF records).
    out, _ = export_events(session, tmp_path / "events.csv")
    with open(out, newline="", encoding="utf-8") as f:
        rows = list(csv.reader(f))
    assert tuple(rows[0]) == COLUMNS
    body = [dict(zip(rows[0], r, strict=True)) for r in rows[1:]]
    assert len(body) == 5
    first = body[0]
    assert first["event_id"] == "d000000" and first["note"] == NOTE and first["label"] == "layer"
    assert float(first["time_s"]) == pytest.approx(10 / 400.0)
    assert out.read_bytes().count(b"\r\n") >= 6  # RFC 4180 section 2: records end with CRLF


def test_csv_reads_back_with_pandas_and_statuses_filter(session, tmp_path):
    # Reference reader 2: pandas.read_csv (C parser), independent of our writer.
    out, _ = export_events(session, tmp_path / "acc.csv", statuses=("accepted",))
    df = pd.read_csv(out, keep_default_na=False, dtype=str)
    assert list(df.columns) == list(COLUMNS)
    assert set(df["status"]) == {"accepted"}
    assert sorted(df["event_id"]) == ["d000000", "m000001"]
    assert df.loc[df.event_id == "d000000", "note"].item() == NOTE
    out2, _ = export_events(session, tmp_path / "rej.csv", statuses="rejected,candidate")
    df2 = pd.read_csv(out2)
    assert sorted(df2["status"]) == ["candidate", "candidate", "rejected"]
    assert df2.loc[df2.event_id == "d000001", "frame_end"].item() == 24


def test_formula_cells_are_neutralised(session, tmp_path):
    # OWASP "CSV injection": cells starting with = + - @ must not start a formula.
    session.set_note("d000002", "@x")
    out, _ = export_events(session, tmp_path / "events.csv")
    df = pd.read_csv(out, keep_default_na=False, dtype=str).set_index("event_id")
    for text in (df.loc["m000001", "label"], df.loc["d000001", "note"], df.loc["d000003", "note"],
                 df.loc["d000002", "note"]):
        assert not text.startswith(("=", "+", "-", "@")), text
    assert df.loc["m000001", "label"] == "'=cmd|' /C calc'!A0"
    assert df.loc["d000001", "note"] == "'+1" and df.loc["d000003", "note"] == "'-1"
    assert df.loc["d000002", "note"] == "'@x"


def test_timestamps_are_iso8601_utc(session, tmp_path):
    out, side = export_events(session, tmp_path / "events.csv")
    df = pd.read_csv(out, keep_default_na=False, dtype=str)
    stamps = [t for t in df["reviewed_at"] if t]
    assert len(stamps) == 3  # accepted, rejected and the manual event; candidates have none
    for t in stamps + [json.loads(side.read_text())["exported_at"]]:
        parsed = datetime.fromisoformat(t)  # reference ISO 8601 parser (Python 3.11+)
        assert parsed.utcoffset().total_seconds() == 0


def test_sidecar_keys_and_values(session, tmp_path):
    movie = ArrayMovie(np.zeros((2000, 6, 8), np.uint16), timing=Timing(fps=400.0),
                       fingerprint="fp-export")
    out, side = export_events(session, tmp_path / "events.csv", movie=movie)
    assert side == tmp_path / "events.json" == sidecar_path(out)
    info = json.loads(side.read_text())
    assert {"program", "version", "exported_at", "movie", "detector", "statuses", "counts",
            "csv"} <= set(info)
    assert info["program"] == "reviewer" and info["csv"] == "events.csv"
    m = info["movie"]
    assert {"path", "fingerprint", "frames", "fps", "duration_s", "height", "width"} <= set(m)
    assert (m["frames"], m["fps"], m["height"], m["width"]) == (2000, 400.0, 6, 8)
    assert m["duration_s"] == pytest.approx(5.0)  # 2000 frames at 400 frames/s
    assert info["detector"] == {"sensitivity": 1.5, "window": 4}
    assert info["counts"] == {"candidate": 2, "accepted": 2, "rejected": 1, "disputed": 0,
                              "exported": 5}
    no_movie = json.loads(export_events(session, tmp_path / "b.csv")[1].read_text())["movie"]
    assert no_movie["duration_s"] == pytest.approx(5.0) and no_movie["fingerprint"] == "fp-export"


def test_bad_status_is_bad_input(session, tmp_path):
    with pytest.raises(BadInput, match="unknown status"):
        export_events(session, tmp_path / "e.csv", statuses="accepted,maybe")
