"""Tiny invented frames for the snapshot apps: a bright platelet on a dim membrane."""

from __future__ import annotations

import numpy as np


def platelet(rows: int = 8, cols: int = 12, edge: int = 7) -> np.ndarray:
    """An 8 x 12 px frame: a platelet filling columns < ``edge`` of rows 2-5, a dim island."""
    frame = np.full((rows, cols), 300, dtype=np.uint16)
    frame[:, :] += (np.arange(cols) * 5).astype(np.uint16)  # gentle illumination ramp
    frame[2:6, :edge] = 1800
    frame[6, 10] = 900  # a small island
    return frame
