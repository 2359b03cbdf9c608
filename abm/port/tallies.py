"""Cheap tallies of a day for the records: each station's hours and each departure's vehicles.

Nothing here draws a random number or changes the day's state: the tallies
are read off what the day engine has already computed (a station's
:class:`~abm.port.station.StationPass`, the departure each vehicle was booked
on and left on), so a run's other records stay byte-identical. A station's
vehicles are tallied by hour inside its compiled pass
(:func:`abm.port.queues.tally_pass`), which has them at hand.

Station hours are keyed by the absolute hour (``minute // 60`` counted from
day 0), so a check that runs past midnight, or a vehicle of one day checked
the next, lands in the calendar hour it happened in. Per hour:

* ``vehicles``, ``checks``: vehicles that reached the station in the hour,
  and those of them that were checked (as ``observed/checks`` counts them);
* ``waiting_minutes``: vehicle-minutes spent waiting for a check inside the
  hour (between reaching the station and the check's start), so the hour's
  time-average queue length is ``waiting_minutes / 60`` exactly, without
  Little's law;
* ``busy_minutes``: lane-minutes spent checking inside the hour;
* ``staffed_minutes``: lane-minutes on duty in the hour by the day's roster
  (capped at the station's lanes), for the operating day's own 24 hours.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from .queues import HOURS_PER_DAY, MINUTES_PER_HOUR
from .station import StationPass


@dataclass(frozen=True)
class StationHours:
    """One station's tally of one operating day; hour rows are dense over ``hour``."""

    station: int
    hour: np.ndarray  # absolute hours, consecutive, covering the operating day and any spill past midnight
    vehicles: np.ndarray
    checks: np.ndarray
    waiting_minutes: np.ndarray
    busy_minutes: np.ndarray
    staffed_minutes: np.ndarray
    wait_hour: np.ndarray  # per checked vehicle, in the order of the day's waits: the absolute hour it arrived


def station_hours(station: int, done: StationPass, staffed: np.ndarray, day: int) -> StationHours:
    """Tally a station's pass of operating day ``day``; ``staffed`` is its lanes on duty per hour (24)."""
    first = day * HOURS_PER_DAY
    vehicles, checks, waiting, busy, wait_hour = done.tally  # the compiled pass tallied its own vehicles
    staffed_minutes = np.zeros(vehicles.shape[0])
    staffed_minutes[:HOURS_PER_DAY] = staffed * MINUTES_PER_HOUR
    return StationHours(
        station=station,
        hour=np.arange(first, first + vehicles.shape[0], dtype=np.int64),
        vehicles=vehicles,
        checks=checks,
        waiting_minutes=waiting,
        busy_minutes=busy,
        staffed_minutes=staffed_minutes,
        wait_hour=wait_hour,
    )


def departure_counts(
    minute: np.ndarray, booked: np.ndarray, left: np.ndarray, missed: np.ndarray, places: np.ndarray,
    metres: np.ndarray, late: np.ndarray, cancelled: np.ndarray, full: np.ndarray,
) -> dict[str, np.ndarray]:
    """Per departure in view: the day's vehicles booked on it, that left on it, that missed it, and its state.

    ``minute`` are the departures' timetabled absolute minutes; ``booked``, ``left`` and ``missed`` the
    counts of :func:`abm.port.departures.settle_departures`; ``places`` and ``metres`` the room still free
    after the day's vehicles boarded (inf where not counted), ``late`` the minutes each leaves late,
    ``cancelled`` and ``full`` flags.
    """
    return {
        "minute": minute.copy(),
        "booked": booked,
        "left": left,
        "missed": missed,
        "places_left": np.where(np.isfinite(places), places, np.nan),
        "metres_left": np.where(np.isfinite(metres), metres, np.nan),
        "late_minutes": np.asarray(late, dtype=np.float64).copy(),
        "cancelled": np.asarray(cancelled, dtype=bool).copy(),
        "full": np.asarray(full, dtype=bool).copy(),
    }


@numba.njit(cache=True)
def count_checks(key: np.ndarray, checked: np.ndarray, alarm: np.ndarray, n_stations: int, n_classes: int, n_methods: int):  # fmt: skip
    """Vehicles, checks and alarms per aggregation key (ascending, keys present only), with each key's parts.

    ``key`` is ``((hour * n_stations + station) * n_classes + class) * n_methods + method`` per vehicle
    and station pass, ``hour`` counted from day 0. Returns calendar day, hour of the day, station,
    class, method, vehicles, checks, alarms. The keys of a day span a few thousand values: counting
    over that span beats sorting them, and one compiled loop beats a bincount per column.
    """
    low = key.min() if key.size else 0
    span = key.max() - low + 1 if key.size else 0
    vehicles = np.zeros(span, dtype=np.int64)
    checks = np.zeros(span, dtype=np.int64)
    alarms = np.zeros(span, dtype=np.int64)
    for i in range(key.shape[0]):
        j = key[i] - low
        vehicles[j] += 1
        checks[j] += checked[i]
        alarms[j] += alarm[i]
    present = np.flatnonzero(vehicles)
    k = present.shape[0]
    out = np.empty((8, k), dtype=np.int64)
    for j in range(k):
        rest = present[j] + low
        rest, out[4, j] = divmod(rest, n_methods)
        rest, out[3, j] = divmod(rest, n_classes)
        rest, out[2, j] = divmod(rest, n_stations)
        out[0, j], out[1, j] = divmod(rest, 24)
        out[5, j] = vehicles[present[j]]
        out[6, j] = checks[present[j]]
        out[7, j] = alarms[present[j]]
    return out
