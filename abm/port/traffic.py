"""One day's vehicles: a non-homogeneous Poisson arrival stream with classes and stops."""

from __future__ import annotations

from dataclasses import dataclass

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

    @property
    def size(self) -> int:
        return int(self.arrival.shape[0])


def generate_traffic(layout: Layout, day: int, traffic_rng: np.random.Generator, stop_rng: np.random.Generator) -> DayTraffic:
    """Draw a day's arrivals: Poisson counts per hour, uniform minutes within the hour.

    Hourly counts with uniform times inside each hour are exactly a Poisson
    process with a piecewise-constant rate. Day 0 is a Monday.
    """
    rate = layout.hourly_rate * layout.weekday_factor[day % 7]
    counts = traffic_rng.poisson(rate)
    n = int(counts.sum())
    hour = np.repeat(np.arange(24), counts)
    minute = np.sort(hour * 60.0 + traffic_rng.random(n) * 60.0)
    classes = traffic_rng.choice(layout.n_classes, size=n, p=layout.class_share)
    # Stop draws come from their own stream so that traffic does not depend on boarding geography.
    stops = stop_rng.random((layout.point_stop_share.shape[0], n)) < layout.point_stop_share[:, classes]
    return DayTraffic(day=day, arrival=day * MINUTES_PER_DAY + minute, vehicle_class=classes, stops=stops)
