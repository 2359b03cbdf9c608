"""Which passing vehicles a group can board at a boarding point, compiled.

A group boards one vehicle, taken at random among those that stop at the
point, are of the class it chose, pass in the band it chose and have room for
the whole group. Finding them is a scan of the day's vehicles per attempt;
compiled, it costs about as much as a single numpy comparison.
"""

from __future__ import annotations

import numba
import numpy as np


@numba.njit(cache=True)
def fitting_vehicles(
    stops: np.ndarray,
    vehicle_class: np.ndarray,
    at_point: np.ndarray,
    room: np.ndarray,
    band_of_hour: np.ndarray,
    want_class: int,
    want_band: int,
    size: int,
) -> np.ndarray:
    """Positions i (ascending) where vehicle i can take a group of ``size``.

    ``stops``, ``vehicle_class``, ``at_point`` (absolute minute the vehicle is
    at the point) and ``room`` are per passing vehicle; ``band_of_hour`` maps an
    hour of the day to its time band.
    """
    n = stops.shape[0]
    found = np.empty(n, dtype=np.int64)
    k = 0
    for i in range(n):
        if not stops[i] or vehicle_class[i] != want_class or room[i] < size:
            continue
        if band_of_hour[int(np.floor(at_point[i] / 60.0)) % 24] == want_band:
            found[k] = i
            k += 1
    return found[:k]
