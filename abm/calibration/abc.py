"""Approximate Bayesian computation: pure functions over any simulator of summary statistics.

Nothing here knows the port model. A simulator is a function from parameter
vectors to summary statistics (a :class:`BatchSimulator`: a batch of
parameter rows, one seed and one label per row, in; :class:`Simulated` out);
:func:`pointwise` turns a function of one parameter vector into one, so the
algorithms can be checked on toy models with known posteriors. The port-model
adapter (:mod:`abm.calibration.simulator`) runs the same calls through the
batch executors.

Distance
    Each summary is divided by its scale (by default the median absolute
    deviation of the prior-predictive summaries, so no summary dominates by
    its units), and the distance is Euclidean on the scaled summaries.

Rejection with regression adjustment (Beaumont, Zhang & Balding 2002)
    Draw from the prior, simulate, keep the share ``accept`` of draws closest
    to the observed summaries; the tolerance h is the first rejected distance.
    Epanechnikov weights K = 1 - (d/h)^2 and a weighted least-squares fit
    phi_i = a + (s_i - s_obs)'b on the kept draws (phi: each parameter on its
    prior's transform scale) give adjusted values phi_i* = phi_i - (s_i - s_obs)'b.

ABC-SMC / population Monte Carlo (Toni et al. 2009; Beaumont et al. 2009)
    Generation 0 is rejection: the ``particles`` closest of ``initial_draws``
    prior draws, equally weighted. Generation t sets its tolerance eps_t to
    the ``quantile`` of generation t-1's distances (weighted), proposes by
    resampling generation t-1 by weight and moving the particle with a
    Gaussian kernel whose covariance is twice the weighted covariance of
    generation t-1 (Beaumont et al. 2009, [mem] for the factor 2), keeps
    proposals within eps_t, and weights them
    w_t(i) ~ prior(theta_i) / sum_j w_{t-1}(j) K_t(theta_i | theta_j).
    Proposals go to the simulator in rounds sized from the acceptance rate so
    far, which is what keeps a batch executor busy.

Latent quantities
    A simulator may return quantities the data do not show but its own runs
    know (crossings, in the port model). They ride along with each particle:
    weighted with it (ABC-SMC) or adjusted with the same regression
    (rejection), they are draws from the ABC posterior of those quantities
    given the observed summaries.

Randomness
    One integer seed. The algorithm's own draws in stage t come from
    ``SeedSequence(seed, spawn_key=(1, t))``; simulation i of stage t gets the
    seed ``SeedSequence(seed, spawn_key=(2, t, i)).generate_state(1)[0]``.
    So a calibration replays exactly, and a store that keeps finished
    simulations can resume one.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import InputError
from .priors import PriorSet

# Spawn-key purposes (see the module docstring).
_PROPOSE, _SIMULATE = 1, 2
PREDICTIVE_STAGE = 1000  # the stage number of posterior predictive simulations
REJECTION = "rejection with local-linear regression adjustment (Beaumont, Zhang & Balding 2002)"
REJECTION_PLAIN = "rejection (nearest share of prior draws)"
SMC = "ABC-SMC / population Monte Carlo (Toni et al. 2009; Beaumont et al. 2009)"


class ABCError(InputError):
    """Settings or simulator output an ABC algorithm cannot work with."""


@dataclass(frozen=True, eq=False)
class Simulated:
    """What a batch of simulations gave: summaries ``(n, k)`` and latent quantities ``(n, m)``."""

    summaries: np.ndarray
    latent: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))


class BatchSimulator(Protocol):
    """Simulates each row of ``theta`` (shape ``(n, d)``) with its seed; ``labels`` name the simulations."""

    def __call__(self, theta: np.ndarray, seeds: np.ndarray, labels: Sequence[str]) -> Simulated: ...


def pointwise(
    fn: Callable[[np.ndarray, np.random.Generator], np.ndarray | tuple[np.ndarray, np.ndarray]],
) -> BatchSimulator:
    """A batch simulator from ``fn(theta_row, rng) -> summaries`` (or ``-> (summaries, latent)``)."""

    def simulate(theta: np.ndarray, seeds: np.ndarray, labels: Sequence[str]) -> Simulated:
        rows, latents = [], []
        for row, seed in zip(theta, seeds, strict=True):
            out = fn(np.asarray(row, dtype=float), np.random.default_rng(int(seed)))
            summaries, latent = out if isinstance(out, tuple) else (out, np.zeros(0))
            rows.append(np.atleast_1d(np.asarray(summaries, dtype=float)))
            latents.append(np.atleast_1d(np.asarray(latent, dtype=float)))
        return Simulated(np.vstack(rows), np.vstack(latents))

    return simulate


# -- building blocks ------------------------------------------------------------------------------


def stage_rng(seed: int, stage: int) -> np.random.Generator:
    """The algorithm's own generator for one stage (generation, or the predictive stage)."""
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(_PROPOSE, stage)))


def simulation_seeds(seed: int, stage: int, start: int, n: int) -> np.ndarray:
    """Seeds of simulations ``start .. start + n - 1`` of a stage (each from its own spawn key)."""
    return np.array(
        [int(np.random.SeedSequence(seed, spawn_key=(_SIMULATE, stage, i)).generate_state(1)[0]) for i in range(start, start + n)],
        dtype=np.int64,
    )


def stage_label(stage: int) -> str:
    return "predictive" if stage == PREDICTIVE_STAGE else f"gen-{stage}"


def labels_for(stage: int, start: int, n: int) -> list[str]:
    """``gen-<t>/p<i>``: where a simulation belongs (the port adapter makes these run directories)."""
    return [f"{stage_label(stage)}/p{i:06d}" for i in range(start, start + n)]


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


def weighted_covariance(theta: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Sum_i w_i (theta_i - m)(theta_i - m)' with m the weighted mean and the weights summing to 1."""
    w = np.asarray(weights, dtype=float) / np.sum(weights)
    centred = theta - w @ theta
    return (centred * w[:, None]).T @ centred


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


def epanechnikov(d: np.ndarray, h: float) -> np.ndarray:
    """1 - (d/h)^2 inside the tolerance h, 0 outside; every d is 1 when h is 0 (exact matches only)."""
    if h <= 0:
        return (np.asarray(d) <= 0).astype(float)
    return np.clip(1.0 - (np.asarray(d) / h) ** 2, 0.0, None)


def regression_adjust(
    phi: np.ndarray, summaries: np.ndarray, observed: np.ndarray, scale: np.ndarray, weights: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Local-linear adjustment of each column of ``phi``: phi - (s - s_obs)'b, b by weighted least squares.

    Summaries enter scaled (the adjustment itself does not depend on the
    scaling; it only keeps the fit well conditioned). Returns the adjusted
    values and the coefficients ``b`` (one column per column of ``phi``).
    """
    x = (np.asarray(summaries, dtype=float) - observed) / scale
    keep = weights > 0
    if keep.sum() <= x.shape[1] + 1:
        raise ABCError(
            f"the regression adjustment needs more weighted simulations ({int(keep.sum())}) than summaries + 1 "
            f"({x.shape[1] + 1}); simulate more, accept a larger share, or use fewer summaries"
        )
    design = np.column_stack([np.ones(int(keep.sum())), x[keep]])
    root = np.sqrt(weights[keep])[:, None]
    # lstsq gives the minimum-norm fit when a summary does not vary among the kept draws.
    coef, *_ = np.linalg.lstsq(design * root, phi[keep] * root, rcond=None)
    beta = coef[1:]
    return phi - x @ beta, beta


def latent_scale(latent: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Latent columns that never go below 0 are adjusted on log(1 + y), so adjusted counts stay >= 0."""
    nonnegative = (latent >= 0).all(axis=0) if latent.size else np.zeros(latent.shape[1], dtype=bool)
    return np.where(nonnegative, np.log1p(np.maximum(latent, 0)), latent), nonnegative


# -- results -------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ReferenceTable:
    """Every prior draw of a stage and what its simulation gave, kept or not.

    Rejection ABC reads it whole; the self-check (:mod:`abm.calibration.self_check`)
    takes its rows in turn as pseudo-observed data with known parameters.
    """

    theta: np.ndarray  # (n, d) as drawn from the prior
    summaries: np.ndarray  # (n, k)
    latent: np.ndarray  # (n, m)
    labels: tuple[str, ...]

    @property
    def size(self) -> int:
        return int(self.theta.shape[0])

    def without(self, i: int) -> "ReferenceTable":
        """The table less row ``i`` (leave-one-out)."""
        keep = np.arange(self.size) != i
        return ReferenceTable(
            self.theta[keep], self.summaries[keep], self.latent[keep], tuple(l for l, k in zip(self.labels, keep) if k)
        )


@dataclass(frozen=True, eq=False)
class Generation:
    """One population of an ABC run (rejection has one), with what it took to make it."""

    index: int
    epsilon: float
    simulations: int
    theta: np.ndarray  # (N, d); adjusted values in a regression-adjusted rejection
    weights: np.ndarray  # (N,), summing to 1
    distances: np.ndarray  # (N,)
    summaries: np.ndarray  # (N, k) simulated summaries of the kept particles
    latent: np.ndarray  # (N, m)
    labels: tuple[str, ...]  # the simulations the particles came from
    scale: np.ndarray  # (k,) the distance's scale
    theta_raw: np.ndarray | None = None  # before the regression adjustment
    latent_raw: np.ndarray | None = None
    reference: ReferenceTable | None = None  # generation 0: every prior draw, kept or not

    @property
    def accepted(self) -> int:
        return int(self.theta.shape[0])

    @property
    def ess(self) -> float:
        return effective_sample_size(self.weights)


@dataclass(frozen=True, eq=False)
class ABCPosterior:
    """A weighted sample from an ABC posterior, with every generation that led to it."""

    method: str
    names: tuple[str, ...]
    summary_names: tuple[str, ...]
    latent_names: tuple[str, ...]
    observed: np.ndarray
    generations: tuple[Generation, ...]
    level: float = 0.9
    stopped: str = ""  # why the algorithm stopped before its last generation, if it did

    @property
    def final(self) -> Generation:
        return self.generations[-1]

    @property
    def theta(self) -> np.ndarray:
        return self.final.theta

    @property
    def weights(self) -> np.ndarray:
        return self.final.weights

    @property
    def latent(self) -> np.ndarray:
        return self.final.latent

    def diagnostics(self) -> pd.DataFrame:
        """One row per generation: tolerance, simulations, accepted, acceptance rate, effective sample size."""
        return pd.DataFrame(
            {
                "generation": [g.index for g in self.generations],
                "epsilon": [g.epsilon for g in self.generations],
                "simulations": [g.simulations for g in self.generations],
                "accepted": [g.accepted for g in self.generations],
                "acceptance_rate": [g.accepted / g.simulations if g.simulations else math.nan for g in self.generations],
                "ess": [g.ess for g in self.generations],
            }
        )

    def sample_frame(self) -> pd.DataFrame:
        """The final particles: parameters, latent quantities, weight, distance and simulation label."""
        frame = pd.DataFrame(self.theta, columns=list(self.names))
        for j, name in enumerate(self.latent_names):
            frame[name] = self.latent[:, j]
        frame["weight"] = self.weights
        frame["distance"] = self.final.distances
        frame["simulation"] = list(self.final.labels)
        return frame

    def to_frame(self) -> pd.DataFrame:
        """Posterior mean, SD and equal-tailed credible interval of every parameter and latent quantity."""
        rows = []
        lo, hi = (1 - self.level) / 2, 1 - (1 - self.level) / 2
        columns = [(n, self.theta[:, j], "parameter") for j, n in enumerate(self.names)]
        columns += [(n, self.latent[:, j], "latent") for j, n in enumerate(self.latent_names)]
        for name, values, kind in columns:
            mean = float(np.average(values, weights=self.weights))
            sd = float(np.sqrt(np.average((values - mean) ** 2, weights=self.weights)))
            low, high = weighted_quantile(values, self.weights, [lo, hi])
            rows.append(
                {"quantity": name, "kind": kind, "mean": mean, "sd": sd, "low": float(low), "high": float(high), "level": self.level}
            )
        return pd.DataFrame(rows)

    def summary(self) -> str:
        """The posterior table and the diagnostics, in words."""
        final = self.final
        lines = [
            f"{self.method}: {final.accepted} particles, effective sample size {final.ess:.0f}, "
            f"{sum(g.simulations for g in self.generations)} simulations in {len(self.generations)} generation(s).",
        ]
        if self.stopped:
            lines.append(f"Stopped early: {self.stopped}.")
        table = self.to_frame()
        width = max(len("quantity"), *(len(q) for q in table["quantity"]))
        lines += ["", f"  {'quantity':<{width}}  {'mean':>10}  {'sd':>10}  {f'{self.level:.0%} interval':>24}"]
        for row in table.itertuples():
            interval = f"[{row.low:.4g}, {row.high:.4g}]"
            lines.append(f"  {row.quantity:<{width}}  {row.mean:>10.4g}  {row.sd:>10.4g}  {interval:>24}")
        diag = self.diagnostics()
        lines += ["", "  generation  epsilon     simulations  accepted  acceptance  ESS"]
        for row in diag.itertuples():
            lines.append(
                f"  {row.generation:>10}  {row.epsilon:<10.4g}  {row.simulations:>11}  {row.accepted:>8}  "
                f"{row.acceptance_rate:>10.3f}  {row.ess:.0f}"
            )
        return "\n".join(lines)


# -- simulating a stage ------------------------------------------------------------------------


def simulate_stage(
    simulate: BatchSimulator, theta: np.ndarray, seed: int, stage: int, start: int, k: int
) -> tuple[Simulated, list[str]]:
    labels = labels_for(stage, start, theta.shape[0])
    out = simulate(theta, simulation_seeds(seed, stage, start, theta.shape[0]), labels)
    summaries = np.asarray(out.summaries, dtype=float)
    if summaries.shape != (theta.shape[0], k):
        raise ABCError(f"the simulator returned summaries of shape {summaries.shape}; expected {(theta.shape[0], k)}")
    if not np.isfinite(summaries).all():
        raise ABCError("the simulator returned missing or infinite summaries")
    latent = np.asarray(out.latent, dtype=float)
    if latent.size == 0:
        latent = np.zeros((theta.shape[0], 0))
    return Simulated(summaries, latent), labels


# -- ABC-SMC -------------------------------------------------------------------------------------


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


# -- posterior predictive -----------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class PredictiveCheck:
    """Fresh simulations at posterior draws: their summaries against the observed ones, and latent quantities."""

    summary_names: tuple[str, ...]
    latent_names: tuple[str, ...]
    observed: np.ndarray
    theta: np.ndarray  # (P, d) the posterior draws simulated
    summaries: np.ndarray  # (P, k)
    latent: np.ndarray  # (P, m)
    labels: tuple[str, ...]
    level: float = 0.9

    def to_frame(self) -> pd.DataFrame:
        """Per summary: observed value, predictive mean and interval, and the two-sided predictive tail share."""
        lo, hi = (1 - self.level) / 2, 1 - (1 - self.level) / 2
        rows = []
        for j, name in enumerate(self.summary_names):
            sims, obs = self.summaries[:, j], float(self.observed[j])
            tail = 2 * min(np.mean(sims >= obs), np.mean(sims <= obs))
            low, high = np.quantile(sims, [lo, hi])
            rows.append(
                {
                    "summary": name,
                    "observed": obs,
                    "predictive_mean": float(sims.mean()),
                    "low": float(low),
                    "high": float(high),
                    "inside": bool(low <= obs <= high),
                    "tail_p": float(min(1.0, tail)),
                }
            )
        return pd.DataFrame(rows)

    def latent_frame(self) -> pd.DataFrame:
        """Latent quantities of the fresh simulations: mean and interval (a new period like the observed one)."""
        lo, hi = (1 - self.level) / 2, 1 - (1 - self.level) / 2
        rows = []
        for j, name in enumerate(self.latent_names):
            values = self.latent[:, j]
            low, high = np.quantile(values, [lo, hi])
            rows.append({"quantity": name, "mean": float(values.mean()), "low": float(low), "high": float(high)})
        return pd.DataFrame(rows)

    def summary(self) -> str:
        table = self.to_frame()
        inside = int(table["inside"].sum())
        lines = [
            f"Posterior predictive check: {self.theta.shape[0]} fresh simulations at posterior draws; "
            f"{inside} of {len(table)} observed summaries inside their {self.level:.0%} predictive interval."
        ]
        width = max(len("summary"), *(len(s) for s in table["summary"]))
        lines.append(f"  {'summary':<{width}}  {'observed':>10}  {'predicted':>10}  {'interval':>20}  tail p")
        for row in table.itertuples():
            flag = "" if row.inside else "  <- outside"
            interval = f"[{row.low:.4g}, {row.high:.4g}]"
            lines.append(
                f"  {row.summary:<{width}}  {row.observed:>10.4g}  {row.predictive_mean:>10.4g}  {interval:>20}  "
                f"{row.tail_p:.2f}{flag}"
            )
        return "\n".join(lines)


def predictive_check(
    simulate: BatchSimulator, posterior: ABCPosterior, draws: int, *, seed: int
) -> PredictiveCheck:
    """Simulate ``draws`` posterior draws (resampled by weight) with fresh seeds."""
    if draws < 1:
        raise ABCError(f"predictive draws: expected at least 1, got {draws}")
    rng = stage_rng(seed, PREDICTIVE_STAGE)
    pick = rng.choice(posterior.theta.shape[0], size=draws, p=posterior.weights)
    theta = posterior.theta[pick]
    sims, labels = simulate_stage(simulate, theta, seed, PREDICTIVE_STAGE, 0, posterior.observed.size)
    return PredictiveCheck(
        summary_names=posterior.summary_names,
        latent_names=column_names(posterior.latent_names, sims.latent.shape[1], "z"),
        observed=posterior.observed,
        theta=theta,
        summaries=sims.summaries,
        latent=sims.latent,
        labels=tuple(labels),
        level=posterior.level,
    )


# -- helpers -------------------------------------------------------------------------------------


def observed_vector(observed: Sequence[float]) -> np.ndarray:
    s_obs = np.atleast_1d(np.asarray(observed, dtype=float))
    if s_obs.ndim != 1 or s_obs.size == 0 or not np.isfinite(s_obs).all():
        raise ABCError("observed summaries: expected a non-empty vector of finite numbers")
    return s_obs


def column_names(names: Sequence[str], n: int, stem: str) -> tuple[str, ...]:
    if names and len(names) == n:
        return tuple(names)
    if names and len(names) != n:
        raise ABCError(f"{len(names)} names given for {n} columns")
    return tuple(f"{stem}{i}" for i in range(n))
