"""One day's vehicles: a non-homogeneous Poisson arrival stream with classes, stops and cargo."""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from .layout import Layout

MINUTES_PER_DAY = 1440.0


@dataclass
class DayTraffic:
    """The vehicles arriving on one day, as arrays in arrival order."""

    day: int
    arrival: np.ndarray  # absolute minute (day * 1440 + minute of day), ascending
    vehicle_class: np.ndarray  # class index
    stops: np.ndarray  # (P, n) bool: the vehicle stops at boarding point p
    cargo: np.ndarray | None = None  # cargo index (Layout.cargo_names); None when drawn without a cargo stream

    @property
    def size(self) -> int:
        return int(self.arrival.shape[0])


def generate_traffic(
    layout: Layout,
    day: int,
    traffic_rng: np.random.Generator,
    stop_rng: np.random.Generator,
    cargo_rng: np.random.Generator | None = None,
) -> DayTraffic:
    """Draw a day's arrivals: Poisson counts per hour, uniform minutes within the hour.

    Hourly counts with uniform times inside each hour are exactly a Poisson
    process with a piecewise-constant rate. Day 0 is a Monday. With
    ``cargo_rng`` each vehicle also gets a cargo type from its class's shares.
    """
    rate = layout.hourly_rate * layout.weekday_factor[day % 7]
    counts = traffic_rng.poisson(rate)
    n = int(counts.sum())
    hour = np.repeat(np.arange(24), counts)
    minute = np.sort(hour * 60.0 + traffic_rng.random(n) * 60.0)
    classes = draw_classes(layout.class_share, traffic_rng.random(n))
    # Stop draws come from their own stream so that traffic does not depend on boarding geography.
    stops = stop_rng.random((layout.point_stop_share.shape[0], n)) < layout.point_stop_share[:, classes]
    cargo = draw_cargo(layout, classes, cargo_rng) if cargo_rng is not None else None
    return DayTraffic(day=day, arrival=day * MINUTES_PER_DAY + minute, vehicle_class=classes, stops=stops, cargo=cargo)


def draw_classes(share: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Vehicle classes from one uniform each: exactly ``Generator.choice(len(share), p=share)`` on those uniforms.

    NumPy's choice with probabilities normalises the cumulative shares and
    searches them (numpy/random/_generator.pyx); doing the same here skips its
    checks of ``p``, which cost more than the draw, and keeps the same classes.
    """
    cdf = share.cumsum()
    cdf /= cdf[-1]
    return cdf.searchsorted(u, side="right").astype(np.int64)


def draw_cargo(layout: Layout, vehicle_class: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """One uniform per vehicle (fixed consumption) turned into a cargo type by its class's cumulative shares."""
    return _cargo_of(rng.random(vehicle_class.shape[0]), vehicle_class, layout.class_cargo_cum)


@numba.njit(cache=True)
def _cargo_of(u: np.ndarray, vehicle_class: np.ndarray, cum: np.ndarray) -> np.ndarray:
    """The first cargo type whose cumulative share exceeds u (the last type at most)."""
    cargo = np.empty(u.shape[0], dtype=np.int64)
    last = cum.shape[1] - 1
    for i in range(u.shape[0]):
        k = 0
        while k < last and cum[vehicle_class[i], k] <= u[i]:
            k += 1
        cargo[i] = k
    return cargo
