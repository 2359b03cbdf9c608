"""The ABC algorithms on toy simulators with exact posteriors, and their building blocks by hand.

Sources (../shared/REFERENCES.md, Inference and sensitivity):
- Poisson-Gamma conjugacy: Gamma(a, b) prior on a Poisson rate, counts x_1..x_n -> Gamma(a + sum x, b + n) [calc].
- Beaumont, Zhang & Balding (2002): theta ~ N(0, 1), s = theta + N(0, 1), s_obs = 1 -> posterior N(0.5, 0.5)
  exactly, and the local-linear adjustment recovers it [calc].
- ABC-SMC / PMC weights (Toni et al. 2009; Beaumont et al. 2009):
  w_t(i) ~ prior(theta_i) / sum_j w_{t-1}(j) K_t(theta_i | theta_j), Gaussian kernel with variance twice the
  weighted variance of the previous population [mem: the factor 2 is recalled, not checked against the paper].
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from abm.calibration import (
    ABCError,
    Generation,
    Simulated,
    abc_smc,
    effective_sample_size,
    kernel_covariance,
    mad_scale,
    pointwise,
    predictive_check,
    regression_adjust,
    rejection_abc,
    smc_weights,
    weighted_quantile,
)
from abm.calibration.abc.seeds import simulation_seeds
from abm.calibration.abc.weighted import weighted_covariance
from abm.calibration.priors import Prior, PriorSet

# Poisson-Gamma: Gamma(2, rate 0.5) prior, ten counts summing to 48 -> Gamma(50, rate 10.5).
A, B = 2.0, 0.5
COUNTS = np.array([5, 3, 6, 4, 7, 5, 2, 6, 4, 6])
EXACT = stats.gamma(A + COUNTS.sum(), scale=1.0 / (B + COUNTS.size))
RATE_PRIOR = PriorSet.of([Prior.make("rate", "gamma", shape=A, rate=B)])
# Over 10 seeds (measured with these settings) the posterior mean moved by SD 0.027 (SMC) and 0.021
# (rejection) around the exact 4.762, the interval ends by SD <= 0.064; the tolerances are about 3-4 SD.
TOL_MEAN, TOL_SD, TOL_END = 0.1, 0.05, 0.2


def poisson_means(theta: np.ndarray, seeds: np.ndarray, labels) -> Simulated:
    """The sufficient statistic (mean of n Poisson counts) for each rate; one generator for the whole batch."""
    rng = np.random.default_rng(seeds)
    counts = rng.poisson(theta[:, :1], size=(theta.shape[0], COUNTS.size))
    return Simulated(counts.mean(axis=1, keepdims=True))


def check_against_exact(frame) -> None:
    row = frame.set_index("quantity").loc["rate"]
    low, high = EXACT.ppf([0.05, 0.95])
    assert row["mean"] == pytest.approx(EXACT.mean(), abs=TOL_MEAN)
    assert row["sd"] == pytest.approx(EXACT.std(), abs=TOL_SD)
    assert row["low"] == pytest.approx(low, abs=TOL_END)
    assert row["high"] == pytest.approx(high, abs=TOL_END)


def test_smc_posterior_of_a_poisson_rate_matches_the_exact_gamma():
    # Poisson-Gamma conjugacy [calc]
    post = abc_smc(poisson_means, RATE_PRIOR, [COUNTS.mean()], particles=1000, generations=5, seed=11)
    check_against_exact(post.to_frame())
    diag = post.diagnostics()
    assert list(diag["generation"]) == list(range(len(diag)))
    assert (np.diff(diag["epsilon"]) <= 0).all(), "tolerances never grow"
    assert (diag["accepted"] == 1000).all() and (diag["acceptance_rate"] <= 1).all()


def test_rejection_with_regression_matches_the_exact_gamma():
    # Poisson-Gamma conjugacy [calc]; the adjustment works on log(rate), the gamma prior's transform scale.
    post = rejection_abc(poisson_means, RATE_PRIOR, [COUNTS.mean()], draws=40000, accept=0.05, seed=12)
    check_against_exact(post.to_frame())
    assert (post.theta > 0).all(), "adjusted on the log scale, rates stay positive"


@pytest.mark.parametrize("accept", [0.2, 1.0])
def test_regression_adjustment_reproduces_the_normal_posterior(accept):
    # Beaumont, Zhang & Balding (2002): E[theta | s] = s / 2 is linear and the residual theta - s/2 ~ N(0, 1/2)
    # does not depend on s, so the adjustment is exact whatever the tolerance (accept = 1 keeps every draw).
    prior = PriorSet.of([Prior.make("theta", "normal", mean=0.0, sd=1.0)])

    def simulate(theta, seeds, labels):
        return Simulated(theta + np.random.default_rng(seeds).normal(size=theta.shape))

    n = 100_000
    post = rejection_abc(simulate, prior, [1.0], draws=n, accept=accept, seed=13)
    values, weights = post.theta[:, 0], post.weights
    ess = effective_sample_size(weights)
    mean = np.average(values, weights=weights)
    var = np.average((values - mean) ** 2, weights=weights)
    assert mean == pytest.approx(0.5, abs=4 * math.sqrt(0.5 / ess))
    assert var == pytest.approx(0.5, abs=4 * 0.5 * math.sqrt(2 / ess))
    # Over 8 seeds the 5%, 50% and 95% points moved by SD <= 0.014 (accept 0.2) around the exact ones.
    q = weighted_quantile(values, weights, [0.05, 0.5, 0.95])
    np.testing.assert_allclose(q, stats.norm(0.5, math.sqrt(0.5)).ppf([0.05, 0.5, 0.95]), atol=0.05)


def test_regression_adjust_recovers_the_slope_and_centres_on_the_observed_summary():
    rng = np.random.default_rng(3)
    theta = rng.normal(size=(5000, 1))
    s = theta + rng.normal(size=(5000, 1))
    adjusted, beta = regression_adjust(theta, s, np.array([1.0]), np.array([1.0]), np.ones(5000))
    assert beta[0, 0] == pytest.approx(0.5, abs=0.03)  # Cov(theta, s) / Var(s) = 1/2
    # After adjustment nothing is left of s in theta*: its regression on s has slope 0.
    assert np.polyfit(s[:, 0], adjusted[:, 0], 1)[0] == pytest.approx(0.0, abs=1e-9)


def test_regression_needs_more_draws_than_summaries():
    with pytest.raises(ABCError, match="more weighted simulations"):
        regression_adjust(np.zeros((3, 1)), np.zeros((3, 3)), np.zeros(3), np.ones(3), np.ones(3))


def test_smc_weights_on_a_tiny_population_by_hand():
    # Previous population theta = 0, 1, 3 with weights 0.2, 0.3, 0.5: weighted mean 1.8, weighted variance
    # 0.2*1.8^2 + 0.3*0.8^2 + 0.5*1.2^2 = 1.56, so the kernel variance is 2 * 1.56 = 3.12 (Beaumont et al. 2009 [mem]).
    previous = np.array([[0.0], [1.0], [3.0]])
    w_prev = np.array([0.2, 0.3, 0.5])
    cov = kernel_covariance(previous, w_prev)
    assert cov[0, 0] == pytest.approx(3.12)
    # New particles 1, 2 and 6 under a uniform prior on [-5, 5] (density 0.1; 6 lies outside).
    prior = PriorSet.of([Prior.make("x", "uniform", low=-5.0, high=5.0)])
    new = np.array([[1.0], [2.0], [6.0]])

    def normal(x: float, mu: float) -> float:
        return math.exp(-((x - mu) ** 2) / (2 * 3.12)) / math.sqrt(2 * math.pi * 3.12)

    raw = [0.1 / sum(w * normal(x, mu) for w, mu in zip(w_prev, previous[:, 0])) for x in (1.0, 2.0)] + [0.0]
    expected = np.array(raw) / sum(raw)
    np.testing.assert_allclose(smc_weights(new, previous, w_prev, cov, prior.pdf), expected, rtol=1e-12)


def test_weighted_covariance_and_kernel_in_two_dimensions():
    theta = np.array([[0.0, 1.0], [2.0, 1.0], [2.0, 3.0]])
    w = np.array([0.5, 0.25, 0.25])
    # mean (1, 1.5); centred rows (-1, -0.5), (1, -0.5), (1, 1.5)
    expected = 0.5 * np.outer([-1, -0.5], [-1, -0.5]) + 0.25 * np.outer([1, -0.5], [1, -0.5]) + 0.25 * np.outer([1, 1.5], [1, 1.5])
    np.testing.assert_allclose(weighted_covariance(theta, w), expected)
    np.testing.assert_allclose(kernel_covariance(theta, w), 2 * expected)


def test_effective_sample_size_quantiles_and_scale():
    assert effective_sample_size(np.ones(8)) == pytest.approx(8.0)
    assert effective_sample_size(np.array([1.0, 0.0, 0.0])) == pytest.approx(1.0)
    assert effective_sample_size(np.array([0.5, 0.25, 0.25])) == pytest.approx(1 / 0.375)
    values, weights = np.array([3.0, 1.0, 2.0]), np.array([0.2, 0.5, 0.3])
    np.testing.assert_array_equal(weighted_quantile(values, weights, [0.4, 0.5, 0.6, 0.81]), [1.0, 1.0, 2.0, 3.0])
    summaries = np.array([[1.0, 5.0, 2.0], [2.0, 5.0, 2.0], [4.0, 5.0, 9.0], [8.0, 5.0, 2.0]])
    # MAD of column 0: median 3, |deviations| 2, 1, 1, 5 -> 1.5; column 1 never varies -> 1;
    # column 2 has MAD 0 but varies -> its SD.
    np.testing.assert_allclose(mad_scale(summaries), [1.5, 1.0, np.std([2.0, 2.0, 9.0, 2.0])])


class MemoryCheckpoint:
    """Generations kept in memory, as the calibration store keeps them on disk."""

    def __init__(self) -> None:
        self.generations: list[Generation] = []

    def load(self) -> list[Generation]:
        return list(self.generations)

    def save(self, generation: Generation) -> None:
        self.generations.append(generation)


def test_smc_replays_exactly_and_resumes_from_a_checkpoint():
    settings = dict(particles=200, initial_draws=600, seed=5)
    calls: list[int] = []

    def counted(theta, seeds, labels):
        calls.append(theta.shape[0])
        return poisson_means(theta, seeds, labels)

    whole = abc_smc(counted, RATE_PRIOR, [COUNTS.mean()], generations=3, **settings)
    whole_calls = sum(calls)
    checkpoint = MemoryCheckpoint()
    abc_smc(poisson_means, RATE_PRIOR, [COUNTS.mean()], generations=2, checkpoint=checkpoint, **settings)
    calls.clear()
    resumed = abc_smc(counted, RATE_PRIOR, [COUNTS.mean()], generations=3, checkpoint=checkpoint, **settings)
    np.testing.assert_array_equal(resumed.theta, whole.theta)
    np.testing.assert_array_equal(resumed.weights, whole.weights)
    assert resumed.final.labels == whole.final.labels
    assert sum(calls) == resumed.final.simulations < whole_calls, "only the last generation was simulated again"


def test_pointwise_simulator_carries_latent_quantities_and_the_predictive_check():
    prior = PriorSet.of([Prior.make("mu", "uniform", low=-3.0, high=3.0)])

    def one(theta, rng):
        s = theta[0] + rng.normal()
        return np.array([s]), np.array([theta[0] ** 2])  # a latent quantity the data never show

    simulate = pointwise(one)
    post = abc_smc(simulate, prior, [0.7], particles=150, generations=3, seed=8, latent_names=["mu_squared"])
    assert post.latent_names == ("mu_squared",)
    np.testing.assert_allclose(post.latent[:, 0], post.theta[:, 0] ** 2)
    check = predictive_check(simulate, post, 200, seed=8)
    table = check.to_frame()
    assert table.loc[0, "inside"] and 0 < table.loc[0, "tail_p"] <= 1
    assert list(check.latent_frame()["quantity"]) == ["mu_squared"]
    assert "predictive check" in check.summary() and "mu_squared" in post.summary()


def test_simulation_seeds_are_per_stage_and_index():
    first = simulation_seeds(7, 1, 0, 5)
    np.testing.assert_array_equal(simulation_seeds(7, 1, 3, 2), first[3:])  # a later round continues the numbering
    assert len(set(first) | set(simulation_seeds(7, 2, 0, 5))) == 10


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"particles": 1, "generations": 2}, "particles"),
        ({"particles": 10, "generations": 0}, "generations"),
        ({"particles": 10, "generations": 2, "quantile": 1.0}, "quantile"),
        ({"particles": 10, "generations": 2, "initial_draws": 5}, "initial_draws"),
    ],
)
def test_smc_settings_are_checked(kwargs, message):
    with pytest.raises(ABCError, match=message):
        abc_smc(poisson_means, RATE_PRIOR, [4.0], seed=1, **kwargs)


def test_a_simulator_that_returns_the_wrong_shape_is_reported():
    def bad(theta, seeds, labels):
        return Simulated(np.zeros((theta.shape[0], 2)))

    with pytest.raises(ABCError, match="shape"):
        rejection_abc(bad, RATE_PRIOR, [4.0], draws=10, accept=0.5, seed=1)
