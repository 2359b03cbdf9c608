"""Interval coverage on data simulated from each estimator's own assumptions.

400 replications per estimator; the number of 90% intervals that cover the
true size must lie in the 99.9% binomial range for a true coverage of 0.9.
"""

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from abm.estimate import (
    removal_relative_sensitivity_from_catches,
    removal_zippin_from_catches,
    zelterman_from_frequencies,
    ztp_from_frequencies,
    ztp_regression_from_counts,
)

REPLICATIONS, LEVEL = 400, 0.9
LOW, HIGH = stats.binom.interval(0.999, REPLICATIONS, LEVEL)


def covered(estimate, simulate, truth, rng):
    hits = 0
    for _ in range(REPLICATIONS):
        result = estimate(simulate(rng))
        hits += result.ci_low <= truth <= result.ci_high
    return hits


def poisson_frequencies(size, rate):
    def simulate(rng):
        counts = rng.poisson(rate, size)
        return np.bincount(counts[counts > 0])[1:]

    return simulate


def binomial_removal(size, chances):
    def simulate(rng):
        left, catches = size, []
        for chance in chances:
            caught = rng.binomial(left, chance)
            catches.append(caught)
            left -= caught
        return catches

    return simulate


@pytest.mark.parametrize("estimator", [ztp_from_frequencies, zelterman_from_frequencies])
def test_poisson_estimators_cover(estimator):
    hits = covered(lambda f: estimator(f, LEVEL), poisson_frequencies(1000, 0.6), 1000, np.random.default_rng(11))
    assert LOW <= hits <= HIGH


def test_ztp_regression_covers():
    def simulate(rng):
        group = rng.integers(0, 2, 1500)
        counts = rng.poisson(np.exp(-0.7 + 0.6 * group))
        seen = counts > 0
        return counts[seen], pd.DataFrame({"group": group[seen].astype(float)})

    hits = covered(lambda d: ztp_regression_from_counts(*d, LEVEL), simulate, 1500, np.random.default_rng(12))
    assert LOW <= hits <= HIGH


def test_zippin_covers():
    simulate = binomial_removal(400, [0.35] * 3)
    hits = covered(lambda c: removal_zippin_from_catches(c, LEVEL), simulate, 400, np.random.default_rng(13))
    assert LOW <= hits <= HIGH


def test_relative_sensitivity_removal_covers():
    s = np.array([1.0, 0.6, 0.8])
    hits = covered(
        lambda c: removal_relative_sensitivity_from_catches(c, s, LEVEL),
        binomial_removal(400, 0.5 * s),
        400,
        np.random.default_rng(14),
    )
    assert LOW <= hits <= HIGH
