"""Cheap tallies of a day for the records: each station's hours and each departure's vehicles.

Nothing here draws a random number or changes the day's state: the tallies
are read off what the day engine has already computed (a station's
:class:`~abm.port.station.StationPass`, the departure each vehicle was booked
on and left on), so a run's other records stay byte-identical.

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

from .station import StationPass

MINUTES_PER_HOUR = 60.0
HOURS_PER_DAY = 24


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


@numba.njit(cache=True)
def _spread(begin: float, finish: float, first_hour: int, out: np.ndarray) -> None:
    """Add the minutes of ``[begin, finish)`` to the hours they fall in (``out[k]`` is hour ``first_hour + k``)."""
    t = begin
    while t < finish:
        hour = int(np.floor(t / MINUTES_PER_HOUR))
        stop = min((hour + 1) * MINUTES_PER_HOUR, finish)
        out[hour - first_hour] += stop - t
        t = stop


@numba.njit(cache=True)
def tally_pass(arrival, start, end, checked, first_hour, min_hours):  # fmt: skip
    """Per absolute hour from ``first_hour``: vehicles reaching the station, checks, minutes waited, lane-minutes
    checking; and each checked vehicle's hour. Compiled: a plain loop over the vehicles and the hours each
    interval spans, where numpy would need a dozen calls a station and day (see ``bench/engine.py``)."""
    last = first_hour + min_hours - 1
    n_checked = 0
    for i in range(arrival.shape[0]):
        last = max(last, int(np.floor(arrival[i] / MINUTES_PER_HOUR)))
        if checked[i]:
            n_checked += 1
            last = max(last, int(np.ceil(end[i] / MINUTES_PER_HOUR)) - 1)
    n = last - first_hour + 1
    vehicles = np.zeros(n, dtype=np.int64)
    checks = np.zeros(n, dtype=np.int64)
    waiting = np.zeros(n)
    busy = np.zeros(n)
    wait_hour = np.empty(n_checked, dtype=np.int64)
    k = 0
    for i in range(arrival.shape[0]):
        hour = int(np.floor(arrival[i] / MINUTES_PER_HOUR))
        vehicles[hour - first_hour] += 1
        if checked[i]:
            checks[hour - first_hour] += 1
            wait_hour[k] = hour
            k += 1
            _spread(arrival[i], start[i], first_hour, waiting)
            _spread(start[i], end[i], first_hour, busy)
    return vehicles, checks, waiting, busy, wait_hour


def station_hours(station: int, done: StationPass, staffed: np.ndarray, day: int) -> StationHours:
    """Tally a station's pass of operating day ``day``; ``staffed`` is its lanes on duty per hour (24)."""
    first = day * HOURS_PER_DAY
    vehicles, checks, waiting, busy, wait_hour = tally_pass(
        done.arrival, done.start, done.end, done.checked, first, HOURS_PER_DAY
    )
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
    minute: np.ndarray, booked: np.ndarray, chosen: np.ndarray, places: np.ndarray, metres: np.ndarray,
    late: np.ndarray, cancelled: np.ndarray, full: np.ndarray,
) -> dict[str, np.ndarray]:
    """Per departure in view: the day's vehicles booked on it, that left on it, that missed it, and its state.

    ``minute`` are the departures' timetabled absolute minutes, ``booked`` and ``chosen`` each vehicle's
    index into them (``chosen`` -1: stranded; ``booked`` past the end: no departure in view), ``places`` and
    ``metres`` the room still free after the day's vehicles boarded (inf where not counted), ``late`` the
    minutes each leaves late, ``cancelled`` and ``full`` flags. A vehicle missed its booked departure when it
    left on a later one or not at all, as the daily missed-departure share counts it.
    """
    k = minute.shape[0]
    in_window = booked < k
    missed = (chosen < 0) | (chosen > booked)
    return {
        "minute": minute.copy(),
        "booked": np.bincount(booked[in_window], minlength=k),
        "left": np.bincount(chosen[chosen >= 0], minlength=k),
        "missed": np.bincount(booked[in_window & missed], minlength=k),
        "places_left": np.where(np.isfinite(places), places, np.nan),
        "metres_left": np.where(np.isfinite(metres), metres, np.nan),
        "late_minutes": np.asarray(late, dtype=np.float64).copy(),
        "cancelled": np.asarray(cancelled, dtype=bool).copy(),
        "full": np.asarray(full, dtype=bool).copy(),
    }
