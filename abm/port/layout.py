"""A world turned into index arrays, once, so the day engine never touches names.

Classes, bands, points, stations and methods become integer indices; per-class
and per-band tables become numpy arrays. Everything here is derived from the
validated :class:`~abm.world.schema.World` and is read-only.

Conditions that change how methods work (weather, cargo, concealment depth,
fatigue) become factor tables that are exactly 1 (or the method's own value)
where a world configures nothing, so such a world runs as if they did not exist.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..world.references import hours_of
from ..world.schema import DEFAULT_KEY, MONTHS, World

RULES = ("all", "fraction", "targeted", "queue_aware")
DISTS = ("exponential", "deterministic", "lognormal", "gamma", "uniform")
DEPARTURE = -1  # a boarding point after every station
UNSTATED = ""  # the weather of a world without weather, the cargo of a class without cargo shares
MONTH_DAYS = (31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31)
MONTH_OF_YEAR_DAY = np.repeat(np.arange(12), MONTH_DAYS)  # (365,) month index of each day of the year


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
    # conditions of the day
    weather_names: tuple[str, ...]  # (W,)
    weather_cum: np.ndarray  # (12, W) cumulative share of days per month
    weather_start_day: int  # day of the 365-day year that day 0 is
    weather_suspends: np.ndarray  # (W,) bool: outdoor methods stop
    method_outdoor: np.ndarray  # (M,) bool
    method_false_alarm_weather: np.ndarray  # (M, W)
    # cargo
    cargo_names: tuple[str, ...]  # (K,)
    class_cargo_cum: np.ndarray  # (C, K) cumulative cargo shares per class
    method_cargo_detect: np.ndarray  # (M, K) detection multiplier
    method_cargo_false: np.ndarray  # (M, K) false-alarm multiplier
    method_service_factor: np.ndarray  # (M, C, K) service-time multiplier
    # concealment depth
    depth_names: tuple[str, ...]  # (D,)
    depth_hazard: np.ndarray  # (D,) hazard added for hiding at this depth (for the behaviour layer)
    method_depth_detect: np.ndarray  # (M, D) detection multiplier
    # fatigue (inf where a method has none)
    method_fatigue_decay: np.ndarray  # (M,) minutes
    method_work_minutes: np.ndarray  # (M,)
    method_rest_minutes: np.ndarray  # (M,)
    station_suspended_method: np.ndarray  # (S,) method index or -1 (vehicles pass unchecked)


def _per_class(table: dict[str, float], classes: list[str], fallback: float) -> np.ndarray:
    default = table.get(DEFAULT_KEY, fallback)
    return np.array([table.get(c, default) for c in classes], dtype=float)


def _weather_tables(world: World) -> tuple[tuple[str, ...], np.ndarray, int, np.ndarray]:
    """Weather state names, cumulative shares per month, day of year of day 0, suspending states."""
    weather = world.weather
    if weather is None:
        return (UNSTATED,), np.ones((12, 1)), 0, np.zeros(1, dtype=bool)
    states = weather.states
    default = weather.months.get(DEFAULT_KEY, {})
    shares = np.array([[weather.months.get(m, default).get(w, 0.0) for w in states] for m in MONTHS])
    cum = np.cumsum(shares, axis=1)
    cum[:, -1] = 1.0  # shares sum to 1 within 1e-6: no uniform draw may fall past the last state
    start = int(sum(MONTH_DAYS[: weather.start_month - 1]))
    suspends = np.array([w in weather.suspend_outdoor for w in states])
    return tuple(states), cum, start, suspends


def _cargo_tables(world: World, cargo: list[str]) -> np.ndarray:
    """Cumulative cargo shares per class; a class without shares carries unstated cargo (the last column)."""
    shares = np.zeros((len(world.vehicle_classes), len(cargo)))
    for c, vclass in enumerate(world.vehicle_classes):
        if vclass.cargo:
            shares[c] = [vclass.cargo.get(k, 0.0) for k in cargo]
        else:
            shares[c, cargo.index(UNSTATED)] = 1.0
    cum = np.cumsum(shares, axis=1)
    cum[:, -1] = 1.0
    return cum


def _selection_tables(world: World, band_of_hour: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each station's selection share by hour and class, normally and when its queue is long: (stations, 24, classes)."""
    classes, bands = world.class_names, world.band_names
    n_s, n_c = len(world.stations), len(classes)
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
    return fraction, busy


def _method_cargo_tables(world: World, cargo: list[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per method and cargo: detection and false-alarm factors; per method, class and cargo: the service factor."""
    methods, classes = world.methods, world.class_names
    n_m = len(methods)
    cargo_detect = np.ones((n_m, len(cargo)))
    cargo_false = np.ones((n_m, len(cargo)))
    service_factor = np.ones((n_m, len(classes), len(cargo)))
    for i, m in enumerate(methods):
        for k, name in enumerate(cargo):
            if name in m.cargo:
                cargo_detect[i, k] = m.cargo[name].detection_factor
                cargo_false[i, k] = m.cargo[name].false_alarm_factor
        by_class = _per_class(m.service.class_factor, classes, 1.0)
        cargo_default = m.service.cargo_factor.get(DEFAULT_KEY, 1.0)
        by_cargo = np.array([m.service.cargo_factor.get(k, cargo_default) for k in cargo])
        service_factor[i] = by_class[:, None] * by_cargo[None, :]
    return cargo_detect, cargo_false, service_factor


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

    fraction, busy = _selection_tables(world, band_of_hour)

    points = world.boarding_points
    interdiction = np.array([[p.interdiction.get(b, p.interdiction.get(DEFAULT_KEY, 0.0)) for b in bands] for p in points])

    weather_names, weather_cum, weather_start, weather_suspends = _weather_tables(world)
    cargo = world.cargo_names
    if not cargo or any(not c.cargo for c in world.vehicle_classes):
        cargo = cargo + [UNSTATED]
    depths = world.depth_names
    n_m = len(methods)
    false_weather = np.array(
        [[m.weather[w].false_alarm if w in m.weather else m.false_alarm for w in weather_names] for m in methods]
    )
    cargo_detect, cargo_false, service_factor = _method_cargo_tables(world, cargo)
    fatigue = [
        (m.fatigue.decay_minutes, m.fatigue.work_minutes, m.fatigue.rest_minutes) if m.fatigue else (np.inf,) * 3
        for m in methods
    ]
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
        weather_names=weather_names,
        weather_cum=weather_cum,
        weather_start_day=weather_start,
        weather_suspends=weather_suspends,
        method_outdoor=np.array([m.outdoor for m in methods]),
        method_false_alarm_weather=false_weather.reshape(n_m, len(weather_names)),
        cargo_names=tuple(cargo),
        class_cargo_cum=_cargo_tables(world, cargo),
        method_cargo_detect=cargo_detect,
        method_cargo_false=cargo_false,
        method_service_factor=service_factor,
        depth_names=tuple(depths),
        depth_hazard=np.array([d.hazard for d in world.depths]),
        method_depth_detect=np.array([[m.depth_factor.get(d, 1.0) for d in depths] for m in methods]),
        method_fatigue_decay=np.array([f[0] for f in fatigue]),
        method_work_minutes=np.array([f[1] for f in fatigue]),
        method_rest_minutes=np.array([f[2] for f in fatigue]),
        station_suspended_method=np.array(
            [m_index[s.suspended_method] if s.suspended_method else -1 for s in world.stations], dtype=np.int64
        ),
    )
