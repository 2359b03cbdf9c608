"""Rejection ABC, with the local-linear regression adjustment of Beaumont, Zhang & Balding (2002).

:func:`rejection_abc` draws from the prior, simulates every draw and hands the
resulting :class:`~abm.calibration.abc.posterior.ReferenceTable` to
:func:`rejection_from_table`, which keeps the nearest share and adjusts it.
The self-check (:mod:`abm.calibration.self_check`) calls the same function on
the same table with one row left out, so what it measures is this method.

Draw from the prior, simulate, keep the share ``accept`` of draws closest to
the observed summaries; the tolerance h is the first rejected distance.
Epanechnikov weights K = 1 - (d/h)^2 and a weighted least-squares fit
phi_i = a + (s_i - s_obs)'b on the kept draws (phi: each parameter on its
prior's transform scale) give adjusted values phi_i* = phi_i - (s_i - s_obs)'b.
Latent quantities are adjusted with the same regression.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from ..priors import PriorSet
from .distance import distances, mad_scale
from .posterior import ABCPosterior, Generation, ReferenceTable
from .seeds import stage_rng
from .simulation import ABCError, BatchSimulator, column_names, observed_vector, simulate_stage

REJECTION = "rejection with local-linear regression adjustment (Beaumont, Zhang & Balding 2002)"
REJECTION_PLAIN = "rejection (nearest share of prior draws)"


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
