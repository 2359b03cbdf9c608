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
def stopping_of_class(stops: np.ndarray, vehicle_class: np.ndarray, want_class: int) -> np.ndarray:
    """Positions (ascending) of passing vehicles that stop at the point and are of class ``want_class``."""
    found = np.empty(stops.shape[0], dtype=np.int64)
    k = 0
    for i in range(stops.shape[0]):
        if stops[i] and vehicle_class[i] == want_class:
            found[k] = i
            k += 1
    return found[:k]


@numba.njit(cache=True)
def fitting_vehicles(
    candidates: np.ndarray,
    at_point: np.ndarray,
    room: np.ndarray,
    band_of_hour: np.ndarray,
    want_band: int,
    size: int,
) -> np.ndarray:
    """The ``candidates`` (ascending positions) that pass in band ``want_band`` with room for ``size``.

    ``candidates`` come from :func:`stopping_of_class`; ``at_point`` (absolute minute each passing
    vehicle is at the point) and ``room`` are indexed by position;
    ``band_of_hour`` maps an hour of the day to its time band.
    """
    found = np.empty(candidates.shape[0], dtype=np.int64)
    k = 0
    for i in candidates:
        if room[i] >= size and band_of_hour[int(np.floor(at_point[i] / 60.0)) % 24] == want_band:
            found[k] = i
            k += 1
    return found[:k]
