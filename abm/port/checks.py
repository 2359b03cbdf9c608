"""Check methods: service-time draws and the per-vehicle random numbers a station uses.

Every station draws the same arrays for every vehicle of the day, checked or
not, so the random numbers a vehicle meets do not depend on the policy: with
common random numbers a changed selection rule changes only what it should.
Durations of the method a station uses while its own is suspended come from a
second per-station stream, so configuring one shifts none of the numbers above.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .layout import DISTS, Layout


def sample_duration(dist: str, mean: float, cv: float, spread: float, n: int, rng: np.random.Generator) -> np.ndarray:
    """Draw n durations (minutes) from one of :data:`DISTS` with the given mean and shape.

    Arithmetic is done in place on the drawn array (the same operations, operand
    for operand, as the plain expressions in the comments), which spares a
    temporary array per step on a day's few thousand vehicles.
    """
    if dist == "exponential":
        out = rng.standard_exponential(n)
        out *= mean
        return out
    if dist == "deterministic":
        return np.full(n, mean)
    if dist == "lognormal":
        sigma2 = np.log1p(cv * cv)
        out = rng.standard_normal(n)  # exp(log(mean) - sigma2 / 2 + sqrt(sigma2) * z)
        out *= np.sqrt(sigma2)
        out += np.log(mean) - sigma2 / 2
        return np.exp(out, out=out)
    if dist == "gamma":
        shape = 1.0 / (cv * cv)
        return rng.gamma(shape, mean / shape, n)
    out = rng.random(n)  # uniform: mean * (1 + spread * (2u - 1))
    out *= 2.0
    out -= 1.0
    out *= spread
    out += 1.0
    out *= mean
    return out


def sample_service(layout: Layout, method: int, n: int, rng: np.random.Generator) -> np.ndarray:
    """Draw n check durations (minutes) for a method."""
    return sample_duration(DISTS[layout.method_dist[method]], layout.method_mean[method], layout.method_cv[method],
                           layout.method_spread[method], n, rng)


@dataclass
class StationDraws:
    """One station's random numbers for each vehicle of a day, indexed by vehicle."""

    u_select: np.ndarray
    risk_noise: np.ndarray
    service: np.ndarray
    fallback_service: np.ndarray
    u_detect: np.ndarray
    u_false: np.ndarray
    suspended_service: np.ndarray  # durations with the station's replacement method (``service`` when it has none)


def draw_for_station(
    layout: Layout, station: int, n: int, rng: np.random.Generator, conditions_rng: np.random.Generator | None = None
) -> StationDraws:
    """Draw a station's per-vehicle numbers for a day of n vehicles (fixed consumption per n).

    ``conditions_rng`` supplies the replacement method's durations; it is drawn
    every day, whatever the weather, so its consumption is fixed too. Without
    it (a caller that never suspends, such as a bare queue replay) they stay ``service``.
    """
    service = sample_service(layout, layout.station_method[station], n, rng)
    fallback = layout.station_fallback[station]
    fallback_service = sample_service(layout, fallback, n, rng) if fallback >= 0 else service
    draws = StationDraws(
        u_select=rng.random(n),
        risk_noise=rng.standard_normal(n),
        service=service,
        fallback_service=fallback_service,
        u_detect=rng.random(n),
        u_false=rng.random(n),
        suspended_service=service,
    )
    replacement = layout.station_suspended_method[station]
    if replacement >= 0 and conditions_rng is not None:
        draws.suspended_service = sample_service(layout, replacement, n, conditions_rng)
    return draws
