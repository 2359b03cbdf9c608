"""The ABC distance: summaries divided by their scale, Euclidean distance from the observed ones.

The scale is by default the median absolute deviation of the prior-predictive
summaries (:func:`mad_scale`), so no summary dominates by its units.
"""

from __future__ import annotations

import numpy as np
from scipy import stats


def mad_scale(summaries: np.ndarray) -> np.ndarray:
    """Median absolute deviation of each summary; the SD where that is 0; 1 where the summary never varies."""
    summaries = np.asarray(summaries, dtype=float)
    scale = stats.median_abs_deviation(summaries, axis=0)
    sd = summaries.std(axis=0)
    scale = np.where(scale > 0, scale, sd)
    return np.where(scale > 0, scale, 1.0)


def distances(summaries: np.ndarray, observed: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """Euclidean distance of each row's scaled summaries from the observed ones."""
    return np.sqrt((((np.asarray(summaries) - observed) / scale) ** 2).sum(axis=1))
