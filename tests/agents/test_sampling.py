"""The compiled sampling without replacement gives NumPy's own ``choice`` on the same stream, bit for bit."""

from __future__ import annotations

import numpy as np
import pytest

from abm.agents.sampling import LARGEST_POPULATION, samples_without_replacement


@pytest.mark.parametrize("seed", range(12))
def test_samples_are_numpys_choice_without_replacement(seed: int) -> None:
    shapes = np.random.default_rng(500 + seed)
    populations = shapes.integers(0, 400, 60)
    populations[:3] = [0, 1, LARGEST_POPULATION]
    sizes = np.array([shapes.integers(0, min(p, 12) + 1) for p in populations])
    sizes[5] = populations[5]  # the whole population, shuffled
    ours, theirs = np.random.default_rng(seed), np.random.default_rng(seed)
    got = samples_without_replacement(ours, populations, sizes)
    expected = [theirs.choice(int(p), size=int(k), replace=False) for p, k in zip(populations, sizes, strict=True)]
    np.testing.assert_array_equal(got, np.concatenate(expected))
    assert ours.random() == theirs.random()  # the stream is left where NumPy leaves it
    np.testing.assert_array_equal(ours.integers(1000, size=5), theirs.integers(1000, size=5))  # half-used words too
