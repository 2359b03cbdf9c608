"""The observed-record schema: what an agency holds, and nothing it could not know.

This module is the only part of the record layer that estimators may import
(see ``tests/estimate/test_firewall.py``). It knows nothing of simulated truth.

Tables (one Parquet file each under ``RUN_DIR/observed/``):

``stations``
    station, position (route order from 0), role (primary / secondary), method.
``checks``
    day, hour, station, vehicle_class, method, vehicles (passing the station),
    checks (vehicles checked), alarms. Rows only where vehicles > 0.
``encounters``
    one row per person encountered: encounter_id (a group found together),
    day, minute (minute of the day, may exceed 1440 for vehicles carried past
    midnight), kind (detection / interdiction), place (station or boarding
    point), place_kind (station / boarding_point), vehicle_class, method
    (empty for interdictions), person_ref (pseudonymous id; empty when the
    person was not identified), referred_by (for a detection at a secondary
    station, the primary station whose alarm sent the vehicle there; empty
    otherwise: the agency made that referral itself, so it knows).
``false_alarms``
    one row per alarm after which nothing was found: day, minute, station,
    method, vehicle_class.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from .errors import InputError

OBSERVED_DIR = "observed"

OBSERVED_COLUMNS: dict[str, dict[str, str]] = {
    "stations": {"station": "string", "position": "int64", "role": "string", "method": "string"},
    "checks": {
        "day": "int64",
        "hour": "int64",
        "station": "string",
        "vehicle_class": "string",
        "method": "string",
        "vehicles": "int64",
        "checks": "int64",
        "alarms": "int64",
    },
    "encounters": {
        "encounter_id": "int64",
        "day": "int64",
        "minute": "float64",
        "kind": "string",
        "place": "string",
        "place_kind": "string",
        "vehicle_class": "string",
        "method": "string",
        "person_ref": "string",
        "referred_by": "string",
    },
    "false_alarms": {
        "day": "int64",
        "minute": "float64",
        "station": "string",
        "method": "string",
        "vehicle_class": "string",
    },
}


# Columns added to the schema after records were first written, with the value older records mean.
LATER_COLUMNS: dict[str, dict[str, str]] = {"encounters": {"referred_by": ""}}  # no referral known


class ObservedRecordsError(InputError):
    """Observed records that are missing or do not follow the schema."""


def empty_table(name: str) -> pd.DataFrame:
    """An empty DataFrame with the columns and dtypes of observed table ``name``."""
    return pd.DataFrame({col: pd.Series(dtype=dtype) for col, dtype in OBSERVED_COLUMNS[name].items()})


def conform(name: str, frame: pd.DataFrame) -> pd.DataFrame:
    """Check that ``frame`` has every column of table ``name`` and cast it to the schema's dtypes.

    A column of :data:`LATER_COLUMNS` that ``frame`` lacks (records written before it existed) gets its default.
    """
    columns = OBSERVED_COLUMNS[name]
    later = {col: value for col, value in LATER_COLUMNS.get(name, {}).items() if col not in frame.columns}
    if later:
        frame = frame.assign(**later)
    missing = [col for col in columns if col not in frame.columns]
    if missing:
        raise ObservedRecordsError(f"observed table '{name}' lacks column(s): {', '.join(missing)}")
    return frame[list(columns)].astype(columns).reset_index(drop=True)


def read_observed(run_dir: str | Path) -> dict[str, pd.DataFrame]:
    """Read every observed table of a run directory, checked against the schema."""
    base = Path(run_dir) / OBSERVED_DIR
    if not base.is_dir():
        raise ObservedRecordsError(f"{run_dir}: no '{OBSERVED_DIR}/' folder of observed records")
    tables = {}
    for name in OBSERVED_COLUMNS:
        path = base / f"{name}.parquet"
        if not path.exists():
            raise ObservedRecordsError(f"{path}: observed table missing")
        tables[name] = conform(name, pd.read_parquet(path))
    return tables
