"""Which passing vehicles a group can board at a boarding point, compiled.

A group boards one vehicle, taken at random among those that stop at the
point, are of the class it chose, pass in the band it chose and have room for
the whole group. The vehicles that stop at a point, with their class and the
band they pass it in, are gathered once per point and day
(:func:`stopping_vehicles`); each attempt then scans only those
(:func:`fitting_vehicles`). Both scans count instead of branching: the flags
are random, so a branch per vehicle is mispredicted about as often as not,
which had made a scan over the day's vehicles cost three times its arithmetic.
:func:`board_attempts` runs both for every pending attempt at the points
before a station, drawing each pick from the boarding stream in one compiled
call, where a Python loop over the attempts cost more than the scans.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True)
def stopping_vehicles(
    rows: np.ndarray,
    stops: np.ndarray,
    vehicle_class: np.ndarray,
    next_arrival: np.ndarray,
    lead: float,
    band_of_hour: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The vehicles passing a point that stop there: positions ``i`` into ``rows`` (ascending), vehicle, class, band.

    ``stops`` has one flag per vehicle of the day; vehicle ``rows[i]`` is at the point ``lead`` minutes
    before it reaches the next station at ``next_arrival[i]``; ``band_of_hour`` maps an hour of the day to its band.
    """
    n = rows.shape[0]
    position = np.empty(n, dtype=np.int64)
    vehicle = np.empty(n, dtype=np.int64)
    k = 0
    for i in range(n):
        position[k] = i
        vehicle[k] = rows[i]
        k += stops[rows[i]]
    cls = np.empty(k, dtype=np.int64)
    band = np.empty(k, dtype=np.int64)
    for j in range(k):
        cls[j] = vehicle_class[vehicle[j]]
        band[j] = band_of_hour[int(np.floor((next_arrival[position[j]] - lead) / 60.0)) % 24]
    return position[:k], vehicle[:k], cls, band


@numba.njit(cache=True)
def fitting_vehicles(
    position: np.ndarray,
    vehicle: np.ndarray,
    cls: np.ndarray,
    band: np.ndarray,
    capacity: np.ndarray,
    aboard: np.ndarray,
    want_class: int,
    want_band: int,
    size: int,
) -> np.ndarray:
    """The ``position`` entries (ascending) of stopping vehicles (:func:`stopping_vehicles`) a group can board.

    A vehicle qualifies when it is of class ``want_class``, passes in band ``want_band``
    and has room for ``size`` more people (its class's ``capacity`` less those ``aboard``).
    """
    found = np.empty(position.shape[0], dtype=np.int64)
    room = capacity[want_class] - size
    k = 0
    for j in range(position.shape[0]):
        found[k] = position[j]
        k += (cls[j] == want_class) & (band[j] == want_band) & (aboard[vehicle[j]] <= room)
    return found[:k]


@numba.njit(cache=True)
def board_attempts(
    before, point, want_class, want_band, size, want_depth, point_station, point_lead, rows, stops,
    vehicle_class, next_arrival, band_of_hour, capacity, aboard, depth, rng, outcome, vehicle, minute,
    pending, no_vehicle,
):  # fmt: skip
    """Board every attempt still ``pending`` whose point lies before station ``before`` onto vehicles ``rows``.

    Points are taken in ascending order and, at each point, attempts in order.
    An attempt boards a vehicle taken at random (``rng.integers``, the same
    numbers as ``Generator.integers`` in Python) among :func:`fitting_vehicles`;
    with none its ``outcome`` becomes ``no_vehicle`` and nothing is drawn. The
    vehicle takes the group (``aboard``) and the deeper of its ``depth`` and the
    group's; the attempt's ``vehicle`` is that vehicle and its ``minute`` when it
    passes the point, ``point_lead`` minutes before ``next_arrival``. Arrays are
    updated in place.
    """
    for p in range(point_lead.shape[0]):
        if point_station[p] != before:
            continue
        first = 0  # the point's first pending attempt; the vehicles stopping there are gathered only if there is one
        while first < point.shape[0] and (point[first] != p or outcome[first] != pending):
            first += 1
        if first == point.shape[0]:
            continue
        lead = point_lead[p]
        position, stop_vehicle, stop_class, stop_band = stopping_vehicles(
            rows, stops[p], vehicle_class, next_arrival, lead, band_of_hour
        )
        for a in range(first, point.shape[0]):
            if point[a] != p or outcome[a] != pending:
                continue
            choices = fitting_vehicles(
                position, stop_vehicle, stop_class, stop_band, capacity, aboard, want_class[a], want_band[a], size[a]
            )
            if choices.shape[0] == 0:
                outcome[a] = no_vehicle
                continue
            pick = choices[rng.integers(0, choices.shape[0])]
            v = rows[pick]
            aboard[v] += size[a]
            depth[v] = max(depth[v], want_depth[a])
            vehicle[a] = v
            minute[a] = next_arrival[pick] - lead
