"""One-to-one matching of found events to true events (used by the recall and end-to-end tests).

An optimal assignment (scipy.optimize.linear_sum_assignment, the Jonker–Volgenant algorithm for the
linear assignment problem) on |frame difference|, with pairs further apart than the tolerance
forbidden: a forbidden pair costs more than all allowed pairs together, so the assignment first
maximises the number of matched pairs, then minimises their total frame error.
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import linear_sum_assignment

TOLERANCE = 2  # frames


def match_events(true_frames, found_frames, tolerance: int = TOLERANCE):
    """One-to-one pairs (i, j, |Δframe|) of true event i and candidate j within ±tolerance."""
    t = np.asarray(true_frames, dtype=np.int64)
    c = np.asarray(found_frames, dtype=np.int64)
    if len(t) == 0 or len(c) == 0:
        return []
    dist = np.abs(t[:, None] - c[None, :])
    forbidden = (len(t) + len(c)) * (tolerance + 1) + 1  # dearer than every allowed pair together
    cost = np.where(dist <= tolerance, dist, forbidden)
    rows, cols = linear_sum_assignment(cost)
    return [(int(i), int(j), int(dist[i, j])) for i, j in zip(rows, cols, strict=True)
            if dist[i, j] <= tolerance]
