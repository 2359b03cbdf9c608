"""Checks that need the whole world: names referenced across sections, route order, coverage.

Each check raises :class:`ReferenceProblem` with the key path of the offending
value so the loader can report ``file: key.path: what was expected``.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterable

from .schema import DEFAULT_KEY, MONTHS, World, covers_no_hour


class ReferenceProblem(ValueError):
    """A value that names something the world does not define, or breaks a whole-world rule."""

    def __init__(self, path: str, message: str) -> None:
        super().__init__(message)
        self.path = path
        self.message = message


def hours_of(span: tuple[int, int]) -> list[int]:
    """Hours covered by a [start, end) span on a 24-hour clock; end < start wraps past midnight."""
    start, end = span
    if start < end:
        return list(range(start, end))
    return list(range(start, 24)) + list(range(0, end))


def _require(name: str, known: Iterable[str], path: str, what: str) -> None:
    known = list(known)
    if name not in known:
        # A near-miss is usually a typo: name the likely intended entry first.
        close = difflib.get_close_matches(name, known, n=1, cutoff=0.6)
        hint = f"; did you mean '{close[0]}'?" if close else ""
        raise ReferenceProblem(path, f"'{name}' is not a defined {what}{hint} (defined: {', '.join(known)})")


def _unique(names: list[str], path: str, what: str) -> None:
    seen: set[str] = set()
    for i, name in enumerate(names):
        if name in seen:
            raise ReferenceProblem(f"{path}[{i}].name", f"{what} '{name}' is defined twice")
        seen.add(name)


def _check_lengths(world: World) -> None:
    """Departures measured in metres need every vehicle class's length."""
    dep = world.departures
    if dep is None or not (dep.length_metres is not None
                           or any(e.length_metres is not None for e in [*dep.services, *dep.timetable])):
        return
    for i, c in enumerate(world.vehicle_classes):
        if c.length_metres is None:
            raise ReferenceProblem(f"vehicle_classes[{i}].length_metres",
                                   f"departures carry metres of vehicles, so class '{c.name}' needs its length_metres")


def check_references(world: World) -> None:
    """Raise ReferenceProblem for the first cross-section rule the world breaks."""
    _unique(world.class_names, "vehicle_classes", "vehicle class")
    _unique(world.method_names, "methods", "check method")
    _unique(world.station_names, "stations", "station")
    _unique(world.point_names, "boarding_points", "boarding point")
    _unique([t.name for t in world.roster.teams], "roster.teams", "team")
    _unique(world.depth_names, "depths", "depth level")
    _check_bands(world)
    _check_weather(world)
    _check_lengths(world)
    _check_methods(world)
    _check_stations(world)
    _check_points(world)
    _check_teams(world)
    _check_lanes_fit(world)
    _check_staffed(world)
    _check_adversary(world)


def _check_methods(world: World) -> None:
    """Each method's detection chances name known classes, or give a default for the rest."""
    classes = world.class_names
    for i, method in enumerate(world.methods):
        for key in method.detection:
            if key != DEFAULT_KEY:
                _require(key, classes, f"methods[{i}].detection.{key}", "vehicle class")
        missing = [c for c in classes if c not in method.detection]
        if missing and DEFAULT_KEY not in method.detection:
            raise ReferenceProblem(
                f"methods[{i}].detection",
                f"no detection chance for class '{missing[0]}': give it or a 'default'",
            )
        _check_method_conditions(world, i)


def _check_stations(world: World) -> None:
    """Stations name known methods, bands and classes; referrals go downstream to a secondary station."""
    classes, bands = world.class_names, world.band_names
    names = world.station_names
    for i, station in enumerate(world.stations):
        path = f"stations[{i}]"
        _require(station.method, world.method_names, f"{path}.method", "check method")
        sel = station.selection
        for key in sel.fraction_by_band:
            _require(key, bands, f"{path}.selection.fraction_by_band.{key}", "time band")
        for key in sel.class_factor:
            _require(key, classes, f"{path}.selection.class_factor.{key}", "vehicle class")
        if sel.fallback_method is not None:
            _require(sel.fallback_method, world.method_names, f"{path}.selection.fallback_method", "check method")
        if station.suspended_method is not None:
            _check_suspended_method(world, i)
        if station.refer_to is not None:
            _require(station.refer_to, names, f"{path}.refer_to", "station")
            target = names.index(station.refer_to)
            if world.stations[target].role != "secondary":
                raise ReferenceProblem(
                    f"{path}.refer_to",
                    f"expected a secondary station, but '{station.refer_to}' has role "
                    f"{world.stations[target].role}",
                )
            if target <= i:
                raise ReferenceProblem(
                    f"{path}.refer_to", f"'{station.refer_to}' must lie downstream of '{station.name}' on the route"
                )
        if station.role == "secondary" and station.refer_to is not None:
            raise ReferenceProblem(f"{path}.refer_to", "a secondary station cannot refer vehicles on")
    if world.stations[0].role != "primary":
        raise ReferenceProblem("stations[0].role", "the first station on the route must be primary")
    for i, station in enumerate(world.stations):
        if station.role == "secondary" and not any(s.refer_to == station.name for s in world.stations):
            raise ReferenceProblem(f"stations[{i}].name", f"secondary station '{station.name}' receives no referrals")


def _check_points(world: World) -> None:
    """Boarding points lie before a primary station or at departure and name known classes and bands."""
    classes, bands, names = world.class_names, world.band_names, world.station_names
    primaries = [s.name for s in world.stations if s.role == "primary"]
    for i, point in enumerate(world.boarding_points):
        path = f"boarding_points[{i}]"
        if point.before_station != "departure":
            if point.before_station in names and point.before_station not in primaries:
                # Defined, but a secondary station is not on every vehicle's route.
                raise ReferenceProblem(
                    f"{path}.before_station",
                    f"expected a primary station or 'departure', but '{point.before_station}' is secondary",
                )
            _require(point.before_station, primaries + ["departure"], f"{path}.before_station", "primary station")
        for key in point.stops:
            _require(key, classes, f"{path}.stops.{key}", "vehicle class")
        for key in point.interdiction:
            if key != DEFAULT_KEY:
                _require(key, bands, f"{path}.interdiction.{key}", "time band")


def _check_teams(world: World) -> None:
    """Teams staff known stations and patrol known points; only flexible teams have postings, weighted."""
    names = world.station_names
    for i, team in enumerate(world.roster.teams):
        for key in team.lanes:
            _require(key, names, f"roster.teams[{i}].lanes.{key}", "station")
        for key in team.patrols:
            _require(key, world.point_names, f"roster.teams[{i}].patrols.{key}", "boarding point")
        for j, posting in enumerate(team.postings):
            for key in posting.lanes:
                _require(key, names, f"roster.teams[{i}].postings[{j}].lanes.{key}", "station")
            for key in posting.patrols:
                _require(key, world.point_names, f"roster.teams[{i}].postings[{j}].patrols.{key}", "boarding point")
        if team.postings and not team.flexible:
            raise ReferenceProblem(f"roster.teams[{i}].postings", "only a flexible team can have postings")
        if team.postings and not sum(p.weight for p in team.postings) > 0:
            raise ReferenceProblem(f"roster.teams[{i}].postings", "the weights sum to 0, so randomised command has "
                                   "nothing to draw; give at least one posting a positive weight")


def _check_adversary(world: World) -> None:
    """The adversary's waits and shares, and the displacement areas, name known bands, points, classes, depths."""
    classes, bands = world.class_names, world.band_names
    for key in world.adversary.adaptive.band_waiting:
        _require(key, bands, f"adversary.adaptive.band_waiting.{key}", "time band")
    if world.displacement is not None:
        for area in ("response", "buffer", "control"):
            for j, selector in enumerate(getattr(world.displacement, area)):
                path = f"displacement.{area}[{j}]"
                if selector.point is not None:
                    _require(selector.point, world.point_names, f"{path}.point", "boarding point")
                if selector.band is not None:
                    _require(selector.band, bands, f"{path}.band", "time band")
                if selector.vehicle_class is not None:
                    _require(selector.vehicle_class, classes, f"{path}.vehicle_class", "vehicle class")

    static = world.adversary.static
    for key in static.point_shares:
        _require(key, world.point_names, f"adversary.static.point_shares.{key}", "boarding point")
    for key in static.band_shares:
        _require(key, bands, f"adversary.static.band_shares.{key}", "time band")
    for key in static.class_shares:
        _require(key, classes, f"adversary.static.class_shares.{key}", "vehicle class")
    for key in static.depth_shares:
        _require(key, world.depth_names, f"adversary.static.depth_shares.{key}", "depth level")


def _check_weather(world: World) -> None:
    """Weather states are unique, every month has a distribution over known states."""
    weather = world.weather
    if weather is None:
        return
    _unique_names(weather.states, "weather.states", "weather state")
    for month, shares in weather.months.items():
        if month != DEFAULT_KEY:
            _require(month, MONTHS, f"weather.months.{month}", "month")
        for state in shares:
            _require(state, weather.states, f"weather.months.{month}.{state}", "weather state")
    if DEFAULT_KEY not in weather.months:
        missing = [m for m in MONTHS if m not in weather.months]
        if missing:
            raise ReferenceProblem("weather.months", f"no weather shares for '{missing[0]}': give it or a 'default'")
    for j, state in enumerate(weather.suspend_outdoor):
        _require(state, weather.states, f"weather.suspend_outdoor[{j}]", "weather state")


def _unique_names(names: list[str], path: str, what: str) -> None:
    seen: set[str] = set()
    for i, name in enumerate(names):
        if name in seen:
            raise ReferenceProblem(f"{path}[{i}]", f"{what} '{name}' is listed twice")
        seen.add(name)


def _check_method_conditions(world: World, i: int) -> None:
    """A method's weather, cargo, depth and service-factor keys name states, cargo types, levels and classes."""
    method, path = world.methods[i], f"methods[{i}]"
    states = world.weather.states if world.weather is not None else []
    for key in method.weather:
        if not states:
            raise ReferenceProblem(f"{path}.weather", "the world has no weather section to take states from")
        _require(key, states, f"{path}.weather.{key}", "weather state")
    cargo = world.cargo_names
    for key in method.cargo:
        _require(key, cargo, f"{path}.cargo.{key}", "cargo type (see vehicle_classes[].cargo)")
    for key in method.depth_factor:
        _require(key, world.depth_names, f"{path}.depth_factor.{key}", "depth level")
    for key in method.service.class_factor:
        if key != DEFAULT_KEY:
            _require(key, world.class_names, f"{path}.service.class_factor.{key}", "vehicle class")
    for key in method.service.cargo_factor:
        if key != DEFAULT_KEY:
            _require(key, cargo, f"{path}.service.cargo_factor.{key}", "cargo type (see vehicle_classes[].cargo)")


def _check_suspended_method(world: World, i: int) -> None:
    """A replacement method stands in for an outdoor method and must itself keep working."""
    station, path = world.stations[i], f"stations[{i}].suspended_method"
    _require(station.suspended_method, world.method_names, path, "check method")
    methods = {m.name: m for m in world.methods}
    if not methods[station.method].outdoor:
        raise ReferenceProblem(path, f"the station's method '{station.method}' is not outdoor, so it is never suspended")
    if methods[station.suspended_method].outdoor:
        raise ReferenceProblem(path, f"expected a method that is not outdoor, but '{station.suspended_method}' is outdoor")


def _check_bands(world: World) -> None:
    owner: dict[int, str] = {}
    for name, span in world.time_bands.items():
        if covers_no_hour(span):
            raise ReferenceProblem(f"time_bands.{name}", f"a band needs hours to cover; {list(span)} covers none")
        for hour in hours_of(span):
            if hour in owner:
                raise ReferenceProblem(f"time_bands.{name}", f"hour {hour} is already in band '{owner[hour]}'")
            owner[hour] = name
    missing = sorted(set(range(24)) - set(owner))
    if missing:
        raise ReferenceProblem("time_bands", f"every hour must be in one band; hour {missing[0]} is in none")


def _selects(world: World, s_index: int) -> bool:
    """Whether a station can ever have a vehicle to check: it selects some, or a station refers alarms to it."""
    station = world.stations[s_index]
    if station.role == "secondary":
        return any(other.refer_to == station.name for other in world.stations)
    sel = station.selection
    if sel.rule == "all":
        return True
    if sel.rule == "targeted":
        return sel.noise_sd > 0 or any(math.log(c.risk_weight) > sel.threshold for c in world.vehicle_classes)
    shares = [sel.fraction, *sel.fraction_by_band.values(), sel.busy_fraction if sel.rule == "queue_aware" else 0.0]
    factors = [sel.class_factor.get(c.name, 1.0) for c in world.vehicle_classes]
    return max(shares) * max(factors) > 0


def _check_staffed(world: World) -> None:
    """A station that will have vehicles to check has a lane on duty at some hour, under some team or posting."""
    for s_index, station in enumerate(world.stations):
        staffed = any(
            team.lanes.get(station.name, 0) > 0 or any(p.lanes.get(station.name, 0) > 0 for p in team.postings)
            for team in world.roster.teams
        )
        if not staffed and _selects(world, s_index):
            raise ReferenceProblem(
                f"stations[{s_index}]",
                f"'{station.name}' will have vehicles to check but no team staffs it at any hour; give it lanes in "
                "a team of roster.teams, or select none there",
            )


def _check_lanes_fit(world: World) -> None:
    """Staffed lanes never exceed a station's physical lanes in any hour."""
    for s_index, station in enumerate(world.stations):
        for hour in range(24):
            on_duty = [t for t in world.roster.teams if hour in hours_of(t.hours) and t.lanes.get(station.name, 0)]
            staffed = sum(team.lanes[station.name] for team in on_duty)
            if staffed > station.lanes:
                teams = ", ".join(t.name for t in on_duty)
                raise ReferenceProblem(
                    f"stations[{s_index}].lanes",
                    f"expected at least as many lanes as the roster staffs: at hour {hour} the roster "
                    f"({teams}) staffs {staffed} lanes of '{station.name}' but the station has {station.lanes}",
                )
