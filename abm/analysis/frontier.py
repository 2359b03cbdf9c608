"""The efficient frontier: points no other point beats on both a benefit (more) and a cost (less).

One mechanism for both users: the policy search's frontier of searched
candidates (:func:`frontier`, over a table) and the briefing's frontier of
design points per scenario (:func:`efficient_frontier`, a mask, in
:func:`abm.report.tables.frontier`).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

BENEFIT, DELAY = "detections", "time_in_port_p95_min"  # the frontier's axes


def efficient_frontier(cost: Sequence[float], benefit: Sequence[float]) -> np.ndarray:
    """True for points no other point beats: none has cost <= and benefit >= with one of them strict."""
    c, b = np.asarray(cost, float), np.asarray(benefit, float)
    keep = np.isfinite(c) & np.isfinite(b)
    out = keep.copy()
    for i in np.flatnonzero(keep):
        others = keep & (c <= c[i]) & (b >= b[i]) & ((c < c[i]) | (b > b[i]))
        out[i] = not others.any()
    return out


def frontier(history: pd.DataFrame, benefit: str = BENEFIT, cost: str = DELAY) -> pd.DataFrame:
    """Rows no other row beats on both ``benefit`` (higher) and ``cost`` (lower), by cost; rows missing either are out."""
    on = efficient_frontier(history[cost], history[benefit])
    return history[on].sort_values(cost, kind="stable").reset_index(drop=True)
