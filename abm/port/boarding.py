"""Which passing vehicles a group can board at a boarding point, compiled.

A group boards one vehicle, taken at random among those that stop at the
point, are of the class it chose, pass in the band it chose and have room for
the whole group. Finding them is one scan of the vehicles passing the point per
attempt, compiled into a single call: as a chain of numpy steps (or several
compiled calls) an attempt cost several times the scan itself.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True)
def fitting_vehicles(
    rows: np.ndarray,
    stops: np.ndarray,
    vehicle_class: np.ndarray,
    capacity: np.ndarray,
    aboard: np.ndarray,
    next_arrival: np.ndarray,
    lead: float,
    band_of_hour: np.ndarray,
    want_class: int,
    want_band: int,
    size: int,
) -> np.ndarray:
    """Positions ``i`` (ascending) into ``rows`` of the vehicles a group of ``size`` can board at a point.

    Vehicle ``rows[i]`` qualifies when it stops at the point (``stops``, one flag per vehicle of the day),
    is of class ``want_class``, has room for ``size`` more people (its class's ``capacity`` less those
    ``aboard``), and is at the point, ``lead`` minutes before it reaches the next station at
    ``next_arrival[i]``, in band ``want_band`` (``band_of_hour`` maps an hour of the day to its band).
    """
    found = np.empty(rows.shape[0], dtype=np.int64)
    k = 0
    for i in range(rows.shape[0]):
        r = rows[i]
        if not stops[r] or vehicle_class[r] != want_class or capacity[want_class] - aboard[r] < size:
            continue
        if band_of_hour[int(np.floor((next_arrival[i] - lead) / 60.0)) % 24] == want_band:
            found[k] = i
            k += 1
    return found[:k]
