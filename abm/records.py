"""The two record sets of a run, kept apart: simulated truth and what an agency observes.

``truth/`` holds every attempt with its outcome, every group's arrival and every
exit from the system. ``observed/`` follows :mod:`abm.observed` and holds only
what an agency could know. ``daily.parquet`` carries daily KPIs and
``methods.parquet`` checks per operating day, method and cargo type with the
day's weather; in both, columns that come from truth are prefixed ``truth_``.
All people counts are persons (a group of three attempting once is three
person-attempts); method counts are vehicles checked.

Writing is atomic per file (temporary name, then rename), and the byte content
depends only on the world and the seed.
"""

from __future__ import annotations

import json
import os
import uuid
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from .observed import OBSERVED_COLUMNS, OBSERVED_DIR, conform
from .port.day import OUTCOME_NAMES, DayResult
from .port.layout import Layout
from .port.traffic import MINUTES_PER_DAY

TRUTH_DIR = "truth"

TRUTH_COLUMNS: dict[str, dict[str, str]] = {
    "attempts": {
        "attempt_id": "int64",
        "day": "int64",
        "agent_id": "int64",
        "persons": "int64",
        "point": "string",
        "band": "string",
        "vehicle_class": "string",
        "depth": "string",
        "outcome": "string",
        "station": "string",
        "method": "string",
        "minute": "float64",
    },
    "arrivals": {"agent_id": "int64", "day": "int64", "persons": "int64"},
    "exits": {"agent_id": "int64", "day": "int64", "state": "string", "persons": "int64", "encounters": "int64"},
}

METHODS_FILE = "methods.parquet"
# One row per operating day, method and cargo type. Observed: the day's weather, checks, alarms, alarms
# logged false (nothing found after them) and minutes spent checking. Truth: checks of occupied vehicles,
# checks that found people, alarms on vehicles with and without people aboard. Weather and cargo are ""
# where a world does not state them.
METHOD_COLUMNS: dict[str, str] = {
    "day": "int64",
    "weather": "string",
    "method": "string",
    "cargo": "string",
    "checks": "int64",
    "alarms": "int64",
    "false_alarms": "int64",
    "check_minutes": "float64",
    "truth_occupied_checks": "int64",
    "truth_found": "int64",
    "truth_true_alarms": "int64",
    "truth_false_alarms": "int64",
}


def _calendar(minute: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Absolute minutes to (calendar day, minute of that day)."""
    day = np.floor(minute / MINUTES_PER_DAY)
    return day.astype(np.int64), minute - day * MINUTES_PER_DAY


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
        world = self.layout.world
        res = result.attempts
        outcome = np.array([OUTCOME_NAMES[int(c)] for c in res.outcome], dtype=object)
        station_names = np.array(world.station_names + [""], dtype=object)
        method_names = np.array(world.method_names + [""], dtype=object)
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
        for a in np.flatnonzero((outcome == "detected") | (outcome == "interdicted")):
            day, minute = _calendar(np.array([res.minute[a]]))
            detected = outcome[a] == "detected"
            for ref in refs[a] or []:
                self._encounters.append(
                    {
                        "encounter_id": int(ids[a]),
                        "day": int(day[0]),
                        "minute": float(minute[0]),
                        "kind": "detection" if detected else "interdiction",
                        "place": station_names[res.station[a]] if detected else world.point_names[attempts_point[a]],
                        "place_kind": "station" if detected else "boarding_point",
                        "vehicle_class": world.class_names[result.traffic.vehicle_class[res.vehicle[a]]] if detected else "",
                        "method": method_names[res.method[a]] if detected else "",
                        "person_ref": ref or "",
                        "referred_by": station_names[res.referred_by[a]] if detected else "",
                    }
                )
        self._checks.append(result.check_rows)
        fa = result.false_alarms
        self._false_alarms.append(fa)
        self._methods.append((result.day, result.weather, result.method_rows))
        self._time_in_port.append(result.time_in_port.astype(np.float32))
        self._missed.append(result.missed)
        for s, w in result.queue_wait.items():
            self._waits.setdefault(s, []).append(w.astype(np.float32))
        tip = result.time_in_port[np.isfinite(result.time_in_port)]
        p50, p95 = (float(q) for q in np.percentile(tip, [50, 95])) if tip.size else (float("nan"), float("nan"))

        def persons_with(name: str) -> int:
            return int(persons[outcome == name].sum())

        checks = result.check_rows
        self._daily.append(
            {
                "day": result.day,
                "vehicles": result.traffic.size,
                "checks": int(checks["checks"].sum()),
                "alarms": int(checks["alarms"].sum()),
                "detections": persons_with("detected"),
                "interdictions": persons_with("interdicted"),
                "false_alarms": int(fa["minute"].shape[0]),
                "time_in_port_p50_min": p50,
                "time_in_port_p95_min": p95,
                "missed_departure_share": float(result.missed.mean()) if result.missed.size else 0.0,
                "staff_hours": staff_hours,
                "truth_attempts": int(persons.sum()),
                "truth_crossings": persons_with("crossed"),
                "truth_no_vehicle": persons_with("no_vehicle"),
                "truth_in_system": in_system,
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

    def observed_tables(self) -> dict[str, pd.DataFrame]:
        """The observed record set (what an agency holds)."""
        world = self.layout.world
        stations = pd.DataFrame(
            {
                "station": world.station_names,
                "position": np.arange(len(world.stations)),
                "role": [s.role for s in world.stations],
                "method": [s.method for s in world.stations],
            }
        )
        keys = ["day", "hour", "station", "vehicle_class", "method"]
        raw = {k: np.concatenate([c[k] for c in self._checks]) for k in self._checks[0]} if self._checks else None
        if raw is not None and raw["day"].size:
            checks = pd.DataFrame(raw).groupby(keys, as_index=False, sort=True)[["vehicles", "checks", "alarms"]].sum()
            checks["station"] = np.array(world.station_names, dtype=object)[checks["station"]]
            checks["vehicle_class"] = np.array(world.class_names, dtype=object)[checks["vehicle_class"]]
            checks["method"] = np.array(world.method_names, dtype=object)[checks["method"]]
        else:
            checks = pd.DataFrame(columns=list(OBSERVED_COLUMNS["checks"]))
        encounters = pd.DataFrame(self._encounters, columns=list(OBSERVED_COLUMNS["encounters"]))
        if self._false_alarms:
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
        else:
            false_alarms = pd.DataFrame(columns=list(OBSERVED_COLUMNS["false_alarms"]))
        false_alarms = false_alarms.sort_values(["day", "minute"], kind="stable", ignore_index=True)
        return {
            "stations": conform("stations", stations),
            "checks": conform("checks", checks),
            "encounters": conform("encounters", encounters),
            "false_alarms": conform("false_alarms", false_alarms),
        }

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


# -- writing ----------------------------------------------------------------------------
def _private_tmp(path: Path) -> Path:
    """A temporary name beside ``path`` that no other writer uses.

    Two processes may write the same derived file at once (a straggler of an
    interrupted batch and the resumed one): each writes its own whole file and
    renames it into place, so a reader only ever sees a complete one.
    """
    return path.with_name(f".{path.name}.{os.getpid()}.{uuid.uuid4().hex[:8]}.tmp")


def write_atomically(path: Path, write: Callable[[Path], object]) -> Path:
    """Write ``path`` whole or not at all: ``write`` fills a temporary name of this writer's own beside it,
    which is then renamed into place (creating the folder if needed). Returns ``path``."""
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = _private_tmp(path)
    write(tmp)
    os.replace(tmp, path)
    return path


def write_parquet(frame: pd.DataFrame, path: Path) -> None:
    """Write a table atomically with deterministic bytes (no pandas metadata index, no timestamps)."""
    table = pa.Table.from_pandas(frame, preserve_index=False)
    table = table.replace_schema_metadata(None)
    write_atomically(path, lambda tmp: pq.write_table(table, tmp, compression="zstd"))


def write_json(data: Any, path: Path) -> None:
    """Write JSON atomically, keys sorted."""
    text = json.dumps(data, indent=2, sort_keys=True, default=float) + "\n"
    write_atomically(path, lambda tmp: tmp.write_text(text, encoding="utf-8"))


def write_records(book: RecordBook, out: Path) -> None:
    """Write truth/, observed/, daily.parquet and methods.parquet under ``out``."""
    for name, frame in book.truth_tables().items():
        write_parquet(frame, out / TRUTH_DIR / f"{name}.parquet")
    for name, frame in book.observed_tables().items():
        write_parquet(frame, out / OBSERVED_DIR / f"{name}.parquet")
    write_parquet(book.daily_table(), out / "daily.parquet")
    write_parquet(book.methods_table(), out / METHODS_FILE)


def read_truth(run_dir: str | Path) -> dict[str, pd.DataFrame]:
    """Read the truth record set of a run (never from an estimator)."""
    base = Path(run_dir) / TRUTH_DIR
    return {name: pd.read_parquet(base / f"{name}.parquet") for name in TRUTH_COLUMNS}
