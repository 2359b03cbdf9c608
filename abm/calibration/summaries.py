"""Summary statistics of observed records, the same for the record set being calibrated and for candidate runs.

Every statistic comes from the observed schema (:mod:`abm.observed`): the
``checks`` and ``encounters`` tables. A window of ``days`` days starting at
``first_day`` is cut into weeks of 7 days from its first day (a last, shorter
week is kept as it is; candidate runs and the observed records cut the same
way). Counts are persons, as in the records.

Groups of statistics (each expands to named statistics):

``detections_by_station``   persons detected at each station over the window
``detections_by_station_week``  the same per week
``detections_week``         persons detected per week, all stations
``interdictions_week``      persons interdicted per week, all boarding points
``interdictions_by_point``  persons interdicted at each boarding point over the window
``checks_by_station``       vehicles checked at each station over the window
``checks_by_station_week``  the same per week
``detections_per_check``    persons detected per 1000 vehicles checked, per station
``repeat_frequencies``      f1, f2 and f3+ of identified persons (seen once, twice, three times or more)
                            and the share of identified persons seen at least twice
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from ..errors import InputError

SUMMARY_GROUPS = (
    "detections_by_station",
    "detections_by_station_week",
    "detections_week",
    "interdictions_week",
    "interdictions_by_point",
    "checks_by_station",
    "checks_by_station_week",
    "detections_per_check",
    "repeat_frequencies",
)
DEFAULT_GROUPS = ("detections_by_station", "detections_week", "interdictions_week", "repeat_frequencies")
WEEK = 7


class SummaryError(InputError):
    """Observed records the summary statistics cannot be computed from."""


@dataclass(frozen=True)
class SummarySpec:
    """Which statistics, over which window, for which stations and boarding points (from the world)."""

    groups: tuple[str, ...]
    days: int
    stations: tuple[str, ...]
    points: tuple[str, ...]

    def __post_init__(self) -> None:
        unknown = [g for g in self.groups if g not in SUMMARY_GROUPS]
        if unknown:
            raise SummaryError(f"unknown summary group(s) {', '.join(unknown)}; expected some of {', '.join(SUMMARY_GROUPS)}")
        if not self.groups:
            raise SummaryError("at least one summary group is needed")
        if self.days < 1:
            raise SummaryError(f"the summary window needs at least one day, got {self.days}")

    @property
    def weeks(self) -> int:
        return math.ceil(self.days / WEEK)

    def names(self) -> tuple[str, ...]:
        """Every statistic's name, in the order :meth:`compute` returns them."""
        names: list[str] = []
        for group in self.groups:
            if group == "detections_by_station":
                names += [f"detections:{s}" for s in self.stations]
            elif group == "detections_by_station_week":
                names += [f"detections:{s}:week{w}" for s in self.stations for w in range(self.weeks)]
            elif group == "detections_week":
                names += [f"detections:week{w}" for w in range(self.weeks)]
            elif group == "interdictions_week":
                names += [f"interdictions:week{w}" for w in range(self.weeks)]
            elif group == "interdictions_by_point":
                names += [f"interdictions:{p}" for p in self.points]
            elif group == "checks_by_station":
                names += [f"checks:{s}" for s in self.stations]
            elif group == "checks_by_station_week":
                names += [f"checks:{s}:week{w}" for s in self.stations for w in range(self.weeks)]
            elif group == "detections_per_check":
                names += [f"detections_per_1000_checks:{s}" for s in self.stations]
            else:
                names += ["f1", "f2", "f3plus", "share_seen_twice_or_more"]
        return tuple(names)

    def needs_checks(self) -> bool:
        return any(g.startswith("checks") or g == "detections_per_check" for g in self.groups)

    def compute(self, tables: Mapping[str, pd.DataFrame], first_day: int) -> np.ndarray:
        """The statistics of observed ``tables`` over days ``first_day .. first_day + days - 1``."""
        encounters = _window(tables, "encounters", first_day, self.days)
        checks = _window(tables, "checks", first_day, self.days) if self.needs_checks() else None
        week = ((encounters["day"] - first_day) // WEEK).to_numpy()
        detections = (encounters["kind"] == "detection").to_numpy()
        interdictions = (encounters["kind"] == "interdiction").to_numpy()
        place = encounters["place"].astype(str).to_numpy()
        out: list[np.ndarray | list[float]] = []
        for group in self.groups:
            if group == "detections_by_station":
                out.append(_count_by(place[detections], self.stations))
            elif group == "detections_by_station_week":
                out.append(np.concatenate([_weekly(week[detections & (place == s)], self.weeks) for s in self.stations]))
            elif group == "detections_week":
                out.append(_weekly(week[detections], self.weeks))
            elif group == "interdictions_week":
                out.append(_weekly(week[interdictions], self.weeks))
            elif group == "interdictions_by_point":
                out.append(_count_by(place[interdictions], self.points))
            elif group == "checks_by_station":
                out.append(_checks_by_station(checks, self.stations))
            elif group == "checks_by_station_week":
                assert checks is not None
                c_week = ((checks["day"] - first_day) // WEEK).to_numpy()
                c_station = checks["station"].astype(str).to_numpy()
                counts = checks["checks"].to_numpy(dtype=float)
                out.append(
                    np.concatenate(
                        [np.bincount(c_week[c_station == s], counts[c_station == s], self.weeks)[: self.weeks] for s in self.stations]
                    )
                )
            elif group == "detections_per_check":
                found = _count_by(place[detections], self.stations)
                checked = _checks_by_station(checks, self.stations)
                out.append(np.divide(1000.0 * found, checked, out=np.zeros_like(found), where=checked > 0))
            else:
                out.append(_repeat_frequencies(encounters))
        return np.concatenate([np.asarray(part, dtype=float) for part in out])


def _window(tables: Mapping[str, pd.DataFrame], name: str, first_day: int, days: int) -> pd.DataFrame:
    if name not in tables:
        raise SummaryError(f"the observed records have no '{name}' table")
    frame = tables[name]
    return frame[(frame["day"] >= first_day) & (frame["day"] < first_day + days)]


def _count_by(values: np.ndarray, keys: Sequence[str]) -> np.ndarray:
    return np.array([float(np.sum(values == key)) for key in keys])


def _weekly(weeks: np.ndarray, n: int) -> np.ndarray:
    return np.bincount(weeks.astype(np.int64), minlength=n)[:n].astype(float)


def _checks_by_station(checks: pd.DataFrame | None, stations: Sequence[str]) -> np.ndarray:
    assert checks is not None
    totals = checks.groupby("station")["checks"].sum()
    return np.array([float(totals.get(s, 0)) for s in stations])


def _repeat_frequencies(encounters: pd.DataFrame) -> list[float]:
    """f1, f2, f3+ of identified persons (distinct encounters per person_ref) and the share seen twice or more."""
    ref = encounters["person_ref"]
    known = encounters[ref.notna() & (ref.fillna("").astype(str).str.strip() != "")]
    counts = known.groupby("person_ref")["encounter_id"].nunique().to_numpy()
    f1, f2, f3 = float(np.sum(counts == 1)), float(np.sum(counts == 2)), float(np.sum(counts >= 3))
    n = f1 + f2 + f3
    return [f1, f2, f3, (f2 + f3) / n if n else 0.0]


def observed_span(tables: Mapping[str, pd.DataFrame]) -> tuple[int, int] | None:
    """First and last day with checks (or encounters, in records without checks); None when both are empty."""
    for name in ("checks", "encounters"):
        frame = tables.get(name)
        if frame is not None and len(frame):
            return int(frame["day"].min()), int(frame["day"].max())
    return None
