"""Getting observed tables into an estimator: a run directory, an extract folder or a dict of DataFrames.

Only the observed-record schema is used here; each estimator names the tables
and columns it needs, so a dict that lacks one fails with that estimator's name.
"""

from __future__ import annotations

import os
from collections.abc import Mapping, Sequence

import pandas as pd

from ..observed import OBSERVED_COLUMNS, ObservedRecordsError, read_records
from .results import EstimatorCannotRun

Observed = str | os.PathLike[str] | Mapping[str, pd.DataFrame]
"""A run directory holding ``observed/*.parquet``, a folder of observed tables (CSV or Parquet), or tables by name."""


def read_tables(observed: Observed) -> Mapping[str, pd.DataFrame]:
    """The observed tables: read and checked from a run directory or extract folder, or the given mapping as is."""
    if isinstance(observed, (str, os.PathLike)):
        return read_records(observed)
    return observed


def load_tables(
    observed: Observed, needs: Mapping[str, Sequence[str]], estimator: str
) -> dict[str, pd.DataFrame]:
    """The columns each needed table must have, cast to the schema's dtypes.

    Raises EstimatorCannotRun naming ``estimator`` when a table or column is missing.
    """
    try:
        tables = read_tables(observed)
    except ObservedRecordsError as exc:
        raise EstimatorCannotRun(estimator, str(exc)) from exc
    out = {}
    for name, columns in needs.items():
        if name not in tables:
            raise EstimatorCannotRun(estimator, f"no observed table '{name}'")
        frame = tables[name]
        missing = [col for col in columns if col not in frame.columns]
        if missing:
            raise EstimatorCannotRun(estimator, f"observed table '{name}' lacks column(s): {', '.join(missing)}")
        try:
            out[name] = frame[list(columns)].astype({col: OBSERVED_COLUMNS[name][col] for col in columns})
        except (TypeError, ValueError) as exc:
            raise EstimatorCannotRun(estimator, f"observed table '{name}' does not fit the schema: {exc}") from exc
    return out


def identified(encounters: pd.DataFrame) -> pd.DataFrame:
    """Encounter rows that carry a person_ref (empty or missing means not identified)."""
    ref = encounters["person_ref"]
    return encounters[ref.notna() & (ref.fillna("").str.strip() != "")]


def primary_stations(stations: pd.DataFrame, estimator: str) -> list[str]:
    """Primary stations in route order (by ``position``)."""
    primaries = stations[stations["role"] == "primary"].sort_values("position", kind="stable")
    if primaries["position"].duplicated().any():
        raise EstimatorCannotRun(estimator, "two primary stations share a position in the stations table")
    if primaries.empty:
        raise EstimatorCannotRun(estimator, "the stations table has no primary station")
    return list(primaries["station"])


def station_detections(encounters: pd.DataFrame) -> pd.DataFrame:
    """Encounter rows that are detections at a station (not interdictions at boarding points)."""
    return encounters[(encounters["kind"] == "detection") & (encounters["place_kind"] == "station")]
