"""Numbers in the event table: NumPy scalars (NumPy 2 reprs them as `np.float64(...)`) are written
as plain numbers that Python's csv module and pandas read back."""

from __future__ import annotations

import csv

import numpy as np
import pandas as pd

from reviewer.store.table import COLUMNS, write_csv


def test_numpy_floats_are_written_as_plain_numbers(tmp_path):
    row = {c: None for c in COLUMNS} | {"event_id": "d000001", "frame": np.int64(7),
                                         "time_s": np.float64(0.7225), "kind": "step",
                                         "status": "accepted", "source": "detector"}
    path = tmp_path / "t.csv"
    write_csv([row], path)
    with open(path, newline="") as f:
        got = next(csv.DictReader(f))
    assert got["time_s"] == "0.7225" and got["frame"] == "7"
    assert pd.read_csv(path)["time_s"].dtype == np.float64
