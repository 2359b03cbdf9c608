"""Small observed record sets built by hand for the estimator tests (always through abm.observed.conform)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import pandas as pd

from abm.observed import conform, empty_table

STATIONS = ("gate", "yard", "checkin")  # fictional primary stations in route order
SECONDARY = "search"


def stations_table(primaries: Sequence[str] = STATIONS, secondary: str | None = SECONDARY) -> pd.DataFrame:
    """Primary stations in route order, then an optional secondary search station."""
    names = list(primaries) + ([secondary] if secondary else [])
    return conform(
        "stations",
        pd.DataFrame(
            {
                "station": names,
                "position": range(len(names)),
                "role": ["primary"] * len(primaries) + ["secondary"] * (secondary is not None),
                "method": [f"method_{name}" for name in names],
            }
        ),
    )


def encounter_rows(rows: Sequence[Mapping[str, object]]) -> pd.DataFrame:
    """Encounters from partial rows; unspecified fields get neutral defaults, each row its own encounter."""
    defaults = {
        "day": 1,
        "minute": 600.0,
        "kind": "detection",
        "place": STATIONS[0],
        "place_kind": "station",
        "vehicle_class": "box",
        "method": f"method_{STATIONS[0]}",
        "person_ref": "",
    }
    full = [{"encounter_id": i, **defaults, **row} for i, row in enumerate(rows)]
    return conform("encounters", pd.DataFrame(full)) if full else empty_table("encounters")


def encounters_from_frequencies(frequencies: Sequence[int], days: int = 10) -> pd.DataFrame:
    """f_i persons seen exactly i times: person_ref repeated i times, on days spread over the window."""
    rows = []
    person = 0
    for times, count in enumerate(frequencies, start=1):
        for _ in range(count):
            for j in range(times):
                rows.append({"person_ref": f"p{person}", "day": 1 + (person + j) % days})
            person += 1
    return encounter_rows(rows)


def observed(**tables: pd.DataFrame) -> dict[str, pd.DataFrame]:
    """A full observed record set: the tables given, the rest empty."""
    out = {name: empty_table(name) for name in ("stations", "checks", "encounters", "false_alarms")}
    out.update(tables)
    return out


def checks_table(rows: Sequence[Mapping[str, object]]) -> pd.DataFrame:
    """Checks rows from partial rows (day 1, hour 10, class box by default)."""
    defaults = {"day": 1, "hour": 10, "vehicle_class": "box", "alarms": 0}
    full = [{**defaults, "method": f"method_{row['station']}", **row} for row in rows]
    return conform("checks", pd.DataFrame(full))
