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

First-in-first-out holds across midnight through a :class:`FifoCarry`: the
checks of earlier days that start after the new day begins, with their
arrivals. A vehicle of the new day starts no earlier than any of those that
arrived before it; those that arrived after it do not hold it back (it was
ahead of them in the queue). Those that arrived before it and start after it
arrives are in the queue it finds, so the queue-aware rule counts them.
Lanes, though, keep their next free minute, so a lane busy with an earlier
day's late check cannot be used before that check ends, even by a vehicle
that arrived before it: the one approximation left at the day boundary.

:func:`station_pass` wraps the recursion in a station's whole pass over a day
(arrival order, selection chances, detection, alarms, referral, counts, the
tally by hour of :func:`tally_pass`); its typed front is
:func:`abm.port.station.check_station`. It lives here, beside the functions it
calls, because numba caches a compiled function by its own file only.

Compiled with numba: a plain-Python loop costs about as much as a generic
event simulator, which would dominate a simulated year.
"""

from __future__ import annotations

from dataclasses import dataclass

import numba
import numpy as np

from .layout import RULES
from .traffic import MINUTES_PER_DAY

MINUTES_PER_HOUR = 60.0
HOURS_PER_DAY = 24
TARGETED, QUEUE_AWARE = RULES.index("targeted"), RULES.index("queue_aware")

# Rows of the per-method counters a day accumulates (one column per method x cargo type).
METHOD_COUNTERS = (
    "checks",
    "alarms",
    "false_alarms",  # alarms logged false: nothing found after them
    "check_minutes",
    "truth_occupied_checks",
    "truth_found",
    "truth_true_alarms",
    "truth_false_alarms",
)
_CHECKS, _ALARMS, _LOGGED_FALSE, _MINUTES, _OCCUPIED, _FOUND, _TRUE_ALARMS, _FALSE_ALARMS = range(8)


NEVER = 1 << 30  # hours until a lane that is never on duty comes on duty


@dataclass
class FifoCarry:
    """A station's checks from earlier days that start after the current day begins.

    ``arrival`` is ascending and ``start`` is each check's start. A new vehicle
    arriving at minute a starts no earlier than the latest ``start`` among those
    with ``arrival`` <= a, and finds in the queue those among them with ``start`` > a.
    """

    arrival: np.ndarray
    start: np.ndarray

    @classmethod
    def empty(cls) -> "FifoCarry":
        return cls(np.zeros(0), np.zeros(0))


@numba.njit(cache=True)
def duty_tables(staffed: np.ndarray, lanes: int) -> tuple[np.ndarray, np.ndarray]:
    """Per lane and hour of the day: hours until the lane is on duty, and how long it then stays on.

    ``staffed[h]`` (24 entries) is the number of lanes on duty in hour h; lane
    L is on duty when ``staffed[h] > L``. ``until_on[L, h]`` is 0 when on duty,
    :data:`NEVER` for a lane never on duty; ``stays_on[L, h]`` counts the
    consecutive on-duty hours from h (24: on duty all day).
    """
    until_on = np.full((lanes, 24), NEVER, dtype=np.int64)
    stays_on = np.zeros((lanes, 24), dtype=np.int64)
    for lane in range(lanes):
        for h in range(24):
            for k in range(24):
                if staffed[(h + k) % 24] > lane:
                    until_on[lane, h] = k
                    break
            run = 0
            while run < 24 and staffed[(h + run) % 24] > lane:
                run += 1
            stays_on[lane, h] = run
    return until_on, stays_on


@numba.njit(cache=True)
def earliest_fit(
    t: float, duration: float, lane: int, until_on: np.ndarray, stays_on: np.ndarray, origin: float
) -> float:
    """Earliest minute >= t at which ``lane`` is on duty for ``duration`` minutes without a break.

    The roster (as :func:`duty_tables`) is that of the day that starts at
    ``origin`` and repeats on later days, so a backlog of any length is served.
    Returns inf when the lane is never on duty long enough: if no stretch
    within two days fits, none ever will.
    """
    h = max(int((t - origin) // MINUTES_PER_HOUR), 0)
    last = h + 48
    while True:
        wait = until_on[lane, h % 24]
        if wait == NEVER:
            return np.inf
        h += wait
        if h >= last:
            return np.inf
        begin = max(t, origin + h * MINUTES_PER_HOUR)
        run = stays_on[lane, h % 24]
        if run == 24 or begin + duration <= origin + (h + run) * MINUTES_PER_HOUR:
            return begin  # on duty all day, or the check fits before the lane goes off duty
        h += run


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
    carry: FifoCarry | None = None,
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

    ``carry`` (see :class:`FifoCarry`) is replaced by this day's: passed from day
    to day it keeps first-in-first-out across midnight, so nobody of a new day
    starts before a vehicle of an earlier day that arrived before it.

    Returns start, end (both equal to arrival for unchecked vehicles), a checked
    flag and a busy flag. An unservable vehicle (no lane ever fits) gets start inf.
    """
    # A plain entry point with four results: callers (and tests that wrap it) stay as they were.
    if worked is None:
        worked = np.zeros(free.shape[0])
    if worked_at_start is None:
        worked_at_start = np.zeros(arrival.shape[0])
    if carry is None:
        carry = FifoCarry.empty()
    start, end, checked, busy, carry.arrival, carry.start = _serve(
        arrival, service, busy_service, u_select, p_normal, p_busy, queue_threshold, staffed, origin, free,
        worked, float(work_limit), float(rest_minutes), worked_at_start, carry.arrival, carry.start,
    )  # fmt: skip
    return start, end, checked, busy


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
    carry_arrival: np.ndarray,
    carry_start: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The compiled recursion behind :func:`serve_fifo` (same arguments, all given, the carry unpacked).

    Returns start, end, checked, busy and the next day's carry (arrival, start).
    """
    n = arrival.shape[0]
    start = arrival.copy()
    end = arrival.copy()
    checked = np.zeros(n, dtype=np.bool_)
    busy = np.zeros(n, dtype=np.bool_)
    starts = np.empty(n)  # starts of checked vehicles, non-decreasing by FIFO
    n_checked = 0
    head = 0  # first checked vehicle whose check has not begun at the current arrival
    last_start = -np.inf
    earlier = 0  # carried checks whose vehicles arrived at or before the current arrival
    n_carry = carry_arrival.shape[0]
    carried_bound = -np.inf  # latest start among those
    carried_until = carry_start.max() if n_carry else -np.inf  # after this every carried check has begun
    lanes = free.shape[0]
    until_on, stays_on = duty_tables(staffed, lanes)
    for i in range(n):
        a = arrival[i]
        while head < n_checked and starts[head] <= a:
            head += 1
        while earlier < n_carry and carry_arrival[earlier] <= a:
            carried_bound = max(carried_bound, carry_start[earlier])
            earlier += 1
        queued = n_checked - head
        if queue_threshold > 0 and a < carried_until:
            for j in range(earlier):  # a handful of vehicles, and only just after midnight
                if carry_start[j] > a:
                    queued += 1
        is_busy = queue_threshold > 0 and queued >= queue_threshold
        p = p_busy[i] if is_busy else p_normal[i]
        if not u_select[i] < p:
            continue
        duration = busy_service[i] if is_busy else service[i]
        best_t = np.inf
        best_lane = -1
        ready = max(a, last_start, carried_bound)
        for lane in range(lanes):
            earliest = max(ready, free[lane])
            if earliest >= best_t:
                continue  # this lane cannot start before the best found so far
            t = earliest_fit(earliest, duration, lane, until_on, stays_on, origin)
            if t < best_t:
                best_t = t
                best_lane = lane
                if t == ready:
                    break  # no lane can start earlier, and ties go to the lowest lane
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
    next_origin = origin + MINUTES_PER_DAY
    next_arrival, next_start = _next_carry(carry_arrival, carry_start, arrival, start, checked, next_origin)
    return start, end, checked, busy, next_arrival, next_start


@numba.njit(cache=True)
def _next_carry(
    carry_arrival: np.ndarray,
    carry_start: np.ndarray,
    arrival: np.ndarray,
    start: np.ndarray,
    checked: np.ndarray,
    next_origin: float,
) -> tuple[np.ndarray, np.ndarray]:
    """The carry for the day starting at ``next_origin``: every check starting after it, in arrival order."""
    keep_old = carry_start > next_origin
    keep_new = checked & (start > next_origin)
    n_old, n_new = int(keep_old.sum()), int(keep_new.sum())
    arrivals = np.empty(n_old + n_new)
    starts = np.empty(n_old + n_new)
    arrivals[:n_old] = carry_arrival[keep_old]
    starts[:n_old] = carry_start[keep_old]
    arrivals[n_old:] = arrival[keep_new]
    starts[n_old:] = start[keep_new]
    order = np.argsort(arrivals, kind="mergesort")
    return arrivals[order], starts[order]


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
    interval spans, where numpy would need a dozen calls a station and day (see ``bench/engine.py``); :func:`station_pass` calls it for the records."""
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


@numba.njit(cache=True)
def arrival_order(arrival: np.ndarray) -> np.ndarray:
    """``np.argsort(arrival, kind="stable")``: ties keep their order.

    A station's arrivals come nearly sorted (vehicles leave the station before
    it in their order, bar those held by a check), so an insertion sort moves
    few entries and beats numpy's sort of the same array. Past a budget of
    moves (arrivals far from sorted) it hands over to a merge sort.
    """
    n = arrival.shape[0]
    order = np.arange(n)
    budget = 16 * n
    for i in range(1, n):
        a = arrival[i]
        j = i
        while j > 0 and arrival[order[j - 1]] > a:
            order[j] = order[j - 1]
            j -= 1
        order[j] = i
        budget -= i - j
        if budget < 0:
            return np.argsort(arrival, kind="mergesort")
    return order


@numba.njit(cache=True)
def station_pass(
    rows, arrival, vclass, cargo, aboard, depth, ready, referred, alarm_station, alarm_method, alarm_hit,
    service, busy_service, u_select, risk_noise, u_detect, u_false,
    station, rule, secondary, stands_down, threshold, noise_sd,
    fraction, busy_fraction, queue_threshold, main, busy_method, refer, work_limit, rest_minutes,
    class_risk, service_factor, detect, cargo_detect, depth_detect, fatigue_decay, false_alarm, cargo_false,
    staffed, origin, free, worked, carry_arrival, carry_start, counters, n_stations,
):  # fmt: skip
    """A station's pass over the day's vehicles: the compiled body of :func:`abm.port.station.check_station`.

    Takes that function's arguments unpacked (its dataclasses' fields in
    order, the carry as its two arrays), and returns :class:`abm.port.station.StationPass`'s
    fields in order (``rows`` and ``arrival`` sorted by arrival, ties in the order given), the pass's
    tally by hour (:func:`tally_pass`) and the next day's carry (arrival, start).
    """
    order = arrival_order(arrival)
    rows = rows[order]
    arrive = arrival[order]
    n = rows.shape[0]
    n_classes, n_methods, n_cargo = service_factor.shape[1], service_factor.shape[0], service_factor.shape[2]
    queue_aware = rule == QUEUE_AWARE and not secondary
    p_normal = np.empty(n)
    p_busy = np.empty(n)
    duration = np.empty(n)
    busy_duration = np.empty(n)
    u_sel = np.empty(n)
    for i in range(n):
        r = rows[i]
        c = vclass[r]
        k = cargo[r]
        hour = int(np.floor((arrive[i] - origin) / 60.0))
        hour = max(hour, 0) % 24
        if stands_down:
            p = 0.0
        elif secondary:
            p = 1.0
        elif rule == TARGETED:
            p = 1.0 if class_risk[c] + noise_sd * risk_noise[r] > threshold else 0.0
        else:
            p = fraction[hour, c]
        p_normal[i] = p
        p_busy[i] = busy_fraction[hour, c] if (queue_aware and not stands_down) else p
        duration[i] = service[r] * service_factor[main, c, k]
        busy_duration[i] = busy_service[r] * service_factor[busy_method, c, k]
        u_sel[i] = u_select[r]
    worked_at_start = np.zeros(n)
    start, end, checked, busy, next_arrival, next_start = _serve(
        arrive, duration, busy_duration, u_sel, p_normal, p_busy, queue_threshold if queue_aware else 0,
        staffed, origin, free, worked, work_limit, rest_minutes, worked_at_start, carry_arrival, carry_start,
    )  # fmt: skip

    method = np.empty(n, dtype=np.int64)
    alarm = np.zeros(n, dtype=np.bool_)
    hit = np.zeros(n, dtype=np.bool_)
    logged_false = np.zeros(n, dtype=np.bool_)
    key = np.empty(n, dtype=np.int64)
    for i in range(n):
        r = rows[i]
        c = vclass[r]
        k = cargo[r]
        m = busy_method if busy[i] else main
        method[i] = m
        occupied = aboard[r] > 0
        if checked[i] and occupied:
            p = detect[m, c] * cargo_detect[m, k] * depth_detect[m, depth[r]] * np.exp(-worked_at_start[i] / fatigue_decay[m])
            hit[i] = u_detect[r] < min(p, 1.0)
        if secondary:
            alarm[i] = hit[i]
            logged_false[i] = not hit[i] and not alarm_hit[r]
            referred[r] = -1
            if logged_false[i]:
                counters[_LOGGED_FALSE, alarm_method[r] * n_cargo + cargo[r]] += 1.0
        else:
            if checked[i]:
                p = false_alarm[m] * cargo_false[m, k]
                alarm[i] = hit[i] or u_false[r] < min(p, 1.0)
            if refer >= 0:
                if alarm[i]:
                    referred[r] = refer
                    alarm_station[r] = station
                    alarm_method[r] = m
                    alarm_hit[r] = hit[i]
            else:
                logged_false[i] = alarm[i] and not hit[i]
                if logged_false[i]:
                    counters[_LOGGED_FALSE, m * n_cargo + k] += 1.0
        if checked[i]:
            col = m * n_cargo + k
            counters[_CHECKS, col] += 1.0
            counters[_ALARMS, col] += alarm[i]
            counters[_MINUTES, col] += end[i] - start[i]
            counters[_OCCUPIED, col] += occupied
            counters[_FOUND, col] += hit[i]
            counters[_TRUE_ALARMS, col] += alarm[i] and occupied
            counters[_FALSE_ALARMS, col] += alarm[i] and not occupied
        if hit[i]:
            aboard[r] = 0
            depth[r] = 0
        ready[r] = end[i]
        # vehicles are counted by the hour they reach the station, so passes per hour do not depend on policy
        cal_day = int(np.floor(arrive[i] / MINUTES_PER_DAY))
        clock_hour = int(np.floor(arrive[i] / 60.0)) % 24
        key[i] = (((cal_day * 24 + clock_hour) * n_stations + station) * n_classes + c) * n_methods + m
    wait = np.empty(int(checked.sum()))
    unservable = False
    k = 0
    for i in range(n):
        if checked[i]:
            wait[k] = start[i] - arrive[i]
            unservable = unservable or np.isinf(start[i])
            k += 1
    tally = tally_pass(arrive, start, end, checked, int(origin // MINUTES_PER_HOUR), HOURS_PER_DAY)
    fields = (rows, arrive, start, end, checked, method, alarm, hit, logged_false, key, wait, unservable)
    return fields, tally, (next_arrival, next_start)
