"""Exact first-in-first-out multi-server queues over a station's arrival stream.

The recursion walks vehicles in arrival order and keeps each lane's next free
minute. A lane is on duty in hour ``h`` when its index is below the roster's
staffed count for that hour, and a lane only starts a check it can finish
before it goes off duty (so busy lanes never exceed the roster). Checks start
in arrival order (strict FIFO: nobody overtakes the head of the queue).

Selection happens inside the recursion because the queue-aware rule needs the
queue length (vehicles waiting, not yet in a check) at each arrival.

Lanes may also tire (dog teams): each lane keeps the minutes it has worked
since its last rest. A lane that has worked ``work_limit`` minutes or more when
a check ends rests ``rest_minutes`` before its next check (a check in progress
is finished, not split); any gap of ``rest_minutes`` or more between a lane's
checks (idle or off duty) also counts as a rest. The minutes worked at the
start of each check are returned so the caller can set that check's sensitivity.
With infinite limits (the default) nothing rests and the queue is the plain one.

Compiled with numba: a plain-Python loop costs about as much as a generic
event simulator, which would dominate a simulated year.
"""

from __future__ import annotations

import numba
import numpy as np

MINUTES_PER_HOUR = 60.0


@numba.njit(cache=True)
def earliest_fit(t: float, duration: float, lane: int, staffed: np.ndarray, origin: float) -> float:
    """Earliest minute >= t at which ``lane`` is on duty for ``duration`` minutes without a break.

    ``staffed[h]`` (24 entries) is the number of lanes on duty in hour h of the
    day that starts at ``origin``; the pattern repeats on later days, so a
    backlog of any length is served. Returns inf when the lane is never on duty
    long enough: if no stretch within two days fits, none ever will.
    """
    h = max(int((t - origin) // MINUTES_PER_HOUR), 0)
    first = h
    while h < first + 48:
        if staffed[h % 24] <= lane:
            h += 1
            continue
        begin = max(t, origin + h * MINUTES_PER_HOUR)
        stop = h + 1
        while stop < h + 24 and staffed[stop % 24] > lane:
            stop += 1
        if stop == h + 24 or begin + duration <= origin + stop * MINUTES_PER_HOUR:
            return begin  # on duty all day, or the check fits before the lane goes off duty
        h = stop
    return np.inf


def serve_fifo(
    arrival: np.ndarray,
    service: np.ndarray,
    busy_service: np.ndarray,
    u_select: np.ndarray,
    p_normal: np.ndarray,
    p_busy: np.ndarray,
    queue_threshold: int,
    staffed: np.ndarray,
    origin: float,
    free: np.ndarray,
    worked: np.ndarray | None = None,
    work_limit: float = np.inf,
    rest_minutes: float = np.inf,
    worked_at_start: np.ndarray | None = None,
    *,
    floor: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Run one station's queue for a day's arrivals (sorted ascending).

    A vehicle is checked when ``u_select < p`` where p is ``p_normal`` or, when the
    queue at its arrival holds ``queue_threshold`` or more (and the threshold is
    positive), ``p_busy``; a vehicle checked while busy takes ``busy_service``.
    ``free`` (one entry per physical lane, absolute minutes) carries the lanes'
    state between days and is updated in place; ``staffed`` is the day's 24-hour roster.

    Resting lanes: ``worked`` (minutes per lane since its last rest, updated in
    place like ``free``), ``work_limit`` and ``rest_minutes`` as in the module
    docstring; ``worked_at_start`` (one entry per vehicle) receives, for each
    checked vehicle, its lane's minutes worked when the check starts.

    ``floor`` (one entry, absolute minutes) is the start of the station's last
    check, updated in place: passed from day to day it keeps first-in-first-out
    across midnight, so nobody of a new day starts before a late vehicle of the
    day before that is still queueing.

    Returns start, end (both equal to arrival for unchecked vehicles), a checked
    flag and a busy flag. An unservable vehicle (no lane ever fits) gets start inf.
    """
    # A plain entry point with four results: callers (and tests that wrap it) stay as they were.
    if worked is None:
        worked = np.zeros(free.shape[0])
    if worked_at_start is None:
        worked_at_start = np.zeros(arrival.shape[0])
    if floor is None:
        floor = np.full(1, -np.inf)
    return _serve(
        arrival, service, busy_service, u_select, p_normal, p_busy, queue_threshold, staffed, origin, free,
        worked, float(work_limit), float(rest_minutes), worked_at_start, floor,
    )  # fmt: skip


@numba.njit(cache=True)
def _serve(
    arrival: np.ndarray,
    service: np.ndarray,
    busy_service: np.ndarray,
    u_select: np.ndarray,
    p_normal: np.ndarray,
    p_busy: np.ndarray,
    queue_threshold: int,
    staffed: np.ndarray,
    origin: float,
    free: np.ndarray,
    worked: np.ndarray,
    work_limit: float,
    rest_minutes: float,
    worked_at_start: np.ndarray,
    floor: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The compiled recursion behind :func:`serve_fifo` (same arguments, all given)."""
    n = arrival.shape[0]
    start = arrival.copy()
    end = arrival.copy()
    checked = np.zeros(n, dtype=np.bool_)
    busy = np.zeros(n, dtype=np.bool_)
    starts = np.empty(n)  # starts of checked vehicles, non-decreasing by FIFO
    n_checked = 0
    head = 0  # first checked vehicle whose check has not begun at the current arrival
    last_start = floor[0]
    lanes = free.shape[0]
    for i in range(n):
        a = arrival[i]
        while head < n_checked and starts[head] <= a:
            head += 1
        is_busy = queue_threshold > 0 and (n_checked - head) >= queue_threshold
        p = p_busy[i] if is_busy else p_normal[i]
        if not u_select[i] < p:
            continue
        duration = busy_service[i] if is_busy else service[i]
        best_t = np.inf
        best_lane = -1
        ready = max(a, last_start)
        for lane in range(lanes):
            t = earliest_fit(max(ready, free[lane]), duration, lane, staffed, origin)
            if t < best_t:
                best_t = t
                best_lane = lane
        checked[i] = True
        busy[i] = is_busy
        start[i] = best_t
        end[i] = best_t + duration
        if best_lane >= 0:
            # a long enough gap since the lane's last check was a rest
            done = 0.0 if best_t - free[best_lane] >= rest_minutes else worked[best_lane]
            worked_at_start[i] = done
            done += duration
            free[best_lane] = best_t + duration
            if done >= work_limit:
                free[best_lane] += rest_minutes
                done = 0.0
            worked[best_lane] = done
            last_start = best_t
        starts[n_checked] = best_t
        n_checked += 1
    floor[0] = last_start
    return start, end, checked, busy


@numba.njit(cache=True)
def board_sailings(
    ready: np.ndarray, sailing_time: np.ndarray, remaining: np.ndarray, cutoff: float
) -> np.ndarray:
    """Put vehicles (sorted by check-in time) on the first sailing they can make that has room.

    A vehicle makes a sailing when it checks in at least ``cutoff`` minutes before
    departure. ``remaining`` is updated in place. Returns the sailing index per
    vehicle, -1 when no sailing in the horizon has room.
    """
    n = ready.shape[0]
    chosen = np.full(n, -1, dtype=np.int64)
    k0 = 0
    for i in range(n):
        # sailings whose cut-off passed before this vehicle's check-in stay passed for later ones
        while k0 < sailing_time.shape[0] and sailing_time[k0] - cutoff < ready[i]:
            k0 += 1
        k = k0
        while k < sailing_time.shape[0] and remaining[k] <= 0:
            k += 1
        if k < sailing_time.shape[0]:
            remaining[k] -= 1
            chosen[i] = k
    return chosen
