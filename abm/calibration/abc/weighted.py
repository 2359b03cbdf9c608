"""Statistics of a weighted sample: covariance, effective sample size, quantiles."""

from __future__ import annotations

import numpy as np


def weighted_covariance(theta: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Sum_i w_i (theta_i - m)(theta_i - m)' with m the weighted mean and the weights summing to 1."""
    w = np.asarray(weights, dtype=float) / np.sum(weights)
    centred = theta - w @ theta
    return (centred * w[:, None]).T @ centred


def effective_sample_size(weights: np.ndarray) -> float:
    """Kish's effective sample size 1 / sum w_i^2 of normalised weights."""
    w = np.asarray(weights, dtype=float) / np.sum(weights)
    return float(1.0 / np.sum(w**2))


def weighted_quantile(values: np.ndarray, weights: np.ndarray, q: float | np.ndarray) -> np.ndarray:
    """The smallest value whose weighted cumulative share reaches q (the inverse of the weighted ECDF)."""
    order = np.argsort(values, kind="stable")
    v, w = np.asarray(values, dtype=float)[order], np.asarray(weights, dtype=float)[order]
    cum = np.cumsum(w) / w.sum()
    index = np.searchsorted(cum, np.asarray(q, dtype=float) - 1e-12, side="left")
    return v[np.minimum(index, v.size - 1)]
