"""The calibration's coverage self-check and its warnings.

Sources (../shared/REFERENCES.md, "Checking a calibration's own coverage"):
- Conjugate toy: counts y_1..y_n ~ Poisson(lambda), lambda ~ Gamma(a, rate b) -> posterior
  Gamma(a + sum y, b + n) (Gelman et al., BDA3 section 2.6) [pub]. With lambda drawn from the prior,
  the exact 90% interval covers lambda in 90% of draws exactly; an ABC interval should come close.
- Cross-validation for ABC: Csillery, Francois & Blum (2012), the R abc package's cv4abc [pub].
- Wilson (1927) score interval for the measured coverage.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from abm.calibration import mad_scale, pointwise, rejection_abc
from abm.calibration.abc.posterior import ReferenceTable
from abm.calibration.priors import Prior, PriorSet
from abm.calibration.self_check import SELF_CHECK_COLUMNS, cross_validate, reliability_warnings

A, B, N_COUNTS = 2.0, 0.5, 10
RATE = PriorSet.of([Prior.make("rate", "gamma", shape=A, rate=B)])


def poisson_table(draws: int, seed: int) -> ReferenceTable:
    """Prior draws of the rate; summary: the mean of 10 counts; latent: the count of an 11th, unseen period."""
    rng = np.random.default_rng(seed)
    theta = RATE.sample(rng, draws)
    counts = rng.poisson(theta[:, :1], size=(draws, N_COUNTS + 1))
    summaries = counts[:, :N_COUNTS].mean(axis=1, keepdims=True)
    latent = counts[:, N_COUNTS:].astype(float)
    return ReferenceTable(theta, summaries, latent, tuple(f"p{i}" for i in range(draws)))


def test_exact_posterior_covers_in_nine_of_ten_as_the_check_assumes():
    # The premise, checked directly: the exact conjugate interval covers a prior-drawn rate 90% of the time.
    table = poisson_table(4000, seed=1)
    sums = table.summaries[:, 0] * N_COUNTS
    low, high = stats.gamma.ppf([[0.05], [0.95]], A + sums, scale=1 / (B + N_COUNTS))
    covered = np.mean((low <= table.theta[:, 0]) & (table.theta[:, 0] <= high))
    assert covered == pytest.approx(0.90, abs=3 * np.sqrt(0.09 / 4000))


@pytest.mark.parametrize("regression", [True, False])
def test_cross_validation_on_the_conjugate_toy_comes_out_near_nominal(regression):
    table = poisson_table(3000, seed=2)
    check = cross_validate(
        table, RATE, mad_scale(table.summaries), keep=150, regression=regression, trials=400, seed=3, level=0.9,
        latent_names=("unseen",), how="toy",
    )
    frame = check.to_frame().set_index("quantity")
    assert list(check.to_frame().columns) == list(SELF_CHECK_COLUMNS)
    # Binomial tolerance: 3 SE of a share of 400 at 0.9 is 0.045; ABC's tolerance adds a little width.
    for quantity in ("rate", "unseen"):
        row = frame.loc[quantity]
        assert row["trials"] == 400 and row["covered"] == round(row["coverage"] * 400)
        assert row["coverage"] == pytest.approx(0.9, abs=0.05), quantity
        assert row["coverage_low"] < row["coverage"] < row["coverage_high"]
    # The toy's exact posterior SD at a typical rate (about 4) is about 0.6: the width of 90% intervals ~2.
    assert 1.0 < frame.loc["rate", "mean_width"] < 3.5
    assert 0.2 < frame.loc["rate", "rmse"] < 1.2


def test_a_method_that_overfits_is_caught_by_its_own_coverage():
    # Twenty pure-noise summaries beside the informative one, 25 kept draws: the local-linear fit follows the
    # noise and the intervals come out too narrow (the failure the R abc documentation warns of, [mem]).
    rng = np.random.default_rng(4)
    base = poisson_table(400, seed=5)
    noise = rng.normal(size=(base.size, 20))
    table = ReferenceTable(base.theta, np.column_stack([base.summaries, noise]), base.latent, base.labels)
    check = cross_validate(
        table, RATE, mad_scale(table.summaries), keep=25, regression=True, trials=100, seed=6, level=0.9,
        latent_names=("unseen",), how="toy",
    )
    coverage = check.to_frame().set_index("quantity").loc["rate", "coverage"]
    assert coverage < 0.8
    post = rejection_abc(pointwise(lambda t, r: np.r_[r.poisson(t[0], N_COUNTS).mean(), r.normal(size=20)]), RATE,
                         [4.0, *np.zeros(20)], draws=400, accept=25 / 400, seed=7)
    warnings = reliability_warnings(post, RATE, check)
    assert any(w.startswith("warning: rate: its 90% intervals held the pseudo-truth in") and "too narrow" in w
               for w in warnings)
    assert all("\n" not in w for w in warnings)


def test_warnings_name_an_unidentified_unknown_a_piled_bound_and_a_small_sample():
    priors = PriorSet.of([
        Prior.make("rate", "uniform", low=0.5, high=3.0),  # the data want about 4: the posterior piles at 3
        Prior.make("ignored", "uniform", low=0.0, high=1.0),  # the simulator never reads it
    ])
    # A summary that is the rate itself, nearly noise-free: the 30 draws nearest 4 are the 30 highest of 3000.
    simulate = pointwise(lambda t, r: np.array([t[0] + 0.001 * r.normal()]))
    post = rejection_abc(simulate, priors, [4.0], draws=3000, accept=0.01, seed=8, regression=False)
    text = "\n".join(reliability_warnings(post, priors, None))
    assert "no self-check was run" in text
    assert "warning: rate: 100% of the posterior lies within 2% of the prior's upper bound (3)" in text
    assert "warning: ignored: not identified by these records" in text and "its interval is the prior's" in text
    assert "effective sample size of 30 (under 50)" in text
    assert "warning: rate: not identified" not in text
