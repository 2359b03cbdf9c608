"""The observed-record schema: what an agency holds, and nothing it could not know.

This module is the only part of the record layer that estimators may import
(see ``tests/estimate/test_firewall.py``). It knows nothing of simulated truth.
:func:`read_records` reads a run directory's records or an agency's own
extract (CSV or Parquet) and checks them; ``docs/observed_records.md``
describes the schema table by table, with a small example extract.

Tables (one Parquet file each under ``RUN_DIR/observed/``):

``stations``
    station, position (route order from 0), role (primary / secondary), method.
``checks``
    day, hour, station, vehicle_class, method, vehicles (passing the station),
    checks (vehicles checked), alarms. Rows only where vehicles > 0.
``encounters``
    one row per person encountered: encounter_id (a group found together),
    day, minute (calendar day and minute of the day; records dated by
    operating day instead may carry a minute past 1440 for vehicles carried
    past midnight), kind (detection / interdiction), place (station or
    boarding point), place_kind (station / boarding_point), vehicle_class and
    method (both empty for interdictions), person_ref (pseudonymous id; empty
    when the person was not identified), referred_by (for a detection at a
    secondary station, the primary station whose alarm sent the vehicle there;
    empty otherwise: the agency made that referral itself, so it knows).
``false_alarms``
    one row per alarm after which nothing was found: day, minute, station,
    method, vehicle_class.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Protocol

import numpy as np
import pandas as pd

from .errors import InputError
from .run_files import damage
from .tables import dtypes

OBSERVED_DIR = "observed"

# Column types come from the data contract (abm.tables), where every column is described.
OBSERVED_COLUMNS: dict[str, dict[str, str]] = {
    name: dtypes(f"{OBSERVED_DIR}/{name}") for name in ("stations", "checks", "encounters", "false_alarms")
}


# Columns added to the schema after records were first written, with the value older records mean.
LATER_COLUMNS: dict[str, dict[str, str]] = {"encounters": {"referred_by": ""}}  # no referral known

OPTIONAL_TABLES = ("false_alarms",)  # an extract without it has logged no false alarm
EXTRACT_SUFFIXES = (".csv", ".parquet")

# Text that may be empty: always, or only on interdiction rows (found at a boarding point, not in a vehicle check).
MAY_BE_EMPTY = {"encounters": ("person_ref", "referred_by")}
EMPTY_FOR_INTERDICTIONS = {"encounters": ("vehicle_class", "method")}

ALLOWED_VALUES = {
    ("stations", "role"): ("primary", "secondary"),
    ("encounters", "kind"): ("detection", "interdiction"),
    ("encounters", "place_kind"): ("station", "boarding_point"),
}
NON_NEGATIVE = {
    "stations": ("position",),
    "checks": ("day", "hour", "vehicles", "checks", "alarms"),
    "encounters": ("day", "minute"),
    "false_alarms": ("day", "minute"),
}
# Tables whose rows must come in day order, as the record writer (abm.records) keeps them. Encounters
# have no order: a vehicle carried past midnight is logged with its operating day's encounters but
# dated the calendar day it was searched, and an agency may list finds in any order.
ORDERED_BY = {"checks": "day", "false_alarms": "day"}
# Columns holding world names, by the RecordNames field they must come from ("place" depends on place_kind).
NAMED_COLUMNS = {
    "stations": {"station": "stations", "method": "methods"},
    "checks": {"station": "stations", "vehicle_class": "vehicle_classes", "method": "methods"},
    "encounters": {"vehicle_class": "vehicle_classes", "method": "methods", "referred_by": "stations"},
    "false_alarms": {"station": "stations", "method": "methods", "vehicle_class": "vehicle_classes"},
}
PLACE_NAMES = {"station": "stations", "boarding_point": "boarding_points"}
ROW_CONVENTION = "first data row = 1"


class ObservedRecordsError(InputError):
    """Observed records that are missing or do not follow the schema.

    The message is one line naming the file, the column and the first bad data row (counted from 1,
    the header not counted; in Parquet the first row is 1).
    """


class _HasNames(Protocol):
    """What :meth:`RecordNames.of_world` reads from a world (``abm.world.schema.World`` has it)."""

    station_names: Sequence[str]
    class_names: Sequence[str]
    point_names: Sequence[str]
    method_names: Sequence[str]


@dataclass(frozen=True)
class RecordNames:
    """The names a world gives its stations, vehicle classes, boarding points and check methods."""

    stations: tuple[str, ...]
    vehicle_classes: tuple[str, ...]
    boarding_points: tuple[str, ...]
    methods: tuple[str, ...]

    @classmethod
    def of_world(cls, world: _HasNames) -> RecordNames:
        """The names of a parsed world (duck-typed, so this module needs no import of the world)."""
        return cls(
            tuple(world.station_names), tuple(world.class_names), tuple(world.point_names), tuple(world.method_names)
        )


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


def read_records(path: str | Path, names: RecordNames | None = None) -> dict[str, pd.DataFrame]:
    """Every observed table of a run directory or of an extract folder, checked, in the schema's dtypes.

    ``path`` is a run directory (its ``observed/*.parquet`` is read, nothing else) or a folder holding
    ``stations``, ``checks``, ``encounters`` and optionally ``false_alarms``, each as ``.csv`` or
    ``.parquet``. With ``names`` every station, vehicle class, boarding point and method must be the
    world's. Raises :class:`ObservedRecordsError` (one line: file, column, first bad data row).
    Nothing is written.
    """
    path = Path(path)
    if (path / OBSERVED_DIR).is_dir():
        return read_observed(path, names)
    if not path.is_dir():
        raise ObservedRecordsError(f"{path}: no run directory or folder of observed tables here")
    return _read_folder(path, EXTRACT_SUFFIXES, names, f", nor an '{OBSERVED_DIR}/' folder of a run directory")


def read_observed(run_dir: str | Path, names: RecordNames | None = None) -> dict[str, pd.DataFrame]:
    """Every observed table of a run directory (``observed/*.parquet``), checked as :func:`read_records` does.

    Nothing else in the directory is opened. With ``names`` the tables must use the world's names.
    """
    base = Path(run_dir) / OBSERVED_DIR
    if not base.is_dir():
        raise ObservedRecordsError(f"{run_dir}: no '{OBSERVED_DIR}/' folder of observed records")
    problem = damage(Path(run_dir), only=[f"{OBSERVED_DIR}/{name}.parquet" for name in OBSERVED_COLUMNS])
    if problem is not None:
        raise ObservedRecordsError(f"{problem}; the run is damaged: rerun it")
    return _read_folder(base, (".parquet",), names, "")


def _read_folder(
    folder: Path, suffixes: Sequence[str], names: RecordNames | None, hint: str
) -> dict[str, pd.DataFrame]:
    tables = {}
    for name in OBSERVED_COLUMNS:
        found = [folder / f"{name}{suffix}" for suffix in suffixes if (folder / f"{name}{suffix}").is_file()]
        if len(found) > 1:
            raise ObservedRecordsError(f"{folder}: both {' and '.join(p.name for p in found)}; keep one")
        if not found:
            if name in OPTIONAL_TABLES:
                tables[name] = empty_table(name)
                continue
            accepted = " or ".join(f"{name}{suffix}" for suffix in suffixes)
            raise ObservedRecordsError(f"{folder}: no observed table '{name}' ({accepted}){hint}")
        tables[name] = _checked_table(name, found[0], names)
    return tables


def _raw_table(path: Path) -> pd.DataFrame:
    """The file as read: CSV entirely as text (so no integer turns float and an empty cell stays "")."""
    try:
        if path.suffix == ".csv":
            return pd.read_csv(path, dtype=str, keep_default_na=False, encoding="utf-8")
        return pd.read_parquet(path)
    except Exception as exc:  # pandas and pyarrow raise many types for an unreadable file
        reason = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise ObservedRecordsError(f"{path}: cannot be read as {path.suffix[1:]}: {reason}") from None


def _checked_table(name: str, path: Path, names: RecordNames | None) -> pd.DataFrame:
    """One table checked column by column, then row by row; the first bad row raises."""
    raw = _raw_table(path)
    schema = OBSERVED_COLUMNS[name]
    for col, default in LATER_COLUMNS.get(name, {}).items():
        if col not in raw.columns:
            raw[col] = default
    for col in schema:
        if col not in raw.columns:
            raise ObservedRecordsError(f"{path}: no column '{col}'")
    frame = pd.DataFrame({col: _parsed(path, dtype, raw[col]) for col, dtype in schema.items()})
    never = pd.Series(False, index=frame.index)
    interdiction = frame["kind"].eq("interdiction") if name == "encounters" else never
    for col, dtype in schema.items():
        if dtype == "string" and col not in MAY_BE_EMPTY.get(name, ()):
            may_be_empty = interdiction if col in EMPTY_FOR_INTERDICTIONS.get(name, ()) else never
            _reject(path, frame[col], frame[col].eq("") & ~may_be_empty, lambda v: "empty, but a value is required")
    for (table, col), allowed in ALLOWED_VALUES.items():
        if table == name:
            other = ~frame[col].isin(allowed)
            _reject(path, frame[col], other, lambda v, a=allowed: f"'{v}' is not one of {', '.join(a)}")
    for col in NON_NEGATIVE[name]:
        _reject(path, frame[col], frame[col] < 0, lambda v: f"{v} is negative")
    if name == "checks":
        _reject(path, frame["hour"], frame["hour"] > 23, lambda v: f"{v} is not an hour of the day (0 to 23)")
        for part, whole in (("checks", "vehicles"), ("alarms", "checks")):
            more = frame[part] > frame[whole]
            _reject(path, frame[part], more, lambda v, p=part, w=whole: f"{v} is more than the row's {w} ({p} <= {w})")
    if name in ORDERED_BY:
        col = ORDERED_BY[name]
        largest_so_far = frame[col].cummax()
        shown = (f"{col} " + frame[col].astype(str) + f" comes after {col} " + largest_so_far.astype(str)).rename(col)
        _reject(path, shown, frame[col] < largest_so_far, lambda v: f"{v}; rows must be in {col} order")
    if names is not None:
        _check_names(path, name, frame, names)
    return frame.astype(schema)


def _check_names(path: Path, name: str, frame: pd.DataFrame, names: RecordNames) -> None:
    """Every non-empty station, vehicle class, boarding point and method is one of the world's."""
    checks = [(col, kind, frame[col].ne("")) for col, kind in NAMED_COLUMNS[name].items()]
    if name == "encounters":
        checks += [("place", kind, frame["place_kind"].eq(place_kind)) for place_kind, kind in PLACE_NAMES.items()]
    for col, kind, present in checks:
        known = getattr(names, kind)
        unknown = present & ~frame[col].isin(known)
        listed = f"the world's {kind.replace('_', ' ')}: {', '.join(known)}"
        _reject(path, frame[col], unknown, lambda v, listed=listed: f"'{v}' is not one of {listed}")


# Up to 18 digits: every such number fits int64.
WHOLE_NUMBER = r"[+-]?\d{1,18}"


def _parsed(path: Path, dtype: str, raw: pd.Series) -> pd.Series:
    """A column as the schema's dtype (string columns as text with "" for empty); a value that does not parse raises."""
    if dtype == "int64" and pd.api.types.is_integer_dtype(raw) and raw.notna().all():
        return raw.astype("int64")
    if dtype == "float64" and pd.api.types.is_numeric_dtype(raw) and not pd.api.types.is_bool_dtype(raw):
        values = raw.astype("float64")
        _reject(path, raw, np.isinf(values), lambda v: f"'{v}' is not a number")
        _reject(path, raw, values.isna(), lambda v: "empty, but a value is required")
        return values
    # Text (CSV, or a Parquet column of another type): NA becomes "", and numbers must parse from the text.
    text = raw.astype("string").fillna("")
    if dtype == "string":
        return text
    stripped = text.str.strip()
    empty = stripped.eq("")
    if dtype == "int64":
        whole = stripped.str.fullmatch(WHOLE_NUMBER)
        _reject(path, text, ~empty & ~whole, lambda v: f"'{v}' is not a whole number")
        _reject(path, text, empty, lambda v: "empty, but a value is required")
        return stripped.astype("int64")
    values = pd.to_numeric(stripped.mask(empty, "nan").astype(object), errors="coerce").astype("float64")
    _reject(path, text, ~empty & ~np.isfinite(values), lambda v: f"'{v}' is not a number")
    _reject(path, text, empty, lambda v: "empty, but a value is required")
    return values


def _reject(path: Path, values: pd.Series, mask: pd.Series | np.ndarray, describe: Callable[[object], str]) -> None:
    """Raise for the first row where ``mask`` holds, naming the file, the column, the row and what is wrong."""
    hits = np.flatnonzero(np.asarray(mask, dtype=bool))
    if hits.size:
        row = int(hits[0])
        message = f"{path}: column '{values.name}', data row {row + 1} ({ROW_CONVENTION}): {describe(values.iloc[row])}"
        # A quoted CSV cell may hold a line break; the message stays one line.
        raise ObservedRecordsError(message.replace("\r", "\\r").replace("\n", "\\n"))
