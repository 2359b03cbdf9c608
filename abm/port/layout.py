"""A world turned into index arrays, once, so the day engine never touches names.

Classes, bands, points, stations and methods become integer indices; per-class
and per-band tables become numpy arrays. Everything here is derived from the
validated :class:`~abm.world.schema.World` and is read-only.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..world.references import hours_of
from ..world.schema import DEFAULT_KEY, World

RULES = ("all", "fraction", "targeted", "queue_aware")
DISTS = ("exponential", "deterministic", "lognormal", "gamma", "uniform")
DEPARTURE = -1  # a boarding point after every station


@dataclass(frozen=True)
class Layout:
    """Index arrays describing a world's crossing."""

    world: World
    n_classes: int
    class_share: np.ndarray  # (C,)
    class_capacity: np.ndarray  # (C,) people who fit
    class_risk: np.ndarray  # (C,) log risk weight for targeted selection
    band_of_hour: np.ndarray  # (24,) band index of each hour
    hourly_rate: np.ndarray  # (24,) arrivals per hour on a weekday factor of 1
    weekday_factor: np.ndarray  # (7,)
    # methods
    method_dist: np.ndarray  # (M,) index into DISTS
    method_mean: np.ndarray
    method_cv: np.ndarray
    method_spread: np.ndarray
    method_detect: np.ndarray  # (M, C)
    method_false_alarm: np.ndarray  # (M,)
    # stations (route order)
    station_method: np.ndarray  # (S,)
    station_secondary: np.ndarray  # (S,) bool
    station_lanes: np.ndarray  # (S,)
    station_travel: np.ndarray  # (S,)
    station_refer: np.ndarray  # (S,) station index or -1
    station_rule: np.ndarray  # (S,) index into RULES
    station_fraction: np.ndarray  # (S, 24, C) selection chance by hour and class (fraction rules)
    station_busy_fraction: np.ndarray  # (S, 24, C) while busy (queue_aware)
    station_queue_threshold: np.ndarray  # (S,)
    station_fallback: np.ndarray  # (S,) method index or -1
    station_threshold: np.ndarray  # (S,) targeted
    station_noise_sd: np.ndarray  # (S,)
    # boarding points
    point_station: np.ndarray  # (P,) index of the station before which it lies, or DEPARTURE
    point_lead: np.ndarray  # (P,)
    point_stop_share: np.ndarray  # (P, C)
    point_dwell: np.ndarray  # (P, C)
    point_interdiction: np.ndarray  # (P, B) base chance per band
    point_hazard: np.ndarray  # (P,)
    point_effort: np.ndarray  # (P,)
    # departures
    sailing_minute: np.ndarray  # (K,) minute of day, ascending; empty when vehicles leave on clearance
    sailing_capacity: np.ndarray  # (K,)
    cutoff: float
    planned: float


def _per_class(table: dict[str, float], classes: list[str], fallback: float) -> np.ndarray:
    default = table.get(DEFAULT_KEY, fallback)
    return np.array([table.get(c, default) for c in classes], dtype=float)


def build_layout(world: World) -> Layout:
    """Compile a validated world into index arrays."""
    classes, bands = world.class_names, world.band_names
    n_c, n_b = len(classes), len(bands)
    band_of_hour = np.empty(24, dtype=np.int64)
    for b, span in enumerate(world.time_bands.values()):
        band_of_hour[hours_of(span)] = b

    profile = np.asarray(world.traffic.hourly_profile, dtype=float)
    hourly_rate = world.traffic.vehicles_per_day * profile / profile.sum()

    methods = world.methods
    m_index = {m.name: i for i, m in enumerate(methods)}
    s_index = {s.name: i for i, s in enumerate(world.stations)}

    n_s = len(world.stations)
    fraction = np.zeros((n_s, 24, n_c))
    busy = np.zeros((n_s, 24, n_c))
    for s, station in enumerate(world.stations):
        sel = station.selection
        factor = np.array([sel.class_factor.get(c, 1.0) for c in classes])
        by_hour = np.array([sel.fraction_by_band.get(bands[band_of_hour[h]], sel.fraction) for h in range(24)])
        if sel.rule == "all":
            fraction[s] = 1.0
            busy[s] = 1.0
        else:
            fraction[s] = np.clip(by_hour[:, None] * factor[None, :], 0.0, 1.0)
            busy[s] = np.clip(sel.busy_fraction * factor[None, :].repeat(24, 0), 0.0, 1.0)

    points = world.boarding_points
    interdiction = np.array([[p.interdiction.get(b, p.interdiction.get(DEFAULT_KEY, 0.0)) for b in bands] for p in points])
    dep = world.departures
    sailings = dep.sailings if dep else []
    return Layout(
        world=world,
        n_classes=n_c,
        class_share=np.array([c.share for c in world.vehicle_classes]),
        class_capacity=np.array([c.capacity for c in world.vehicle_classes], dtype=np.int64),
        class_risk=np.log(np.array([c.risk_weight for c in world.vehicle_classes])),
        band_of_hour=band_of_hour,
        hourly_rate=hourly_rate,
        weekday_factor=np.asarray(world.traffic.weekday_factors, dtype=float),
        method_dist=np.array([DISTS.index(m.service.dist) for m in methods], dtype=np.int64),
        method_mean=np.array([m.service.mean for m in methods]),
        method_cv=np.array([m.service.cv for m in methods]),
        method_spread=np.array([m.service.spread for m in methods]),
        method_detect=np.array([_per_class(m.detection, classes, 0.0) for m in methods]).reshape(len(methods), n_c),
        method_false_alarm=np.array([m.false_alarm for m in methods]),
        station_method=np.array([m_index[s.method] for s in world.stations], dtype=np.int64),
        station_secondary=np.array([s.role == "secondary" for s in world.stations]),
        station_lanes=np.array([s.lanes for s in world.stations], dtype=np.int64),
        station_travel=np.array([s.travel_minutes for s in world.stations]),
        station_refer=np.array([s_index[s.refer_to] if s.refer_to else -1 for s in world.stations], dtype=np.int64),
        station_rule=np.array([RULES.index(s.selection.rule) for s in world.stations], dtype=np.int64),
        station_fraction=fraction,
        station_busy_fraction=busy,
        station_queue_threshold=np.array([s.selection.queue_threshold for s in world.stations], dtype=np.int64),
        station_fallback=np.array(
            [m_index[s.selection.fallback_method] if s.selection.fallback_method else -1 for s in world.stations],
            dtype=np.int64,
        ),
        station_threshold=np.array([s.selection.threshold for s in world.stations]),
        station_noise_sd=np.array([s.selection.noise_sd for s in world.stations]),
        point_station=np.array(
            [DEPARTURE if p.before_station == "departure" else s_index[p.before_station] for p in points],
            dtype=np.int64,
        ),
        point_lead=np.array([p.lead_minutes for p in points]),
        point_stop_share=np.array([[p.stops[c].share if c in p.stops else 0.0 for c in classes] for p in points]),
        point_dwell=np.array([[p.stops[c].dwell_minutes if c in p.stops else 0.0 for c in classes] for p in points]),
        point_interdiction=interdiction.reshape(len(points), n_b),
        point_hazard=np.array([p.hazard for p in points]),
        point_effort=np.array([p.effort for p in points]),
        sailing_minute=np.array([s.minute for s in sailings], dtype=float),
        sailing_capacity=np.array([s.capacity for s in sailings], dtype=np.int64),
        cutoff=dep.cutoff_minutes if dep else 0.0,
        planned=dep.planned_minutes if dep else 0.0,
    )
