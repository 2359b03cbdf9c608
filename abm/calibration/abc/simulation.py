"""The simulator's interface, and one stage's simulations checked on the way back.

Nothing in :mod:`abm.calibration.abc` knows the port model. A simulator is a
function from parameter vectors to summary statistics (a :class:`BatchSimulator`:
a batch of parameter rows, one seed and one label per row, in; :class:`Simulated`
out); :func:`pointwise` turns a function of one parameter vector into one, so the
algorithms can be checked on toy models with known posteriors. The port-model
adapter (:mod:`abm.calibration.simulator`) runs the same calls through the batch
executors.

A simulator may also return latent quantities: what the data do not show but its
own runs know (crossings, in the port model). They ride along with each particle
(see :mod:`abm.calibration.abc`).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Protocol

import numpy as np

from ...errors import InputError
from .seeds import labels_for, simulation_seeds


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
