"""Can the crossing carry its traffic? The offered load of every station and departure, before any run.

A world whose stations or departures cannot carry its traffic still simulates,
but its queues grow all day and its missed departures come from overload rather
than from checks; a policy comparison on such a baseline misleads. This module
works out, from the world file alone, on the busiest weekday:

- per station and time band, the offered load: vehicles arriving per hour x
  the share selected x the mean check time / the lanes on duty (lanes resting
  under fatigue rules count for the share of time they work). At or above 0.95
  a queue grows faster than it clears (common practice, no source: the usual
  planning ceiling for a multi-server queue; Erlang C waits grow without bound
  as the load reaches 1);
- per secondary station, the vehicles referred to it after an alarm (selected x
  false-alarm chance; detections are too rare to matter) against its lanes;
- per departure, the vehicles booked on it (those whose arrival plus
  ``planned_minutes`` falls before its cut-off and after the previous one's)
  against its places, on every weekday (the table shows the busiest), and the
  week's vehicles against the week's places.

It is a fluid estimate (means only): it misses the randomness that makes queues
long below a load of 1, and weather suspensions; the simulation has both.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.stats import norm

from ..world.references import hours_of
from ..world.schema import World
from ..world.timetable import WEEKDAYS
from ..world.words import GENERIC, Words, words_for
from .departures import build_timetable
from .layout import RULES, Layout, build_layout

OVERLOAD = 0.95  # offered load at which a station band is reported as overloaded
MINUTES_PER_DAY = 24 * 60


@dataclass(frozen=True)
class LoadReport:
    """The load of a world's stations and departures on its busiest weekday, with one warning per problem.

    ``stations`` has one row per station and time band (columns station, role,
    band, hours, arrivals_per_hour, lanes, load, busiest_hour_load; a load is NaN
    where nothing is checked and inf where vehicles are selected with no lane on
    duty); ``departures`` one row per departure (departure, window, booked,
    capacity, ratio).
    """

    world: str
    stations: pd.DataFrame
    departures: pd.DataFrame
    daily_arrivals: float
    daily_capacity: float | None  # None: vehicles leave on clearance
    warnings: list[str] = field(default_factory=list)
    words: Words = GENERIC

    @property
    def overloaded(self) -> bool:
        """True when some station band or departure cannot carry its traffic."""
        return bool(self.warnings)

    @property
    def overflow_share(self) -> float:
        """Share of the day's vehicles that miss their booked departure for want of places alone (fluid estimate)."""
        if self.departures.empty or not self.daily_arrivals:
            return 0.0
        short = (self.departures["booked"] - self.departures["capacity"]).clip(lower=0.0).sum()
        return float(short / self.daily_arrivals)

    def lines(self) -> list[str]:
        """The report as printed by ``undertow check``: stations, departures, then the warnings."""
        out = [f"Load on the busiest weekday ({self.daily_arrivals:,.0f} vehicles; fluid estimate, means only):"]
        out.append(f"  {'station':<22}{'band':<12}{'hours':<9}{'vehicles/h':>11}{'lanes':>7}{'load':>7}{'peak hour':>11}")
        for r in self.stations.itertuples():
            load = "none" if np.isnan(r.load) else ("no lane" if np.isinf(r.load) else f"{r.load:.2f}")
            peak = "" if np.isnan(r.busiest_hour_load) else (
                "no lane" if np.isinf(r.busiest_hour_load) else f"{r.busiest_hour_load:.2f}")
            out.append(f"  {r.station[:21]:<22}{r.band[:11]:<12}{r.hours:<9}{r.arrivals_per_hour:>11.1f}"
                       f"{r.lanes:>7.1f}{load:>7}{peak:>11}")
        if self.daily_capacity is None:
            out.append("  departures: none (vehicles leave as soon as they are cleared)")
        else:
            out.append(f"  {self.words.services}: {self.daily_capacity:,.0f} places on that day for "
                       f"{self.daily_arrivals:,.0f} vehicles")
            out.append(f"  {self.words.service:<11}{'ready from':<14}{'booked':>8}{'capacity':>10}{'ratio':>7}")
            for r in self.departures.itertuples():
                out.append(f"  {r.departure:<11}{r.window:<14}{r.booked:>8.0f}{r.capacity:>10.0f}{r.ratio:>7.2f}")
        out += self.warnings or ["  no station or departure is overloaded (load below 0.95, capacity above demand)"]
        return out


def _clock(minute: float) -> str:
    minute = int(round(minute)) % MINUTES_PER_DAY
    return f"{minute // 60:02d}:{minute % 60:02d}"


def expected_lanes(world: World) -> np.ndarray:
    """Lanes on duty per station and hour (stations x 24) as the roster sets them, capped at each station's lanes.

    Under ``randomised`` command a flexible team with postings counts as the
    weighted mean of its postings; ``reactive`` command moves lanes around the
    rostered total, so the roster is its mean.
    """
    names = world.station_names
    lanes = np.zeros((len(names), 24))
    randomised = world.roster.command == "randomised"
    for team in world.roster.teams:
        shifts = [(team.hours, team.lanes, 1.0)]
        if randomised and team.flexible and team.postings:
            total = sum(p.weight for p in team.postings)
            shifts = [(p.hours, p.lanes, p.weight / total) for p in team.postings] if total > 0 else []
        for hours, by_station, weight in shifts:
            for station, count in by_station.items():
                lanes[names.index(station), hours_of(hours)] += weight * count
    capacity = np.array([s.lanes for s in world.stations], dtype=float)
    return np.minimum(lanes, capacity[:, None])


def _cargo_means(lay: Layout, table: np.ndarray) -> np.ndarray:
    """A (methods x classes x cargo) factor averaged over each class's cargo shares: methods x classes."""
    shares = np.diff(lay.class_cargo_cum, axis=1, prepend=0.0)  # (C, K)
    return np.einsum("mck,ck->mc", table, shares)


def _selection(lay: Layout, s: int) -> np.ndarray:
    """Chance a vehicle of each class is selected at station s, per hour (24 x classes)."""
    if lay.station_rule[s] == RULES.index("targeted"):
        sd = lay.station_noise_sd[s]
        z = (lay.station_threshold[s] - lay.class_risk)
        chance = norm.sf(z / sd) if sd > 0 else (z < 0).astype(float)
        return np.broadcast_to(chance, (24, lay.n_classes))
    return lay.station_fraction[s]


def _station_rows(world: World, lay: Layout, rate: np.ndarray) -> tuple[list[dict], list[str]]:
    """Per station and band: arrivals, lanes and offered load; and a warning per overloaded band."""
    lanes = expected_lanes(world)
    service = lay.method_mean[:, None] * _cargo_means(lay, lay.method_service_factor)  # (M, C) minutes
    false_factor = _cargo_means(lay, np.broadcast_to(lay.method_cargo_false[:, None, :], lay.method_service_factor.shape))
    false_alarm = np.clip(lay.method_false_alarm[:, None] * false_factor, 0.0, 1.0)  # (M, C)
    work_minutes, rest_minutes = lay.method_work_minutes, lay.method_rest_minutes
    resting = np.isfinite(work_minutes)  # methods without fatigue rules carry inf here
    working = np.ones_like(work_minutes)
    working[resting] = work_minutes[resting] / (work_minutes[resting] + rest_minutes[resting])
    n_s = len(world.stations)
    arrivals = np.zeros((n_s, 24))  # vehicles/hour reaching each station for a check
    work = np.zeros((n_s, 24))  # check-minutes offered per hour
    for s in range(n_s):  # route order: a secondary's referrals come from stations before it
        m = lay.station_method[s]
        if lay.station_secondary[s]:
            work[s] = arrivals[s] * float(lay.class_share @ service[m])
            continue
        selected = rate[:, None] * lay.class_share[None, :] * _selection(lay, s)  # (24, C)
        arrivals[s] = selected.sum(axis=1)
        work[s] = selected @ service[m]
        if lay.station_refer[s] >= 0:
            arrivals[lay.station_refer[s]] += selected @ false_alarm[m]
    rows, warnings = [], []
    for s, station in enumerate(world.stations):
        m = lay.station_method[s]
        capacity = lanes[s] * 60.0 * working[m]  # check-minutes a station can give per hour
        with np.errstate(divide="ignore", invalid="ignore"):
            hourly = np.where(work[s] > 0, work[s] / capacity, np.nan)
        for b, band in enumerate(world.band_names):
            hours = np.flatnonzero(lay.band_of_hour == b)
            offered, given = work[s, hours].sum(), capacity[hours].sum()
            no_lane = offered > 0 and given == 0
            with np.errstate(over="ignore"):
                load = np.nan if offered == 0 else (np.inf if no_lane else offered / given)
            peak = np.nan if np.isnan(hourly[hours]).all() else float(np.nanmax(hourly[hours]))
            span = world.time_bands[band]
            rows.append({
                "station": station.name, "role": station.role, "band": band,
                "hours": f"{span[0]:02d}-{span[1]:02d}", "arrivals_per_hour": arrivals[s, hours].mean(),
                "lanes": lanes[s, hours].mean(), "load": load, "busiest_hour_load": peak,
            })
            if no_lane:
                warnings.append(f"warning: station '{station.name}', {band} ({span[0]:02d}-{span[1]:02d} h): "
                                f"vehicles are selected but no lane is on duty; staff a lane in the roster or "
                                f"select none in this band")
            elif load >= OVERLOAD:
                need = int(np.ceil(offered / (OVERLOAD * 60.0 * working[m] * len(hours)) - 1e-9))
                warnings.append(f"warning: station '{station.name}', {band} ({span[0]:02d}-{span[1]:02d} h): "
                                f"offered load {load:.2f} (at least {OVERLOAD}: queues grow all band); "
                                f"staff about {need} lanes on average (now {lanes[s, hours].mean():.1f}), "
                                f"select fewer vehicles or shorten the check")
    return rows, warnings


def _booked_on(close: np.ndarray, ready: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Vehicles booked on each departure of the week as the engine books them, and the span of ready minutes.

    ``close`` holds the week's check-in closes in departure order (minutes of the week, the first may be
    negative); ``ready`` the vehicles ready for check-in in each minute of the week. A vehicle ready at minute t
    books the first departure, in departure order, whose check-in closes at or after t (next week's where this
    week's have closed): a departure with a long cut-off after an earlier one that closes later is never booked.
    Returns (vehicles per departure, first and last ready minute booked on it; -1 where none).
    """
    k, week = close.shape[0], ready.shape[0]
    reach = np.maximum.accumulate(np.concatenate([close, close + week]))  # first with close >= t: first reach >= t
    booked_on = np.searchsorted(reach, np.arange(week), side="left") % k
    vehicles = np.bincount(booked_on, weights=ready, minlength=k)
    first, last = np.full(k, -1), np.full(k, -1)
    for j in range(k):
        minutes = np.flatnonzero(booked_on == j)
        if minutes.size:  # a span may wrap the week's end: start after the largest gap
            gap = int(np.argmax(np.diff(np.concatenate([minutes, [minutes[0] + week]]))))
            first[j], last[j] = minutes[(gap + 1) % minutes.size], minutes[gap]
    return vehicles, first, last


def _departure_rows(world: World, lay: Layout) -> tuple[list[dict], list[str], float | None]:
    """Per departure of the busiest weekday: vehicles booked on it against its places; warnings for the whole week.

    Vehicles are booked over the week, each weekday at its own traffic, as the
    engine books them (:func:`_booked_on`). Places are the vehicles a departure
    takes (metres at the share-weighted mean vehicle length), times its chance
    of not being cancelled.
    """
    tt = build_timetable(world)
    if tt.empty:
        return [], [], None
    words = words_for(world)
    week_rate = np.concatenate([np.repeat(lay.hourly_rate * f / 60.0, 60) for f in lay.weekday_factor])
    ready = np.roll(week_rate, int(round(tt.planned)))  # vehicles ready for check-in, by minute of the week
    mean_length = float(lay.class_share @ tt.class_length)
    services = sorted(
        (w * MINUTES_PER_DAY + minute, w, minute, close, places)
        for w in range(7)
        for minute, close, places in zip(
            tt.minute[w], w * MINUTES_PER_DAY + tt.minute[w] - tt.cutoff[w],
            np.minimum(tt.capacity[w], tt.metres[w] / mean_length if mean_length else np.inf) * (1.0 - tt.cancel[w]),
            strict=True))
    booked, first, last = _booked_on(np.array([s[3] for s in services]), ready)
    busiest = int(np.argmax(lay.weekday_factor))
    rows, short = [], {}
    for j, (_, w, minute, _, places) in enumerate(services):
        # ready after the previous booking's close, up to this one's: (first - 1, last] in minutes
        window = f"{_clock(first[j] - 1)}-{_clock(last[j])}" if first[j] >= 0 else "none"
        if w == busiest:
            rows.append({"departure": _clock(minute), "window": window, "booked": booked[j],
                         "capacity": float(places), "ratio": booked[j] / places if places else np.inf})
        if booked[j] > places:
            short.setdefault(_clock(minute), []).append((w, booked[j], places, window))
    warnings = []
    for clock, days in sorted(short.items()):  # one warning per departure time, naming its weekdays unless all
        worst = max(days, key=lambda d: d[1] - d[2])
        when = "" if len(days) == 7 else " on " + ", ".join(WEEKDAYS[d[0]].capitalize() for d in days)
        warnings.append(f"warning: {words.service} {clock}{when}: about {worst[1]:.0f} vehicles are ready for it "
                        f"(ready for check-in {worst[3]}) against {worst[2]:.0f} places; the rest miss it: add "
                        f"capacity or a {words.service} in that window")
    for w in range(7):  # a day short of places pushes vehicles onto the next day's departures
        places_w = sum(s[4] for s in services if s[1] == w)
        arrivals_w = float(lay.hourly_rate.sum() * lay.weekday_factor[w])
        if arrivals_w > places_w:
            warnings.append(f"warning: {words.services} on {WEEKDAYS[w].capitalize()}: {places_w:,.0f} places for "
                            f"about {arrivals_w:,.0f} vehicles: the rest wait for a later day's {words.services}")
    weekly = float(sum(s[4] for s in services))
    if ready.sum() > weekly:
        warnings.append(f"warning: {words.services}: {weekly:,.0f} places a week for about {ready.sum():,.0f} "
                        f"vehicles: vehicles are stranded; add {words.services} or capacity")
    rows.sort(key=lambda r: r["departure"])
    return rows, warnings, float(sum(r["capacity"] for r in rows))


def load_report(world: World, layout: Layout | None = None) -> LoadReport:
    """The load of ``world``'s stations and departures on its busiest weekday (see the module's docstring)."""
    lay = layout or build_layout(world)
    rate = lay.hourly_rate * float(lay.weekday_factor.max())  # vehicles per hour, busiest weekday
    station_rows, station_warnings = _station_rows(world, lay, rate)
    departure_rows, departure_warnings, daily = _departure_rows(world, lay)
    return LoadReport(
        world=world.name,
        stations=pd.DataFrame(station_rows),
        departures=pd.DataFrame(departure_rows, columns=["departure", "window", "booked", "capacity", "ratio"]),
        daily_arrivals=float(rate.sum()),
        daily_capacity=daily,
        warnings=station_warnings + departure_warnings,
        words=words_for(world),
    )
