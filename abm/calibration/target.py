"""The record set being calibrated: its observed part only.

A calibration may read the simulated truth of its own candidate runs, never
that of the records it is fitted to: this module is the only one that loads
those records, and it imports nothing but the observed-record schema
(``tests/calibration/test_target_firewall.py`` parses it to check).

The records can be

* a run directory: its ``observed/`` folder is read with
  :func:`abm.observed.read_observed` (nothing else in the directory is opened);
* a folder of observed tables in the observed schema, one file per table
  named ``stations``, ``checks`` and ``encounters`` (``false_alarms`` may be
  left out), each as ``.parquet`` or ``.csv``: an agency's own extract.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ..observed import OBSERVED_COLUMNS, OBSERVED_DIR, ObservedRecordsError, conform, empty_table, read_observed

REQUIRED_TABLES = ("stations", "checks", "encounters")


def load_target(path: str | Path) -> dict[str, pd.DataFrame]:
    """The observed tables of a run directory or of a folder of observed tables, checked against the schema."""
    path = Path(path)
    if (path / OBSERVED_DIR).is_dir():
        return read_observed(path)
    if not path.is_dir():
        raise ObservedRecordsError(f"{path}: no run directory or folder of observed tables here")
    tables = {}
    for name in OBSERVED_COLUMNS:
        frame = _read_table(path, name)
        if frame is None:
            if name in REQUIRED_TABLES:
                raise ObservedRecordsError(
                    f"{path}: no observed table '{name}' ({name}.parquet or {name}.csv), nor an '{OBSERVED_DIR}/' folder"
                )
            tables[name] = empty_table(name)
            continue
        try:
            tables[name] = conform(name, frame)
        except (TypeError, ValueError) as exc:
            raise ObservedRecordsError(f"{path}: observed table '{name}' does not fit the schema: {exc}") from None
    return tables


def _read_table(folder: Path, name: str) -> pd.DataFrame | None:
    parquet, csv = folder / f"{name}.parquet", folder / f"{name}.csv"
    if parquet.is_file():
        return pd.read_parquet(parquet)
    if csv.is_file():
        # Text columns stay text: an empty person_ref is "", not a missing number.
        text = [col for col, dtype in OBSERVED_COLUMNS[name].items() if dtype == "string"]
        return pd.read_csv(csv, dtype={col: str for col in text}, keep_default_na=False)
    return None
