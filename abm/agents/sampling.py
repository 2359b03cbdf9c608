"""NumPy's ``Generator.choice(population, size, replace=False)``, compiled, for many draws in one call.

Each group arriving in the area links to a few random groups already there,
one ``choice`` per group; called from Python, ``choice``'s checks cost several
times its few draws. This is the same algorithm on the same stream (NumPy's
``numpy/random/_generator.pyx``, ``choice`` without probabilities for a
population up to 10,000: Floyd's sampling, then a shuffle of the sample), the
bounded integers from numba's port of ``Generator.integers``, which gives
NumPy's numbers from the same state. ``tests/agents/test_sampling.py`` checks
it against NumPy's own ``choice``.
"""

from __future__ import annotations

import numba
import numpy as np

LARGEST_POPULATION = 10_000  # above this NumPy shuffles the tail of the population instead


@numba.njit(cache=True)
def _bounded(rng, high: int) -> int:
    """A uniform integer in [0, high], as NumPy's ``random_bounded_uint64`` (no draw when high is 0)."""
    if high == 0:
        return 0
    return rng.integers(0, high + 1)


@numba.njit(cache=True)
def samples_without_replacement(rng, populations: np.ndarray, sizes: np.ndarray) -> np.ndarray:
    """``rng.choice(populations[i], size=sizes[i], replace=False)`` for each i in turn, concatenated.

    Every population must be at most :data:`LARGEST_POPULATION` and every size at most its population.
    """
    out = np.empty(sizes.sum(), dtype=np.int64)
    start = 0
    for i in range(populations.shape[0]):
        pop, size = populations[i], sizes[i]
        sample = out[start : start + size]
        for j in range(pop - size, pop):  # Floyd: j itself when the draw is already in the sample
            val = _bounded(rng, j)
            filled = j - pop + size
            for k in range(filled):
                if sample[k] == val:
                    val = j
                    break
            sample[filled] = val
        for k in range(size - 1, 0, -1):  # then NumPy shuffles the sample (Fisher-Yates from the end)
            m = _bounded(rng, k)
            sample[k], sample[m] = sample[m], sample[k]
        start += size
    return out
