"""Departures: the week's timetable as arrays, and the places left on each day's departures.

A world's departures (sailings, trains, convoys or slots) become, per weekday,
arrays of departure minute, capacity in vehicles and in metres, check-in
cut-off, and chances of delay and cancellation. A vehicle that has cleared the
last station leaves on the first departure whose check-in it makes (it checks in
at or before the cut-off) and that has room for it: one place, and its class's
length where the departure is measured in metres. It is *booked* on the first
departure whose check-in closes at or after its arrival plus
``planned_minutes``, whatever the room: a vehicle that leaves later than booked
(a full or cancelled departure, or checks that took too long) missed it.

A late departure closes check-in at its timetabled time but leaves late; a
cancelled one takes nobody. Delays and cancellations come from a stream of
their own, drawn for each day of departures when it first comes into view, in
a fixed amount per departure, and only in a world that sets
them, so a world without them draws nothing and keeps its records.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numba
import numpy as np

from ..world.schema import World
from ..world.timetable import Departures
from .checks import sample_duration
from .layout import DISTS
from .tallies import departure_counts
from .traffic import MINUTES_PER_DAY

HORIZON_DAYS = 7  # departures are looked up this many days ahead of the arrival day


@dataclass(frozen=True)
class Timetable:
    """Every weekday's departures as arrays, minute ascending (weekday = day % 7; day 0 is a Monday)."""

    minute: tuple[np.ndarray, ...]  # (7,) of (K_w,) minute of day
    capacity: tuple[np.ndarray, ...]  # vehicles; inf where only metres count
    metres: tuple[np.ndarray, ...]  # metres of vehicles; inf where only vehicles count
    cutoff: tuple[np.ndarray, ...]  # minutes before departure that check-in closes
    cancel: tuple[np.ndarray, ...]  # chance of cancellation
    delay_chance: tuple[np.ndarray, ...]
    delay_dist: tuple[np.ndarray, ...]  # index into DISTS
    delay_mean: tuple[np.ndarray, ...]
    delay_cv: tuple[np.ndarray, ...]
    delay_spread: tuple[np.ndarray, ...]
    planned: float  # minutes from arrival to check-in a vehicle books by
    class_length: np.ndarray  # (C,) metres; 0 where departures are not measured in metres

    @cached_property
    def empty(self) -> bool:
        """True for a crossing whose vehicles leave as soon as they are cleared."""
        return all(m.shape[0] == 0 for m in self.minute)

    @cached_property
    def random(self) -> bool:
        """True when some departure may be late or cancelled (and random numbers are drawn)."""
        return any((c > 0).any() for c in self.cancel) or any((d > 0).any() for d in self.delay_chance)


def build_timetable(world: World) -> Timetable:
    """The week's departures of ``world`` as arrays (an empty timetable for a land border)."""
    dep = world.departures
    rows = _rows(dep) if dep is not None else []
    by_day = [[r for r in rows if r[0] == w] for w in range(7)]

    def column(k: int, dtype: type = float) -> tuple[np.ndarray, ...]:
        return tuple(np.array([r[k] for r in day], dtype=dtype) for day in by_day)

    metric = dep is not None and np.isfinite(np.array([r[3] for r in rows])).any()
    return Timetable(
        minute=column(1), capacity=column(2), metres=column(3), cutoff=column(4), cancel=column(5),
        delay_chance=column(6), delay_dist=column(7, np.int64), delay_mean=column(8), delay_cv=column(9),
        delay_spread=column(10), planned=dep.planned_minutes if dep is not None else 0.0,
        class_length=np.array([(c.length_metres or 0.0) if metric else 0.0 for c in world.vehicle_classes]),
    )


def _rows(dep: Departures) -> list[tuple]:
    """One tuple per departure of the week: its weekday, minute and resolved terms."""
    rows = []
    for weekday, minute, terms in dep.week():
        capacity = terms.capacity if terms.capacity is not None else dep.capacity
        metres = terms.length_metres if terms.length_metres is not None else dep.length_metres
        delay = terms.delay if terms.delay is not None else dep.delay
        rows.append((
            weekday, float(minute), np.inf if capacity is None else float(capacity),
            np.inf if metres is None else float(metres),
            terms.cutoff_minutes if terms.cutoff_minutes is not None else dep.cutoff_minutes,
            terms.cancellation if terms.cancellation is not None else dep.cancellation,
            delay.chance if delay else 0.0, DISTS.index(delay.dist) if delay else 0,
            delay.mean if delay else 1.0, delay.cv if delay else 0.0, delay.spread if delay else 0.0,
        ))
    return rows


@dataclass
class DayDepartures:
    """Departures of one or more calendar days: when they close and leave, and the room left on them."""

    scheduled: np.ndarray  # absolute minute it is timetabled to leave
    close: np.ndarray  # absolute minute check-in closes
    leave: np.ndarray  # absolute minute it leaves (timetabled time plus any delay)
    places: np.ndarray  # vehicles it can still take
    metres: np.ndarray  # metres it can still take
    cancelled: np.ndarray  # bool


@dataclass(frozen=True)
class Departed:
    """Where one day's cleared vehicles went: leave minute and missed flag per vehicle."""

    leave: np.ndarray  # absolute minute; NaN for a vehicle no departure in the horizon had room for
    missed: np.ndarray  # bool: left later than booked, or stranded
    counts: dict[str, np.ndarray] | None = None  # per departure in view (departure_counts); None without departures


class DepartureBoard:
    """The departures in view from each day, carrying room left between days.

    The days in view are kept as one array per field, days ascending (``_sizes``
    departures each from day ``_first``): each new day drops the day gone and
    appends the day that comes into view, rather than joining a week of days anew.
    """

    _FIELDS = ("scheduled", "close", "leave", "places", "metres", "cancelled")

    def __init__(self, timetable: Timetable, rng: np.random.Generator) -> None:
        self.timetable = timetable
        self.rng = rng
        self._first = 0  # first day in view
        self._sizes: list[int] = []  # departures of each day in view
        self._view = DayDepartures(*(np.zeros(0, dtype=bool if f == "cancelled" else float) for f in self._FIELDS))

    def change_timetable(self, timetable: Timetable) -> None:
        """Take a changed timetable from the next day that comes into view; days already in view keep theirs."""
        self.timetable = timetable

    def _day(self, day: int) -> DayDepartures:
        """A day's departures as they come into view (with their delays and cancellations drawn)."""
        tt, w = self.timetable, day % 7
        minute = day * MINUTES_PER_DAY + tt.minute[w]
        k = minute.shape[0]
        cancelled, late = np.zeros(k, dtype=bool), np.zeros(k)
        if tt.random:  # three numbers per departure, drawn whether or not this one is late or cancelled
            u_cancel, u_late = self.rng.random(k), self.rng.random(k)
            unit = np.array([sample_duration(DISTS[tt.delay_dist[w][i]], tt.delay_mean[w][i], tt.delay_cv[w][i],
                                             tt.delay_spread[w][i], 1, self.rng)[0] for i in range(k)])
            cancelled = u_cancel < tt.cancel[w]
            late = np.where(u_late < tt.delay_chance[w], unit, 0.0)
        return DayDepartures(
            scheduled=minute, close=minute - tt.cutoff[w], leave=minute + late,
            places=np.where(cancelled, 0.0, tt.capacity[w]), metres=np.where(cancelled, 0.0, tt.metres[w]),
            cancelled=cancelled,
        )

    def _in_view(self, day: int) -> DayDepartures:
        """The departures of days ``day`` to ``day + HORIZON_DAYS - 1``, drawing the days that come into view."""
        gone = 0
        while self._sizes and self._first < day:
            gone += self._sizes.pop(0)
            self._first += 1
        if not self._sizes:
            self._first = day
        new = [self._day(d) for d in range(self._first + len(self._sizes), day + HORIZON_DAYS)]
        self._sizes += [d.close.shape[0] for d in new]
        view = self._view
        self._view = DayDepartures(
            *(np.concatenate([getattr(view, f)[gone:], *(getattr(d, f) for d in new)]) for f in self._FIELDS)
        )
        return self._view

    def depart(self, day: int, arrival: np.ndarray, ready: np.ndarray, vehicle_class: np.ndarray) -> Departed:
        """Put the day's vehicles, ready for check-in at ``ready``, on departures; update the room left."""
        tt = self.timetable
        if tt.empty:
            return Departed(leave=ready, missed=np.zeros(ready.shape[0], dtype=bool))
        view = self._in_view(day)
        order = np.argsort(ready, kind="stable")
        leave, missed, *counted = depart_vehicles(
            order, ready, arrival, vehicle_class, tt.class_length, tt.planned, view.close, view.places, view.metres,
            view.leave,
        )  # fmt: skip
        shortest = float(tt.class_length.min()) if tt.class_length.size else 0.0
        counts = departure_counts(
            view.scheduled, *counted, view.places, view.metres, view.leave - view.scheduled, view.cancelled,
            (view.places < 1.0) | (view.metres < max(shortest, 1e-9)),
        )  # for the records; no draws
        return Departed(leave=leave, missed=missed, counts=counts)


@numba.njit(cache=True)
def depart_vehicles(order, ready, arrival, vehicle_class, class_length, planned, close, places, metres, leave_at):  # fmt: skip
    """Board the day's vehicles in ``order`` (``ready`` ascending, ties in vehicle order) with
    :func:`board_departures`, then settle them with :func:`settle_departures`, in one compiled call.

    ``places`` and ``metres`` are updated in place. Returns :func:`settle_departures`'s results.
    """
    n = order.shape[0]
    ready_sorted = np.empty(n)
    length_sorted = np.empty(n)
    for j in range(n):
        ready_sorted[j] = ready[order[j]]
        length_sorted[j] = class_length[vehicle_class[order[j]]]
    chosen_sorted = board_departures(ready_sorted, length_sorted, close, places, metres)
    chosen = np.empty(n, dtype=np.int64)
    for j in range(n):
        chosen[order[j]] = chosen_sorted[j]
    return settle_departures(arrival, planned, close, chosen, leave_at)


@numba.njit(cache=True)
def board_departures(
    ready: np.ndarray, length: np.ndarray, close: np.ndarray, places: np.ndarray, metres: np.ndarray
) -> np.ndarray:
    """Put vehicles (sorted by check-in time) on the first departure they can make that has room.

    A vehicle makes a departure when it checks in at or before its ``close``;
    it needs one place and ``length`` metres. ``places`` and ``metres`` are
    updated in place. Returns the departure index per vehicle, -1 when no
    departure in the horizon has room.
    """
    n, k_all = ready.shape[0], close.shape[0]
    chosen = np.full(n, -1, dtype=np.int64)
    k0 = 0
    for i in range(n):
        # a check-in that closed before this vehicle's stays closed for later ones (ready ascends)
        while k0 < k_all and close[k0] < ready[i]:
            k0 += 1
        k = k0
        while k < k_all and (close[k] < ready[i] or places[k] < 1.0 or metres[k] < length[i]):
            k += 1
        if k < k_all:
            places[k] -= 1.0
            metres[k] -= length[i]
            chosen[i] = k
    return chosen


@numba.njit(cache=True)
def settle_departures(arrival: np.ndarray, planned: float, close: np.ndarray, chosen: np.ndarray, leave_at: np.ndarray):  # fmt: skip
    """Each vehicle's leave minute and whether it missed its booked departure, and per departure in view
    the vehicles booked on it, that left on it and that missed it.

    ``arrival`` ascends; ``close`` are the departures' check-in closes (they need not ascend: a vehicle is
    booked on the first departure whose check-in closes at or after ``arrival + planned``, among the running
    maximum of the closes); ``chosen`` is each vehicle's departure (-1: stranded) and ``leave_at`` each
    departure's leaving minute. A booked index past the end means no departure in view. A vehicle missed
    its booked departure when it left on a later one or not at all, as the daily missed-departure share counts it.
    Returns leave (NaN when stranded), missed, and the booked, left and missed counts.
    """
    k, n = close.shape[0], arrival.shape[0]
    latest = np.empty(k)
    running = -np.inf
    for j in range(k):
        running = max(running, close[j])
        latest[j] = running
    booked = np.searchsorted(latest, arrival + planned)
    leave = np.empty(n)
    missed = np.empty(n, dtype=np.bool_)
    booked_count = np.zeros(k, dtype=np.int64)
    left_count = np.zeros(k, dtype=np.int64)
    missed_count = np.zeros(k, dtype=np.int64)
    for i in range(n):
        stranded = chosen[i] < 0
        leave[i] = np.nan if stranded else leave_at[chosen[i]]
        missed[i] = stranded or chosen[i] > booked[i]
        if not stranded:
            left_count[chosen[i]] += 1
        if booked[i] < k:
            booked_count[booked[i]] += 1
            missed_count[booked[i]] += missed[i]
    return leave, missed, booked_count, left_count, missed_count
