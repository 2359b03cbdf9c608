"""One station's pass over a day's vehicles, compiled: selection, queue, detection, alarms, referral.

The day engine hands a station the vehicles that reach it (and when); this
module sorts them into arrival order, decides who is selected, runs the exact
FIFO recursion of :mod:`abm.port.queues`, finds people, raises alarms, refers
vehicles to the secondary search area, and counts and tallies what the records need. It
is one numba function (:func:`abm.port.queues.station_pass`, beside the
recursion it calls, so numba's cache of the two goes stale together) because
a station's pass is a few dozen array steps per vehicle: as separate numpy
calls, a simulated year spends more time calling numpy than queueing (see
``bench/engine.py``).

Nothing here draws random numbers: every uniform and duration is drawn per
vehicle by :func:`abm.port.checks.draw_for_station` beforehand, so what a
vehicle meets does not depend on who else was selected.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .queues import METHOD_COUNTERS, FifoCarry, station_pass

__all__ = [
    "METHOD_COUNTERS", "FifoCarry", "MethodTables", "StationPass", "StationRules", "VehicleState", "check_station",
]

@dataclass(frozen=True)
class StationRules:
    """What a station does today, beyond its lanes: who it selects, with which method, where alarms go."""

    station: int
    rule: int  # index into RULES
    secondary: bool
    stands_down: bool  # its method is suspended with no replacement: every vehicle passes unchecked
    threshold: float  # targeted: risk score above which a vehicle is selected
    noise_sd: float  # targeted: spread of the officers' risk reading
    fraction: np.ndarray  # (24, C) selection chance by hour and class
    busy_fraction: np.ndarray  # (24, C) the same while the queue is long (queue_aware)
    queue_threshold: int  # queue length that makes a queue_aware station busy; 0: never busy
    method: int  # method in use
    busy_method: int  # method while busy
    refer: int  # secondary station for alarms, -1: none
    work_limit: float  # minutes a lane works before it rests (inf: never)
    rest_minutes: float


@dataclass(frozen=True)
class MethodTables:
    """The day's factors: each method's detection, false alarms and durations by class, cargo and depth,
    and each class's risk weight (for targeted selection)."""

    class_risk: np.ndarray  # (C,)
    service_factor: np.ndarray  # (M, C, K)
    detect: np.ndarray  # (M, C)
    cargo_detect: np.ndarray  # (M, K)
    depth_detect: np.ndarray  # (M, D)
    fatigue_decay: np.ndarray  # (M,) minutes
    false_alarm: np.ndarray  # (M,) in today's weather
    cargo_false: np.ndarray  # (M, K)


@dataclass
class VehicleState:
    """The day's vehicles as the stations change them (one entry per vehicle)."""

    vehicle_class: np.ndarray
    cargo: np.ndarray
    aboard: np.ndarray  # people aboard and not yet found
    depth: np.ndarray  # deepest depth level of those people
    ready: np.ndarray  # minute the vehicle leaves its last position
    referred: np.ndarray  # secondary station the vehicle is heading to, -1: none
    alarm_station: np.ndarray  # station whose alarm referred it
    alarm_method: np.ndarray
    alarm_hit: np.ndarray  # that alarm found people


@dataclass(frozen=True)
class StationPass:
    """What one station did to the vehicles that reached it, in arrival order."""

    rows: np.ndarray  # vehicle index
    arrival: np.ndarray
    start: np.ndarray  # check start (= arrival when not checked)
    end: np.ndarray
    checked: np.ndarray
    method: np.ndarray  # method of the check (the station's method when not checked)
    alarm: np.ndarray
    hit: np.ndarray  # the check found people
    logged_false: np.ndarray  # the agency logs a false alarm here: nothing found after the alarm
    key: np.ndarray  # aggregation key of (calendar day, hour, station, class, method), see day.py
    wait: np.ndarray  # start - arrival of the checked vehicles, in arrival order
    unservable: bool  # some selected vehicle can never be checked by a staffed lane
    tally: tuple[np.ndarray, ...]  # by hour from the day's first: abm.port.queues.tally_pass's results


def check_station(
    rows: np.ndarray,
    arrival: np.ndarray,
    vehicles: VehicleState,
    service: np.ndarray,
    busy_service: np.ndarray,
    u_select: np.ndarray,
    risk_noise: np.ndarray,
    u_detect: np.ndarray,
    u_false: np.ndarray,
    rules: StationRules,
    tables: MethodTables,
    staffed: np.ndarray,
    origin: float,
    free: np.ndarray,
    worked: np.ndarray,
    carry: FifoCarry,
    counters: np.ndarray,
    n_stations: int,
) -> StationPass:
    """Run station ``rules.station`` for vehicles ``rows`` arriving at ``arrival`` (any order).

    Per-vehicle draws (``service`` ... ``u_false``) are indexed by vehicle. The
    lanes' state (``free``, ``worked``, ``carry``, as in :func:`abm.port.queues.serve_fifo`)
    and ``vehicles`` are updated in place: found people leave ``aboard``, alarms
    refer vehicles on, every vehicle's ``ready`` becomes the end of its check.
    ``counters`` (len(METHOD_COUNTERS), methods x cargo types) accumulates the
    per-method figures. The pass comes back with its waits and its tally by hour for the records.
    """
    out = station_pass(
        rows, arrival, vehicles.vehicle_class, vehicles.cargo, vehicles.aboard, vehicles.depth,
        vehicles.ready, vehicles.referred, vehicles.alarm_station, vehicles.alarm_method, vehicles.alarm_hit,
        service, busy_service, u_select, risk_noise, u_detect, u_false,
        rules.station, rules.rule, rules.secondary, rules.stands_down, rules.threshold, rules.noise_sd,
        rules.fraction, rules.busy_fraction, rules.queue_threshold, rules.method, rules.busy_method, rules.refer,
        rules.work_limit, rules.rest_minutes,
        tables.class_risk, tables.service_factor, tables.detect, tables.cargo_detect, tables.depth_detect,
        tables.fatigue_decay, tables.false_alarm, tables.cargo_false,
        staffed, origin, free, worked, carry.arrival, carry.start, counters, n_stations,
    )  # fmt: skip
    fields, tally, (carry.arrival, carry.start) = out
    return StationPass(*fields, tally=tally)
