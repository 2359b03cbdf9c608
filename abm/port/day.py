"""The operating-day engine: a day's vehicles through boarding points, stations and departures.

Vehicles are rows of numpy arrays; nothing here is a per-vehicle object and no
generic event scheduler is used. The route is processed position by position:
before each primary station, attempts at the boarding points that lie before it
board vehicles at the minute those vehicles pass; the station's queue is then
run exactly (see :mod:`abm.port.queues`). A vehicle whose check raises an alarm
is referred to the station's secondary search area (which lies downstream; the
referred vehicle skips the stations in between) and continues from there.
After the last station come the boarding points before departure, then the
departures (:mod:`abm.port.departures`).

Lanes carry their state between days, so a vehicle still queueing at midnight
is served by the next day's lanes: vehicles carry over, and checks start in
arrival order across midnight too (:class:`abm.port.queues.FifoCarry`). The
only approximation is at that boundary: a late vehicle of one day has its lane
before the next day's pass at each station, so a vehicle of the next day that
arrived before it cannot use that lane until the late check ends.

Conditions of the day and of each vehicle change how methods work:

* weather: one state a day (from the month's distribution) sets each method's
  false-alarm chance; in states that suspend outdoor methods, a station whose
  method is outdoor uses its ``suspended_method`` or, without one, stands down
  (its vehicles pass unchecked, queue-aware fallback included). The day's
  weather holds for every vehicle of the day, also those checked after midnight;
* cargo: each vehicle's cargo type multiplies detection and false-alarm chances
  and, with the vehicle class, the check's duration;
* depth: a vehicle carries the deepest depth level of the people still hidden in
  it (levels are listed shallowest first); a method's depth factor multiplies
  its detection chance;
* fatigue: a station whose method in use has a fatigue rule rests its lanes by
  that rule (see :mod:`abm.port.queues`); a check by a method with a fatigue
  curve finds people with its chance times exp(-minutes worked / decay). Lanes of
  a station whose method in use has no rule do not track work.

Their random numbers come from streams of their own (weather and cargo from
children of the traffic stream, replacement-method durations from a second
child per station of the detection stream), each spawned after the existing
children and drawn in fixed amounts, so a world that configures none of them
draws exactly the numbers it drew before.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ..errors import InputError
from .checks import StationDraws, draw_for_station
from .departures import DepartureBoard, build_timetable
from .layout import DEPARTURE, MONTH_OF_YEAR_DAY, Layout
from .boarding import board_attempts
from .station import METHOD_COUNTERS, FifoCarry, MethodTables, StationPass, StationRules, VehicleState, check_station
from .tallies import StationHours, count_checks, station_hours
from .traffic import MINUTES_PER_DAY, DayTraffic, generate_traffic

# Outcome codes of an attempt.
PENDING, INTERDICTED, DETECTED, CROSSED, NO_VEHICLE = 0, 1, 2, 3, 4
OUTCOME_NAMES = {INTERDICTED: "interdicted", DETECTED: "detected", CROSSED: "crossed", NO_VEHICLE: "no_vehicle"}


class StationUnservable(InputError):
    """A station selected a vehicle that no staffed lane can ever check."""


@dataclass
class Attempts:
    """The day's boarding attempts, one row per group, chosen by the concealment agents.

    ``depth`` is an index into the world's depth levels; left out, every group
    hides at the first (shallowest) level.
    """

    point: np.ndarray
    band: np.ndarray
    vehicle_class: np.ndarray
    size: np.ndarray
    depth: np.ndarray | None = None

    def __post_init__(self) -> None:
        if self.depth is None:
            self.depth = np.zeros(self.point.shape[0], dtype=np.int64)

    @classmethod
    def empty(cls) -> "Attempts":
        z = np.zeros(0, dtype=np.int64)
        return cls(z, z.copy(), z.copy(), z.copy())

    def __len__(self) -> int:
        return int(self.point.shape[0])


@dataclass
class Staffing:
    """What command put on duty today: lanes per station and hour, extra interdiction per point and band."""

    lanes: np.ndarray  # (S, 24) int
    patrol: np.ndarray  # (P, B) float

    def staff_hours(self) -> float:
        """Lane-hours staffed (patrols are counted by the team roster, not here)."""
        return float(self.lanes.sum())


@dataclass
class AttemptResult:
    """What happened to each attempt (truth)."""

    outcome: np.ndarray  # outcome code
    station: np.ndarray  # station index of detection, -1 otherwise
    method: np.ndarray  # method index of detection, -1 otherwise
    minute: np.ndarray  # absolute minute of the encounter or crossing; NaN for no vehicle
    vehicle: np.ndarray  # vehicle row boarded, -1 when none
    referred_by: np.ndarray  # found at a secondary station: the station whose alarm sent it there; -1 otherwise


@dataclass
class DayResult:
    """Everything one day produced."""

    day: int
    traffic: DayTraffic
    attempts: AttemptResult
    check_rows: dict[str, np.ndarray]  # aggregated observed checks (calendar day, hour, station, class, method, counts)
    false_alarms: dict[str, np.ndarray]  # one row per alarm after which nothing was found
    time_in_port: np.ndarray  # minutes, per vehicle
    missed: np.ndarray  # bool per vehicle: left on a later departure than booked
    weather: str  # the day's weather state ("" in a world without weather)
    method_rows: dict[str, np.ndarray]  # per method and cargo type: checks, alarms, and what truth says of them
    queue_wait: dict[int, np.ndarray] = field(default_factory=dict)  # station -> waits of checked vehicles
    station_hours: list[StationHours] = field(default_factory=list)  # per station: waits, queue, lanes by hour
    departures: dict[str, np.ndarray] | None = None  # per departure in the window: booked, left, missed


def _pending_results(n: int) -> AttemptResult:
    """The day's attempts before anything happened to them."""
    return AttemptResult(
        outcome=np.full(n, PENDING, dtype=np.int64),
        station=np.full(n, -1, dtype=np.int64),
        method=np.full(n, -1, dtype=np.int64),
        minute=np.full(n, np.nan),
        vehicle=np.full(n, -1, dtype=np.int64),
        referred_by=np.full(n, -1, dtype=np.int64),
    )


def _arrived_vehicles(traffic: DayTraffic) -> VehicleState:
    """The day's vehicles as they arrive: nobody aboard, nothing referred or alarmed yet."""
    n = traffic.size
    return VehicleState(
        vehicle_class=traffic.vehicle_class,
        cargo=traffic.cargo,
        aboard=np.zeros(n, dtype=np.int64),
        depth=np.zeros(n, dtype=np.int64),
        ready=traffic.arrival.copy(),
        referred=np.full(n, -1, dtype=np.int64),
        alarm_station=np.full(n, -1, dtype=np.int64),
        alarm_method=np.full(n, -1, dtype=np.int64),
        alarm_hit=np.zeros(n, dtype=bool),
    )


class DayEngine:
    """Runs operating days one after another, keeping lanes and departures' room between days."""

    def __init__(
        self,
        layout: Layout,
        traffic_seq: np.random.SeedSequence,
        boarding_seq: np.random.SeedSequence,
        detection_seq: np.random.SeedSequence,
    ) -> None:
        arrivals_seq, stop_seq = traffic_seq.spawn(2)
        # spawned after the children above, which therefore stay what they were
        weather_seq, cargo_seq = traffic_seq.spawn(2)
        (departure_seq,) = traffic_seq.spawn(1)  # delays and cancellations, after the children above
        self.layout = layout
        self.traffic_rng = np.random.default_rng(arrivals_seq)
        self.stop_rng = np.random.default_rng(stop_seq)
        self.weather_rng = np.random.default_rng(weather_seq)
        self.cargo_rng = np.random.default_rng(cargo_seq)
        self.boarding_rng = np.random.default_rng(boarding_seq)
        # one stream per station, so adding or changing one station leaves the others' numbers alone
        n_s = len(layout.station_method)
        self.station_rngs = [np.random.default_rng(s) for s in detection_seq.spawn(n_s)]
        self.condition_rngs = [np.random.default_rng(s) for s in detection_seq.spawn(n_s)]
        self.free = [np.full(int(lanes), -np.inf) for lanes in layout.station_lanes]
        self.worked = [np.zeros(int(lanes)) for lanes in layout.station_lanes]  # minutes since each lane's rest
        self.carry = [FifoCarry.empty() for _ in layout.station_lanes]  # each station's late checks (FIFO)
        self.departures = DepartureBoard(build_timetable(layout.world), np.random.default_rng(departure_seq))
        self._tables: dict[int, MethodTables] = {}
        self._rules: dict[tuple[int, int, int, bool], StationRules] = {}
        self._band_hours: dict[int, np.ndarray] = {}  # the hours of each band, for interdiction minutes

    def change_layout(self, layout: Layout) -> None:
        """Take a changed policy (same stations and points); lanes keep their state, new lanes start free."""
        for s, lanes in enumerate(layout.station_lanes):
            free, worked = self.free[s], self.worked[s]
            if lanes > free.shape[0]:
                self.free[s] = np.concatenate([free, np.full(int(lanes) - free.shape[0], -np.inf)])
                self.worked[s] = np.concatenate([worked, np.zeros(int(lanes) - free.shape[0])])
            elif lanes < free.shape[0]:
                # removed lanes are the last ones: the recursion puts lanes above the staffed count off duty
                self.free[s] = free[: int(lanes)]
                self.worked[s] = worked[: int(lanes)]
        self.layout = layout
        self.departures.change_timetable(build_timetable(layout.world))
        self._tables = {}
        self._rules = {}
        self._band_hours = {}

    # -- helpers -------------------------------------------------------------------------
    def _tables_for(self, weather: int) -> MethodTables:
        """The methods' factors in a weather state (built once per state and layout)."""
        if weather not in self._tables:
            lay = self.layout
            self._tables[weather] = MethodTables(
                class_risk=lay.class_risk,
                service_factor=lay.method_service_factor,
                detect=lay.method_detect,
                cargo_detect=lay.method_cargo_detect,
                depth_detect=lay.method_depth_detect,
                fatigue_decay=lay.method_fatigue_decay,
                false_alarm=np.ascontiguousarray(lay.method_false_alarm_weather[:, weather]),
                cargo_false=lay.method_cargo_false,
            )
        return self._tables[weather]

    def _rules_for(self, s: int, main: int, busy_method: int, stands_down: bool) -> StationRules:
        """Station ``s``'s rules with today's methods (built once per combination and layout)."""
        key = (s, main, busy_method, stands_down)
        if key not in self._rules:
            lay = self.layout
            rests = bool(np.isfinite(lay.method_work_minutes[main]))
            self._rules[key] = StationRules(
                station=s,
                rule=int(lay.station_rule[s]),
                secondary=bool(lay.station_secondary[s]),
                stands_down=stands_down,
                threshold=float(lay.station_threshold[s]),
                noise_sd=float(lay.station_noise_sd[s]),
                fraction=lay.station_fraction[s],
                busy_fraction=lay.station_busy_fraction[s],
                queue_threshold=int(lay.station_queue_threshold[s]),
                method=main,
                busy_method=busy_method,
                refer=int(lay.station_refer[s]),
                work_limit=float(lay.method_work_minutes[main]) if rests else np.inf,
                rest_minutes=float(lay.method_rest_minutes[main]) if rests else np.inf,
            )
        return self._rules[key]

    def _weather(self, day: int) -> int:
        """The day's weather state: one uniform a day against the month's cumulative shares."""
        lay = self.layout
        u = self.weather_rng.random()
        month = MONTH_OF_YEAR_DAY[(lay.weather_start_day + day) % MONTH_OF_YEAR_DAY.shape[0]]
        return int(np.searchsorted(lay.weather_cum[month], u, side="right"))

    def _methods_today(self, s: int, suspended: np.ndarray, d: StationDraws) -> tuple[int, int, np.ndarray, np.ndarray]:
        """Station ``s``'s method and busy method today, with their duration draws; method -1: it stands down."""
        lay = self.layout
        main, service = int(lay.station_method[s]), d.service
        if suspended[main]:
            main, service = int(lay.station_suspended_method[s]), d.suspended_service
        fallback = int(lay.station_fallback[s])
        if fallback >= 0 and not suspended[fallback]:
            return main, fallback, service, d.fallback_service
        return main, main, service, service

    # -- the day -----------------------------------------------------------------------
    def run_day(self, day: int, attempts: Attempts, staffing: Staffing) -> DayResult:
        """Simulate one operating day."""
        lay = self.layout
        if len(attempts) and int(attempts.depth.max()) >= len(lay.depth_names):
            raise ValueError(f"an attempt's depth index exceeds the world's {len(lay.depth_names)} depth level(s)")
        traffic = generate_traffic(lay, day, self.traffic_rng, self.stop_rng, self.cargo_rng)
        n, origin = traffic.size, day * MINUTES_PER_DAY
        weather = self._weather(day)
        suspended = lay.method_outdoor & lay.weather_suspends[weather]
        draws = [
            draw_for_station(lay, s, n, rng, crng)
            for s, (rng, crng) in enumerate(zip(self.station_rngs, self.condition_rngs, strict=True))
        ]

        result = _pending_results(len(attempts))
        self._interdict(day, attempts, staffing, result)
        # the positions before which some attempt is still pending: only there is anyone to board
        boarding_at = set(lay.point_station[attempts.point[result.outcome == PENDING]].tolist())

        vehicles = _arrived_vehicles(traffic)
        tables = self._tables_for(weather)
        counters = np.zeros((len(METHOD_COUNTERS), lay.method_dist.shape[0] * len(lay.cargo_names)))
        passes: list[StationPass] = []
        false_parts: list[tuple[np.ndarray, ...]] = []
        waits: dict[int, np.ndarray] = {}
        hours: list[StationHours] = []

        on_duty = np.minimum(staffing.lanes, lay.station_lanes[:, None]).astype(np.int64)  # lanes per station and hour
        for s in range(lay.station_method.shape[0]):
            secondary = bool(lay.station_secondary[s])
            rows = np.flatnonzero(vehicles.referred == s) if secondary else np.flatnonzero(vehicles.referred == -1)
            arrive = vehicles.ready[rows] + lay.station_travel[s]
            if s in boarding_at:  # a secondary station has no boarding points
                self._board(attempts, result, s, rows, arrive, vehicles, traffic)
            d = draws[s]
            main, busy_method, service, busy_service = self._methods_today(s, suspended, d)
            stands_down = main < 0  # suspended without a replacement: every vehicle passes unchecked
            if stands_down:
                main = busy_method = int(lay.station_method[s])
            rules = self._rules_for(s, main, busy_method, stands_down)
            staffed = on_duty[s]
            # lanes of a station whose method has no rest rule do not track work
            worked = self.worked[s] if np.isfinite(rules.work_limit) else np.zeros(self.free[s].shape[0])
            done = check_station(
                rows, arrive, vehicles, service, busy_service, d.u_select, d.risk_noise, d.u_detect, d.u_false,
                rules, tables, staffed, origin, self.free[s], worked, self.carry[s], counters, lay.station_method.shape[0],
            )  # fmt: skip
            if done.unservable:
                name = lay.world.stations[s].name
                raise StationUnservable(f"station '{name}' selected a vehicle on day {day} that no staffed lane can check")
            self._take_findings(result, done, s, secondary, vehicles, false_parts)
            passes.append(done)
            waits[s] = done.wait
            hours.append(station_hours(s, done, staffed, day))  # tallies only: no draws

        if DEPARTURE in boarding_at:
            self._board(attempts, result, DEPARTURE, np.arange(n), vehicles.ready, vehicles, traffic)
        departed = self.departures.depart(day, traffic.arrival, vehicles.ready, traffic.vehicle_class)
        leave, missed = departed.leave, departed.missed
        crossed = (result.outcome == PENDING) & (result.vehicle >= 0)
        result.outcome[crossed] = CROSSED
        result.minute[crossed] = leave[result.vehicle[crossed]]
        return DayResult(
            day=day,
            traffic=traffic,
            attempts=result,
            check_rows=_aggregate_checks(passes, lay),
            false_alarms=_false_alarm_rows(false_parts),
            time_in_port=leave - traffic.arrival,
            missed=missed,
            weather=lay.weather_names[weather],
            method_rows=_method_rows(counters, lay),
            queue_wait=waits,
            station_hours=hours,
            departures=departed.counts,
        )

    def _take_findings(
        self, result: AttemptResult, done: StationPass, s: int, secondary: bool, vehicles: VehicleState,
        false_parts: list[tuple[np.ndarray, ...]],
    ) -> None:
        """Record the people a station's pass found, and its false alarms (at a secondary station, credited to the
        station and method whose alarm referred the vehicle)."""
        if done.hit.any():
            found = done.rows[done.hit]
            referred_by = vehicles.alarm_station[found] if secondary else np.full(found.shape[0], -1)
            self._found(result, found, s, done.method[done.hit], done.end[done.hit], referred_by)
        if done.logged_false.any():
            empty, rows_empty = done.logged_false, done.rows[done.logged_false]
            if secondary:
                station_of, method_of = vehicles.alarm_station[rows_empty], vehicles.alarm_method[rows_empty]
            else:
                station_of, method_of = np.full(rows_empty.shape[0], s), done.method[empty]
            false_parts.append((done.end[empty], station_of, method_of, vehicles.vehicle_class[rows_empty],
                                vehicles.cargo[rows_empty]))

    def _interdict(self, day: int, attempts: Attempts, staffing: Staffing, result: AttemptResult) -> None:
        """Attempts stopped at the boarding point by fences or patrols, at a random minute of their band."""
        lay = self.layout
        u = self.boarding_rng.random(len(attempts))
        when = self.boarding_rng.random(len(attempts))
        # the chance needs no clipping to [0, 1]: a uniform in [0, 1) is below it exactly when below its clipped value
        stopped = u < lay.point_interdiction[attempts.point, attempts.band] + staffing.patrol[attempts.point, attempts.band]
        for a in np.flatnonzero(stopped):
            band = int(attempts.band[a])
            if band not in self._band_hours:
                self._band_hours[band] = np.flatnonzero(lay.band_of_hour == band)
            hours = self._band_hours[band]
            minute = (hours[int(when[a] * hours.shape[0])] + (when[a] * hours.shape[0]) % 1.0) * 60.0
            result.outcome[a] = INTERDICTED
            result.minute[a] = day * MINUTES_PER_DAY + minute

    def _board(
        self,
        attempts: Attempts,
        result: AttemptResult,
        before: int,
        rows: np.ndarray,
        next_arrival: np.ndarray,
        vehicles: VehicleState,
        traffic: DayTraffic,
    ) -> None:
        """Board pending attempts at the points before station ``before`` (or DEPARTURE) onto vehicles ``rows``.

        A vehicle is at a point ``lead`` minutes before it reaches the next station
        (``next_arrival``); it must stop there, be of the chosen class, pass in the
        chosen band and have room for the whole group. One such vehicle is taken at random
        (:func:`abm.port.boarding.board_attempts`).
        The vehicle's depth becomes the deeper of its own and the group's.
        """
        lay = self.layout
        board_attempts(
            before, attempts.point, attempts.vehicle_class, attempts.band, attempts.size, attempts.depth,
            lay.point_station, lay.point_lead, rows, traffic.stops, vehicles.vehicle_class, next_arrival,
            lay.band_of_hour, lay.class_capacity, vehicles.aboard, vehicles.depth, self.boarding_rng,
            result.outcome, result.vehicle, result.minute, PENDING, NO_VEHICLE,
        )  # fmt: skip

    @staticmethod
    def _found(
        result: AttemptResult,
        vehicles: np.ndarray,
        station: int,
        methods: np.ndarray,
        when: np.ndarray,
        referred_by: np.ndarray,
    ) -> None:
        """Every pending attempt aboard one of ``vehicles`` (checks that found people) is detected there.

        ``referred_by`` is, per vehicle, the station whose alarm referred it to this one (-1: none).
        """
        lookup = {v: i for i, v in enumerate(vehicles.tolist())}
        boarded = result.vehicle.tolist()  # Python ints: cheaper to look up than numpy scalars
        for a in np.flatnonzero(result.outcome == PENDING).tolist():
            i = lookup.get(boarded[a])
            if i is None:
                continue
            result.outcome[a] = DETECTED
            result.station[a] = station
            result.method[a] = methods[i]
            result.minute[a] = when[i]
            result.referred_by[a] = referred_by[i]


def _aggregate_checks(passes: list[StationPass], lay: Layout) -> dict[str, np.ndarray]:
    """Sum vehicles, checks and alarms per calendar day, hour, station, class and method (keys ascending)."""
    key = np.concatenate([p.key for p in passes])
    checked = np.concatenate([p.checked for p in passes])
    alarm = np.concatenate([p.alarm for p in passes])
    columns = count_checks(key, checked, alarm, lay.station_method.shape[0], lay.n_classes, lay.method_dist.shape[0])
    names = ("day", "hour", "station", "vehicle_class", "method", "vehicles", "checks", "alarms")
    return dict(zip(names, columns, strict=True))


def _false_alarm_rows(parts: list[tuple[np.ndarray, ...]]) -> dict[str, np.ndarray]:
    if not parts:
        z = np.zeros(0)
        i = z.astype(np.int64)
        return {"minute": z, "station": i, "method": i.copy(), "vehicle_class": i.copy(), "cargo": i.copy()}
    return {
        "minute": np.concatenate([p[0] for p in parts]),
        "station": np.concatenate([p[1] for p in parts]).astype(np.int64),
        "method": np.concatenate([p[2] for p in parts]).astype(np.int64),
        "vehicle_class": np.concatenate([p[3] for p in parts]).astype(np.int64),
        "cargo": np.concatenate([p[4] for p in parts]).astype(np.int64),
    }


def _method_rows(counters: np.ndarray, lay: Layout) -> dict[str, np.ndarray]:
    """The day's checks per method and cargo type (every pair, so a method that stood down shows zero).

    ``counters`` is what the stations accumulated (rows named by
    :data:`abm.port.station.METHOD_COUNTERS`): ``false_alarms`` are the alarms
    the agency logged as false (nothing found after them), by the method that
    raised them; ``truth_false_alarms`` are alarms on vehicles with nobody
    aboard, ``truth_true_alarms`` on vehicles with people aboard,
    ``truth_found`` checks that found them.
    """
    n_k = len(lay.cargo_names)
    m, k = np.divmod(np.arange(counters.shape[1]), n_k)
    rows: dict[str, np.ndarray] = {"method": m, "cargo": np.array(lay.cargo_names, dtype=object)[k]}
    for name, values in zip(METHOD_COUNTERS, counters, strict=True):
        rows[name] = values.copy() if name == "check_minutes" else values.astype(np.int64)
    return rows
