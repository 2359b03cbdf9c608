"""Rejection ABC, with the local-linear regression adjustment of Beaumont, Zhang & Balding (2002).

:func:`rejection_abc` draws from the prior, simulates every draw and hands the
resulting :class:`~abm.calibration.abc.ReferenceTable` to
:func:`rejection_from_table`, which keeps the nearest share and adjusts it.
The self-check (:mod:`abm.calibration.self_check`) calls the same function on
the same table with one row left out, so what it measures is this method.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from .abc import (
    REJECTION,
    REJECTION_PLAIN,
    ABCError,
    ABCPosterior,
    BatchSimulator,
    Generation,
    ReferenceTable,
    column_names,
    distances,
    epanechnikov,
    latent_scale,
    mad_scale,
    observed_vector,
    regression_adjust,
    simulate_stage,
    stage_rng,
)
from .priors import PriorSet


def kept_count(accept: float, draws: int) -> int:
    """How many of ``draws`` a rejection keeping the share ``accept`` keeps."""
    return max(1, math.ceil(accept * draws))


def rejection_from_table(
    table: ReferenceTable,
    priors: PriorSet,
    observed: np.ndarray,
    scale: np.ndarray,
    *,
    keep: int,
    regression: bool,
) -> Generation:
    """Keep the ``keep`` draws of ``table`` nearest ``observed``; with ``regression``, adjust them.

    The tolerance h is the first rejected distance; Epanechnikov weights
    1 - (d/h)^2 weight the kept draws, and the adjustment works on each
    prior's transform scale (latent counts on log(1 + y)), so adjusted values
    stay inside the support.
    """
    draws = table.size
    d = distances(table.summaries, observed, scale)
    n = min(keep, draws)
    order = np.argsort(d, kind="stable")
    kept = order[:n]
    h = float(d[order[n]]) if n < draws else float(d[kept[-1]]) * (1 + 1e-9)
    weights = epanechnikov(d[kept], h) if regression else np.ones(n)
    if weights.sum() <= 0:
        weights = np.ones(n)
    weights = weights / weights.sum()
    raw_theta, raw_latent = table.theta[kept], table.latent[kept]
    adj_theta, adj_latent = raw_theta, raw_latent
    if regression:
        adj_phi, _ = regression_adjust(priors.to_scale(raw_theta), table.summaries[kept], observed, scale, weights)
        adj_theta = priors.from_scale(adj_phi)
        if raw_latent.shape[1]:
            z, nonneg = latent_scale(raw_latent)
            adj_z, _ = regression_adjust(z, table.summaries[kept], observed, scale, weights)
            adj_latent = np.where(nonneg, np.expm1(adj_z), adj_z)
    return Generation(
        index=0,
        epsilon=h,
        simulations=draws,
        theta=adj_theta,
        weights=weights,
        distances=d[kept],
        summaries=table.summaries[kept],
        latent=adj_latent,
        labels=tuple(table.labels[i] for i in kept),
        scale=scale,
        theta_raw=raw_theta if regression else None,
        latent_raw=raw_latent if regression else None,
        reference=table,
    )


def rejection_abc(
    simulate: BatchSimulator,
    priors: PriorSet,
    observed: Sequence[float],
    *,
    draws: int,
    accept: float,
    seed: int,
    regression: bool = True,
    summary_names: Sequence[str] = (),
    latent_names: Sequence[str] = (),
    scale: np.ndarray | None = None,
    level: float = 0.9,
) -> ABCPosterior:
    """Rejection ABC, with the Beaumont, Zhang & Balding (2002) regression adjustment unless ``regression`` is False.

    ``accept`` is the share of the ``draws`` prior draws kept; ``scale``
    defaults to the median absolute deviation of the prior-predictive summaries.
    """
    s_obs = observed_vector(observed)
    if draws < 2:
        raise ABCError(f"draws: expected at least 2, got {draws}")
    if not 0 < accept <= 1:
        raise ABCError(f"accept: expected a share in (0, 1], got {accept}")
    theta = priors.sample(stage_rng(seed, 0), draws)
    sims, labels = simulate_stage(simulate, theta, seed, 0, 0, s_obs.size)
    table = ReferenceTable(theta, sims.summaries, sims.latent, tuple(labels))
    scale = mad_scale(sims.summaries) if scale is None else np.asarray(scale, dtype=float)
    generation = rejection_from_table(table, priors, s_obs, scale, keep=kept_count(accept, draws), regression=regression)
    return posterior_of(generation, priors, s_obs, regression, summary_names, latent_names, level)


def posterior_of(
    generation: Generation,
    priors: PriorSet,
    observed: np.ndarray,
    regression: bool,
    summary_names: Sequence[str] = (),
    latent_names: Sequence[str] = (),
    level: float = 0.9,
) -> ABCPosterior:
    """The posterior of a rejection calibration whose one generation is ``generation``."""
    return ABCPosterior(
        method=REJECTION if regression else REJECTION_PLAIN,
        names=priors.names,
        summary_names=column_names(summary_names, observed.size, "s"),
        latent_names=column_names(latent_names, generation.latent.shape[1], "z"),
        observed=observed,
        generations=(generation,),
        level=level,
    )
