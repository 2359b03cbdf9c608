"""Which passing vehicles a group can board at a boarding point, compiled.

A group boards one vehicle, taken at random among those that stop at the
point, are of the class it chose, pass in the band it chose and have room for
the whole group. The vehicles that stop at a point, with their class and the
band they pass it in, are gathered once per point and day
(:func:`stopping_vehicles`); each attempt then scans only those
(:func:`fitting_vehicles`). Both scans count instead of branching: the flags
are random, so a branch per vehicle is mispredicted about as often as not,
which had made a scan over the day's vehicles cost three times its arithmetic.
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
