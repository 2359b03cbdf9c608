"""The two record sets of a run, kept apart: simulated truth and what an agency observes.

``truth/`` holds every attempt with its outcome, every group's arrival and every
exit from the system. ``observed/`` follows :mod:`abm.observed` and holds only
what an agency could know. ``daily.parquet`` carries daily KPIs and
``methods.parquet`` checks per operating day, method and cargo type with the
day's weather; in both, columns that come from truth are prefixed ``truth_``.
``queues.parquet`` holds each station's waits, queue length and lane use per
calendar day and hour, and ``departures.parquet`` each departure's vehicles
booked, left and missed (both observed: an operator's own logs would hold them).
All people counts are persons (a group of three attempting once is three
person-attempts); method counts are vehicles checked.

Writing is atomic per file (temporary name, then rename), and the byte content
depends only on the world and the seed.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path
from collections.abc import Sequence
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from .atomic import write_atomically
from .observed import OBSERVED_COLUMNS, OBSERVED_DIR, conform
from .port.day import DETECTED, INTERDICTED, OUTCOME_NAMES, DayResult
from .port.layout import Layout
from .port.tallies import StationHours
from .port.traffic import MINUTES_PER_DAY
from .tables import described, dtypes

TRUTH_DIR = "truth"
OUTCOME_CODES = {name: code for code, name in OUTCOME_NAMES.items()}

# Column types come from the data contract (abm.tables), where every column is described.
TRUTH_COLUMNS: dict[str, dict[str, str]] = {
    name: dtypes(f"{TRUTH_DIR}/{name}") for name in ("attempts", "arrivals", "exits")
}
METHODS_FILE = "methods.parquet"
METHOD_COLUMNS: dict[str, str] = dtypes("methods")

QUEUES_FILE = "queues.parquet"
QUEUE_COLUMNS: dict[str, str] = dtypes("queues")

QUEUE_HOURS_FILE = "queue_hours.parquet"
QUEUE_HOUR_COLUMNS: dict[str, str] = dtypes("queue_hours")

DEPARTURES_FILE = "departures.parquet"
DEPARTURE_COLUMNS: dict[str, str] = dtypes("departures")


def median_and_p95(values: np.ndarray) -> tuple[float, float]:
    """Exactly ``np.percentile(values, [50, 95])`` (its default linear method) of a non-empty array without NaN.

    Written out from numpy's own steps (the virtual index ``(n - 1) q``, its neighbours, numpy's
    two-sided interpolation) on one partition of a copy: np.percentile's checks and
    generality cost several times the partition on a day's few thousand vehicles.
    """
    n = values.shape[0]
    picks = []
    for q in (0.5, 0.95):
        virtual = (n - 1) * q
        low = n - 1 if virtual >= n - 1 else math.floor(virtual)
        picks.append((virtual, low, min(low + 1, n - 1)))
    ordered = np.partition(values, sorted({k for _, low, high in picks for k in (low, high)}))
    out = []
    for virtual, low, high in picks:
        a, b = float(ordered[low]), float(ordered[high])
        gamma, diff = virtual - low, b - a
        out.append(b - diff * (1 - gamma) if gamma >= 0.5 else a + diff * gamma)
    return out[0], out[1]


def _calendar(minute: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Absolute minutes to (calendar day, minute of that day)."""
    day = np.floor(minute / MINUTES_PER_DAY)
    return day.astype(np.int64), minute - day * MINUTES_PER_DAY


def _daily_row(result: DayResult, persons: np.ndarray, staff_hours: float, in_system: int) -> dict[str, Any]:
    """A day's KPIs: observed counts, time at the crossing, and the truth columns."""
    outcome = result.attempts.outcome
    fa = result.false_alarms
    tip = result.time_in_port[np.isfinite(result.time_in_port)]
    p50, p95 = median_and_p95(tip) if tip.size else (float("nan"), float("nan"))

    def persons_with(name: str) -> int:
        return int(persons[outcome == OUTCOME_CODES[name]].sum())

    checks = result.check_rows
    return {
        "day": result.day,
        "vehicles": result.traffic.size,
        "checks": int(checks["checks"].sum()),
        "alarms": int(checks["alarms"].sum()),
        "detections": persons_with("detected"),
        "interdictions": persons_with("interdicted"),
        "false_alarms": int(fa["minute"].shape[0]),
        "time_in_port_p50_min": p50,
        "time_in_port_p95_min": p95,
        # the mean of a bool array, as np.mean gives it (an exact count over the size), without its overhead
        "missed_departure_share": np.count_nonzero(result.missed) / result.missed.size if result.missed.size else 0.0,
        "staff_hours": staff_hours,
        "truth_attempts": int(persons.sum()),
        "truth_crossings": persons_with("crossed"),
        "truth_no_vehicle": persons_with("no_vehicle"),
        "truth_in_system": in_system,
    }


@dataclass
class RecordBook:
    """Accumulates a run's records day by day; builds the tables at the end."""

    layout: Layout
    _attempts: list[dict[str, np.ndarray]] = field(default_factory=list)  # index codes; names at the end
    _arrivals: list[tuple[int, int, int]] = field(default_factory=list)
    _exits: list[tuple[int, int, str, int, int]] = field(default_factory=list)
    _encounters: list[dict[str, Any]] = field(default_factory=list)
    _checks: list[dict[str, np.ndarray]] = field(default_factory=list)
    _false_alarms: list[dict[str, np.ndarray]] = field(default_factory=list)
    _methods: list[tuple[int, str, dict[str, np.ndarray]]] = field(default_factory=list)
    _daily: list[dict[str, Any]] = field(default_factory=list)
    _time_in_port: list[np.ndarray] = field(default_factory=list)
    _missed: list[np.ndarray] = field(default_factory=list)
    _waits: dict[int, list[np.ndarray]] = field(default_factory=dict)
    _wait_hours: dict[int, list[np.ndarray]] = field(default_factory=dict)  # absolute hour of each wait
    _station_hours: list[StationHours] = field(default_factory=list)
    _departures: list[dict[str, np.ndarray]] = field(default_factory=list)
    _next_attempt: int = 0

    def arrival(self, agent_id: int, day: int, persons: int) -> None:
        """A new group arrives in the area (truth)."""
        self._arrivals.append((agent_id, day, persons))

    def exit(self, agent_id: int, day: int, state: str, persons: int, encounters: int) -> None:
        """A group leaves the system: crossed, gave up or moved elsewhere (truth)."""
        self._exits.append((agent_id, day, state, persons, encounters))

    def add_day(
        self,
        result: DayResult,
        agent_ids: np.ndarray,
        persons: np.ndarray,
        refs: list[list[str | None] | None],
        attempts_point: np.ndarray,
        attempts_band: np.ndarray,
        attempts_class: np.ndarray,
        attempts_depth: np.ndarray,
        staff_hours: float,
        in_system: int,
    ) -> None:
        """Record one day: attempts (truth), encounters and checks (observed), daily KPIs."""
        res = result.attempts
        outcome = res.outcome  # codes (OUTCOME_NAMES); compared as codes, named once at the end
        ids = np.arange(self._next_attempt, self._next_attempt + outcome.shape[0])
        self._next_attempt += outcome.shape[0]
        # Codes only: the tables are built once at the end, which costs far less than a frame a day.
        self._attempts.append(
            {
                "attempt_id": ids,
                "day": np.full(ids.shape[0], result.day),
                "agent_id": agent_ids,
                "persons": persons,
                "point": attempts_point,
                "band": attempts_band,
                "vehicle_class": attempts_class,
                "depth": attempts_depth,
                "outcome": res.outcome,
                "station": res.station,
                "method": res.method,
                "minute": res.minute - result.day * MINUTES_PER_DAY,
            }
        )
        self._add_encounters(result, ids, refs, attempts_point)
        self._checks.append(result.check_rows)
        self._false_alarms.append(result.false_alarms)
        self._methods.append((result.day, result.weather, result.method_rows))
        self._time_in_port.append(result.time_in_port.astype(np.float32))
        self._missed.append(result.missed)
        for s, w in result.queue_wait.items():
            self._waits.setdefault(s, []).append(w.astype(np.float32))
        for tally in result.station_hours:
            self._station_hours.append(tally)
            self._wait_hours.setdefault(tally.station, []).append(tally.wait_hour.astype(np.int32))
        if result.departures is not None:
            self._departures.append(result.departures)
        self._daily.append(_daily_row(result, persons, staff_hours, in_system))

    def _add_encounters(
        self, result: DayResult, ids: np.ndarray, refs: list[list[str | None] | None], attempts_point: np.ndarray
    ) -> None:
        """One encounter row per person met (detected or interdicted) in the day's attempts (observed)."""
        world = self.layout.world
        res = result.attempts
        outcome = res.outcome
        station_names = np.array(world.station_names + [""], dtype=object)
        method_names = np.array(world.method_names + [""], dtype=object)
        met = np.flatnonzero((outcome == DETECTED) | (outcome == INTERDICTED))
        met_day, met_minute = _calendar(res.minute[met])
        for a, day, minute in zip(met.tolist(), met_day.tolist(), met_minute.tolist(), strict=True):
            detected = outcome[a] == DETECTED
            for ref in refs[a] or []:
                self._encounters.append(
                    {
                        "encounter_id": int(ids[a]),
                        "day": day,
                        "minute": minute,
                        "kind": "detection" if detected else "interdiction",
                        "place": station_names[res.station[a]] if detected else world.point_names[attempts_point[a]],
                        "place_kind": "station" if detected else "boarding_point",
                        "vehicle_class": world.class_names[result.traffic.vehicle_class[res.vehicle[a]]] if detected else "",
                        "method": method_names[res.method[a]] if detected else "",
                        "person_ref": ref or "",
                        "referred_by": station_names[res.referred_by[a]] if detected else "",
                    }
                )

    # -- tables ----------------------------------------------------------------------
    def truth_tables(self) -> dict[str, pd.DataFrame]:
        """The truth record set."""
        world = self.layout.world
        codes = {key: np.concatenate([day[key] for day in self._attempts]) for key in TRUTH_COLUMNS["attempts"]} if self._attempts else {}
        if codes:
            outcome_names = np.array([OUTCOME_NAMES.get(k, "") for k in range(max(OUTCOME_NAMES) + 1)], dtype=object)
            codes["point"] = np.array(world.point_names, dtype=object)[codes["point"]]
            codes["band"] = np.array(world.band_names, dtype=object)[codes["band"]]
            codes["vehicle_class"] = np.array(world.class_names, dtype=object)[codes["vehicle_class"]]
            codes["depth"] = np.array(world.depth_names, dtype=object)[codes["depth"]]
            codes["outcome"] = outcome_names[codes["outcome"]]
            codes["station"] = np.array(world.station_names + [""], dtype=object)[codes["station"]]
            codes["method"] = np.array(world.method_names + [""], dtype=object)[codes["method"]]
        frames = {
            "attempts": pd.DataFrame(codes) if codes else pd.DataFrame(columns=list(TRUTH_COLUMNS["attempts"])),
            "arrivals": pd.DataFrame(self._arrivals, columns=list(TRUTH_COLUMNS["arrivals"])),
            "exits": pd.DataFrame(self._exits, columns=list(TRUTH_COLUMNS["exits"])),
        }
        return {name: frame.astype(TRUTH_COLUMNS[name]) for name, frame in frames.items()}

    def observed_tables(self, names: Sequence[str] = tuple(OBSERVED_COLUMNS)) -> dict[str, pd.DataFrame]:
        """The observed record set (what an agency holds), or only the tables ``names`` asks for."""
        build = {"stations": self._stations_table, "checks": self._checks_table, "encounters": self._encounters_table,
                 "false_alarms": self._false_alarms_table}
        return {name: conform(name, build[name]()) for name in names}

    def _stations_table(self) -> pd.DataFrame:
        world = self.layout.world
        return pd.DataFrame(
            {
                "station": world.station_names,
                "position": np.arange(len(world.stations)),
                "role": [s.role for s in world.stations],
                "method": [s.method for s in world.stations],
            }
        )

    def _checks_table(self) -> pd.DataFrame:
        world = self.layout.world
        keys = ["day", "hour", "station", "vehicle_class", "method"]
        raw = {k: np.concatenate([c[k] for c in self._checks]) for k in self._checks[0]} if self._checks else None
        if raw is None or not raw["day"].size:
            return pd.DataFrame(columns=list(OBSERVED_COLUMNS["checks"]))
        checks = pd.DataFrame(raw).groupby(keys, as_index=False, sort=True)[["vehicles", "checks", "alarms"]].sum()
        checks["station"] = np.array(world.station_names, dtype=object)[checks["station"]]
        checks["vehicle_class"] = np.array(world.class_names, dtype=object)[checks["vehicle_class"]]
        checks["method"] = np.array(world.method_names, dtype=object)[checks["method"]]
        return checks

    def _encounters_table(self) -> pd.DataFrame:
        return pd.DataFrame(self._encounters, columns=list(OBSERVED_COLUMNS["encounters"]))

    def _false_alarms_table(self) -> pd.DataFrame:
        world = self.layout.world
        if not self._false_alarms:
            return pd.DataFrame(columns=list(OBSERVED_COLUMNS["false_alarms"]))
        raw_fa = {k: np.concatenate([day[k] for day in self._false_alarms]) for k in self._false_alarms[0]}
        fa_day, fa_minute = _calendar(raw_fa["minute"])
        false_alarms = pd.DataFrame(
            {
                "day": fa_day,
                "minute": fa_minute,
                "station": np.array(world.station_names, dtype=object)[raw_fa["station"]],
                "method": np.array(world.method_names, dtype=object)[raw_fa["method"]],
                "vehicle_class": np.array(world.class_names, dtype=object)[raw_fa["vehicle_class"]],
            }
        )
        return false_alarms.sort_values(["day", "minute"], kind="stable", ignore_index=True)

    def daily_table(self) -> pd.DataFrame:
        """Daily KPIs; ``truth_`` columns come from simulated truth."""
        return pd.DataFrame(self._daily)

    def methods_table(self) -> pd.DataFrame:
        """Checks per operating day, method and cargo type; ``truth_`` columns come from simulated truth."""
        if not self._methods:
            return pd.DataFrame({col: pd.Series(dtype=dtype) for col, dtype in METHOD_COLUMNS.items()})
        size = [rows["checks"].shape[0] for _, _, rows in self._methods]
        table = {k: np.concatenate([rows[k] for _, _, rows in self._methods]) for k in self._methods[0][2]}
        table["method"] = np.array(self.layout.world.method_names, dtype=object)[table["method"]]
        table["day"] = np.repeat([day for day, _, _ in self._methods], size)
        table["weather"] = np.repeat(np.array([w for _, w, _ in self._methods], dtype=object), size)
        return pd.DataFrame(table)[list(METHOD_COLUMNS)].astype(METHOD_COLUMNS)

    def time_in_port(self) -> np.ndarray:
        return np.concatenate(self._time_in_port) if self._time_in_port else np.zeros(0, dtype=np.float32)

    def missed(self) -> np.ndarray:
        return np.concatenate(self._missed) if self._missed else np.zeros(0, dtype=bool)

    def queue_waits(self) -> dict[str, np.ndarray]:
        """Waits of checked vehicles per station name (minutes)."""
        names = self.layout.world.station_names
        return {names[s]: np.concatenate(w) for s, w in self._waits.items()}

    def queue_table(self) -> pd.DataFrame:
        """Waits, queue length and lane use per calendar day, hour and station (every day; see QUEUE_COLUMNS)."""
        if not self._station_hours:
            return _empty(QUEUE_COLUMNS)
        cells = _hour_cells(self._station_hours)
        t = cells.join(_wait_stats(self._wait_frame(), ["abs_hour", "station"], (0.95,))).reset_index()
        table = pd.DataFrame({
            "day": t["abs_hour"] // 24,
            "hour": t["abs_hour"] % 24,
            "station": np.array(self.layout.world.station_names, dtype=object)[t["station"]],
            "vehicles": t["vehicles"],
            "checks": t["checks"],
            "wait_mean_min": t["mean"],
            "wait_p95_min": t["p95"],
            "wait_max_min": t["max"],
            "queue_mean": t["waiting_minutes"] / 60.0,
            "busy_lane_minutes": t["busy_minutes"],
            "staffed_lane_minutes": t["staffed_minutes"],
            "utilisation": t["busy_minutes"] / t["staffed_minutes"].where(t["staffed_minutes"] > 0),
        })
        return table.astype(QUEUE_COLUMNS)

    def queue_hours_table(self, first_day: int, last_day: int) -> pd.DataFrame:
        """QUEUE_HOUR_COLUMNS: per station and hour of the day, pooled over days ``first_day``..``last_day``."""
        if not self._station_hours:
            return _empty(QUEUE_HOUR_COLUMNS)
        cells = _hour_cells(self._station_hours).reset_index()
        cells = cells[(cells["abs_hour"] // 24).between(first_day, last_day)]
        sums = cells.assign(hour=cells["abs_hour"] % 24).groupby(["station", "hour"], sort=True).sum()
        waits = self._wait_frame()
        waits = waits[(waits["abs_hour"] // 24).between(first_day, last_day)]
        t = sums.join(_wait_stats(waits.assign(hour=waits["abs_hour"] % 24), ["station", "hour"], (0.5, 0.95)))
        t = t.reset_index()
        days = last_day - first_day + 1
        table = pd.DataFrame({
            "station": np.array(self.layout.world.station_names, dtype=object)[t["station"]],
            "hour": t["hour"],
            "first_day": first_day,
            "last_day": last_day,
            "vehicles": t["vehicles"],
            "checks": t["checks"],
            "wait_mean_min": t["mean"],
            "wait_p50_min": t["p50"],
            "wait_p95_min": t["p95"],
            "wait_max_min": t["max"],
            "queue_mean": t["waiting_minutes"] / (60.0 * days),
            "busy_lane_minutes": t["busy_minutes"],
            "staffed_lane_minutes": t["staffed_minutes"],
            "utilisation": t["busy_minutes"] / t["staffed_minutes"].where(t["staffed_minutes"] > 0),
        })
        return table.astype(QUEUE_HOUR_COLUMNS)

    def _wait_frame(self) -> pd.DataFrame:
        """Every checked vehicle's wait (minutes) with its station and the absolute hour it reached it."""
        stations = sorted(self._waits)
        waits = [np.concatenate(self._waits[s]) for s in stations]
        hours = [np.concatenate(self._wait_hours[s]) if s in self._wait_hours else np.zeros(0, np.int32)
                 for s in stations]
        if any(w.shape != h.shape for w, h in zip(waits, hours)):
            raise ValueError("queue waits and their hours are out of step (a day recorded without its station hours)")
        return pd.DataFrame({
            "station": np.concatenate([np.full(w.shape[0], s, dtype=np.int64) for s, w in zip(stations, waits)]),
            "abs_hour": np.concatenate(hours).astype(np.int64),
            "wait": np.concatenate(waits).astype(np.float64),
        })

    def departures_table(self) -> pd.DataFrame:
        """Each departure up to the run's last day: vehicles booked, left and missed (DEPARTURE_COLUMNS)."""
        if not self._departures or not self._daily:
            return _empty(DEPARTURE_COLUMNS)
        keys = ("minute", "booked", "left", "missed", "places_left", "metres_left", "late_minutes", "cancelled", "full")
        frame = pd.DataFrame({k: np.concatenate([d[k] for d in self._departures]) for k in keys})
        # a departure appears in the look-ahead of several days; places only fall, so the least is the last
        t = frame.groupby("minute", sort=True).agg(
            booked=("booked", "sum"), left=("left", "sum"), missed=("missed", "sum"), places_left=("places_left", "min"),
            metres_left=("metres_left", "min"), late_minutes=("late_minutes", "first"), cancelled=("cancelled", "first"),
            full=("full", "max"),
        ).reset_index()
        day = np.floor(t["minute"] / MINUTES_PER_DAY).astype(np.int64)
        t = t[day <= self._daily[-1]["day"]]  # later ones still take bookings: not whole
        day = day[t.index]
        clock = t["minute"] - day * MINUTES_PER_DAY
        t.insert(0, "time", [f"{int(m // 60):02d}:{int(round(m % 60)):02d}" for m in clock])
        t.insert(0, "day", day)
        return t[list(DEPARTURE_COLUMNS)].reset_index(drop=True).astype(DEPARTURE_COLUMNS)


def _empty(columns: dict[str, str]) -> pd.DataFrame:
    """A table with no rows and the given columns."""
    return pd.DataFrame({col: pd.Series(dtype=dtype) for col, dtype in columns.items()})


def _hour_cells(tallies: list[StationHours]) -> pd.DataFrame:
    """Station tallies summed per (absolute hour, station): a check past midnight meets the next day's rows."""
    frame = pd.DataFrame({
        "abs_hour": np.concatenate([t.hour for t in tallies]),
        "station": np.concatenate([np.full(t.hour.shape[0], t.station, dtype=np.int64) for t in tallies]),
        "vehicles": np.concatenate([t.vehicles for t in tallies]),
        "checks": np.concatenate([t.checks for t in tallies]),
        "waiting_minutes": np.concatenate([t.waiting_minutes for t in tallies]),
        "busy_minutes": np.concatenate([t.busy_minutes for t in tallies]),
        "staffed_minutes": np.concatenate([t.staffed_minutes for t in tallies]),
    })
    return frame.groupby(["abs_hour", "station"], sort=True).sum()


def _wait_stats(waits: pd.DataFrame, keys: list[str], quantiles: tuple[float, ...]) -> pd.DataFrame:
    """Mean, maximum and percentiles (linear interpolation, as numpy's) of ``wait`` per group of ``keys``."""
    grouped = waits.groupby(keys, sort=True)["wait"]
    stats = grouped.agg(["mean", "max"])
    for q in quantiles:
        stats[f"p{round(q * 100)}"] = grouped.quantile(q)
    return stats


# -- writing ----------------------------------------------------------------------------
def write_parquet(frame: pd.DataFrame, path: Path, table_name: str) -> None:
    """Write table ``table_name`` of the data contract (:mod:`abm.tables`) atomically, with deterministic bytes
    (no pandas metadata, no timestamps) and each column's declaration as field metadata."""
    table = described(pa.Table.from_pandas(frame, preserve_index=False).replace_schema_metadata(None), table_name)
    write_atomically(path, lambda tmp: pq.write_table(table, tmp, compression="zstd"))


def write_json(data: Any, path: Path) -> None:
    """Write JSON atomically, keys sorted."""
    text = json.dumps(data, indent=2, sort_keys=True, default=float) + "\n"
    write_atomically(path, lambda tmp: tmp.write_text(text, encoding="utf-8"))


def write_records(book: RecordBook, out: Path) -> None:
    """Write truth/, observed/, daily.parquet, methods.parquet, queues.parquet and departures.parquet under ``out``."""
    for name, frame in book.truth_tables().items():
        write_parquet(frame, out / TRUTH_DIR / f"{name}.parquet", f"{TRUTH_DIR}/{name}")
    for name, frame in book.observed_tables().items():
        write_parquet(frame, out / OBSERVED_DIR / f"{name}.parquet", f"{OBSERVED_DIR}/{name}")
    write_parquet(book.daily_table(), out / "daily.parquet", "daily")
    write_parquet(book.methods_table(), out / METHODS_FILE, "methods")
    write_parquet(book.queue_table(), out / QUEUES_FILE, "queues")
    write_parquet(book.departures_table(), out / DEPARTURES_FILE, "departures")


def read_truth(run_dir: str | Path) -> dict[str, pd.DataFrame]:
    """Read the truth record set of a run (never from an estimator)."""
    base = Path(run_dir) / TRUTH_DIR
    return {name: pd.read_parquet(base / f"{name}.parquet") for name in TRUTH_COLUMNS}
