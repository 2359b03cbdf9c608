"""ABC-SMC / population Monte Carlo (Toni et al. 2009; Beaumont et al. 2009), with adaptive tolerances.

Generation 0 is rejection: the ``particles`` closest of ``initial_draws`` prior
draws, equally weighted. Generation t sets its tolerance eps_t to the
``quantile`` of generation t-1's distances (weighted), proposes by resampling
generation t-1 by weight and moving the particle with a Gaussian kernel whose
covariance is twice the weighted covariance of generation t-1 (Beaumont et al.
2009, [mem] for the factor 2), keeps proposals within eps_t, and weights them
w_t(i) ~ prior(theta_i) / sum_j w_{t-1}(j) K_t(theta_i | theta_j). Proposals go
to the simulator in rounds sized from the acceptance rate so far, which is what
keeps a batch executor busy. Latent quantities are weighted with their particle.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Protocol

import numpy as np
from scipy import stats

from ..priors import PriorSet
from .distance import distances, mad_scale
from .posterior import ABCPosterior, Generation, ReferenceTable
from .seeds import stage_rng
from .simulation import ABCError, BatchSimulator, column_names, observed_vector, simulate_stage
from .weighted import weighted_covariance, weighted_quantile

SMC = "ABC-SMC / population Monte Carlo (Toni et al. 2009; Beaumont et al. 2009)"


def kernel_covariance(theta: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Twice the weighted covariance of the previous population (Beaumont et al. 2009, [mem])."""
    cov = 2.0 * weighted_covariance(theta, weights)
    # A parameter on which every particle agrees would give a singular kernel; a tiny jitter keeps it proper.
    floor = 1e-12 * np.maximum(np.abs(np.diag(cov)).max(initial=0.0), 1.0)
    return cov + np.eye(cov.shape[0]) * floor * (np.diag(cov) <= floor)


def smc_weights(
    theta: np.ndarray,
    previous: np.ndarray,
    previous_weights: np.ndarray,
    kernel_cov: np.ndarray,
    prior_pdf: Callable[[np.ndarray], np.ndarray],
) -> np.ndarray:
    """w(i) ~ prior(theta_i) / sum_j w_prev(j) K(theta_i | theta_j), normalised; K Gaussian with ``kernel_cov``."""
    kernel = stats.multivariate_normal(mean=np.zeros(theta.shape[1]), cov=kernel_cov, allow_singular=True)
    diff = theta[:, None, :] - previous[None, :, :]
    density = kernel.pdf(diff.reshape(-1, theta.shape[1])).reshape(theta.shape[0], previous.shape[0])
    w_prev = np.asarray(previous_weights, dtype=float) / np.sum(previous_weights)
    mixture = density @ w_prev
    raw = np.where(mixture > 0, prior_pdf(theta) / np.where(mixture > 0, mixture, 1.0), 0.0)
    if raw.sum() <= 0:
        raise ABCError("every new particle has zero prior density or zero proposal density; check the priors")
    return raw / raw.sum()


class Checkpoint(Protocol):
    """Somewhere generations are kept, so a calibration can be taken up again."""

    def load(self) -> list[Generation]: ...

    def save(self, generation: Generation) -> None: ...


def _propose(
    rng: np.random.Generator, previous: Generation, cov: np.ndarray, priors: PriorSet, n: int
) -> np.ndarray:
    """``n`` proposals inside the prior's support: resample by weight, move by the Gaussian kernel."""
    out: list[np.ndarray] = []
    have, tries = 0, 0
    while have < n:
        tries += 1
        if tries > 1000:
            raise ABCError("the perturbation kernel keeps proposing outside the prior's support")
        pick = rng.choice(previous.theta.shape[0], size=n, p=previous.weights)
        moved = previous.theta[pick] + rng.multivariate_normal(np.zeros(cov.shape[0]), cov, size=n)
        inside = moved[priors.pdf(moved) > 0]
        out.append(inside)
        have += inside.shape[0]
    return np.vstack(out)[:n]


def abc_smc(
    simulate: BatchSimulator,
    priors: PriorSet,
    observed: Sequence[float],
    *,
    particles: int,
    generations: int,
    seed: int,
    initial_draws: int | None = None,
    quantile: float = 0.5,
    max_simulations: int | None = None,
    summary_names: Sequence[str] = (),
    latent_names: Sequence[str] = (),
    checkpoint: Checkpoint | None = None,
    level: float = 0.9,
) -> ABCPosterior:
    """ABC-SMC with adaptive tolerances (see the module docstring).

    ``generations`` counts every population including generation 0;
    ``max_simulations`` caps each later generation's simulations (default 20
    times ``particles``): a generation that runs out of budget keeps what it
    accepted, or, with fewer than d + 1 particles, ends the run with the
    previous generation. A ``checkpoint`` keeps each finished generation and
    hands back those already finished when the run is resumed.
    """
    s_obs = observed_vector(observed)
    if particles < 2:
        raise ABCError(f"particles: expected at least 2, got {particles}")
    if generations < 1:
        raise ABCError(f"generations: expected at least 1, got {generations}")
    if not 0 < quantile < 1:
        raise ABCError(f"quantile: expected a share in (0, 1), got {quantile}")
    initial_draws = initial_draws or 4 * particles
    if initial_draws < particles:
        raise ABCError(f"initial_draws ({initial_draws}) must be at least particles ({particles})")
    budget = max_simulations or 20 * particles
    done = checkpoint.load() if checkpoint is not None else []
    done = done[:generations]
    if not done:
        done = [_generation_zero(simulate, priors, s_obs, particles, initial_draws, seed)]
        if checkpoint is not None:
            checkpoint.save(done[0])
    stopped = ""
    while len(done) < generations:
        previous = done[-1]
        if previous.epsilon <= 0:
            stopped = f"generation {previous.index} already accepted exact matches only (tolerance 0)"
            break
        rate_guess = quantile / 2 if previous.index == 0 else previous.accepted / previous.simulations
        nxt = _next_generation(simulate, priors, s_obs, previous, particles, quantile, budget, rate_guess, seed)
        if nxt is None:
            stopped = (
                f"generation {previous.index + 1} accepted fewer than {priors.dim + 1} particles within "
                f"{budget} simulations"
            )
            break
        done.append(nxt)
        if checkpoint is not None:
            checkpoint.save(nxt)
    return ABCPosterior(
        method=SMC,
        names=priors.names,
        summary_names=column_names(summary_names, s_obs.size, "s"),
        latent_names=column_names(latent_names, done[-1].latent.shape[1], "z"),
        observed=s_obs,
        generations=tuple(done),
        level=level,
        stopped=stopped,
    )


def _generation_zero(
    simulate: BatchSimulator, priors: PriorSet, s_obs: np.ndarray, particles: int, draws: int, seed: int
) -> Generation:
    theta = priors.sample(stage_rng(seed, 0), draws)
    sims, labels = simulate_stage(simulate, theta, seed, 0, 0, s_obs.size)
    scale = mad_scale(sims.summaries)
    d = distances(sims.summaries, s_obs, scale)
    kept = np.argsort(d, kind="stable")[:particles]
    return Generation(
        index=0,
        epsilon=float(d[kept[-1]]),
        simulations=draws,
        theta=theta[kept],
        weights=np.full(particles, 1.0 / particles),
        distances=d[kept],
        summaries=sims.summaries[kept],
        latent=sims.latent[kept],
        labels=tuple(labels[i] for i in kept),
        scale=scale,
        reference=ReferenceTable(theta, sims.summaries, sims.latent, tuple(labels)),
    )


def _next_generation(
    simulate: BatchSimulator,
    priors: PriorSet,
    s_obs: np.ndarray,
    previous: Generation,
    particles: int,
    quantile: float,
    budget: int,
    rate_guess: float,
    seed: int,
) -> Generation | None:
    t = previous.index + 1
    rng = stage_rng(seed, t)
    epsilon = min(float(weighted_quantile(previous.distances, previous.weights, quantile)), previous.epsilon)
    cov = kernel_covariance(previous.theta, previous.weights)
    kept_theta, kept_sums, kept_latent, kept_d, kept_labels = [], [], [], [], []
    simulated, accepted, size = 0, 0, 0
    while accepted < particles and simulated < budget:
        want = particles - accepted
        rate = accepted / simulated if simulated else rate_guess
        # Enough proposals to fill the generation at the rate seen so far (doubling while nothing is accepted).
        size = 2 * size if simulated and not accepted else math.ceil(1.2 * want / max(rate, 1e-3))
        size = int(min(max(size, want), budget - simulated))
        theta = _propose(rng, previous, cov, priors, size)
        sims, labels = simulate_stage(simulate, theta, seed, t, simulated, s_obs.size)
        simulated += size
        d = distances(sims.summaries, s_obs, previous.scale)
        ok = np.flatnonzero(d <= epsilon)[:want]  # in proposal order, so a replay keeps the same particles
        kept_theta.append(theta[ok])
        kept_sums.append(sims.summaries[ok])
        kept_latent.append(sims.latent[ok])
        kept_d.append(d[ok])
        kept_labels += [labels[i] for i in ok]
        accepted += ok.size
    if accepted < priors.dim + 1:
        return None
    theta = np.vstack(kept_theta)
    weights = smc_weights(theta, previous.theta, previous.weights, cov, priors.pdf)
    return Generation(
        index=t,
        epsilon=epsilon,
        simulations=simulated,
        theta=theta,
        weights=weights,
        distances=np.concatenate(kept_d),
        summaries=np.vstack(kept_sums),
        latent=np.vstack(kept_latent),
        labels=tuple(kept_labels),
        scale=previous.scale,
    )
