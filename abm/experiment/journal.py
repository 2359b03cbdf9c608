"""The compact record of lean simulations: one row per finished simulation, kept as answers come back.

Calibration and policy-search candidates need a few numbers each, not a run
directory (a few hundred kilobytes), so by default their workers send back
only those numbers (see :mod:`abm.experiment.worker`) and a journal keeps
them. A row is appended to ``simulations.jsonl`` as soon as its answer
arrives, so an interrupted search or calibration resumes without running a
finished simulation again; when a round of simulations ends the rows are
gathered into ``simulations.parquet`` (a table of the data contract) and the
lines file is removed. A last line cut short by a crash is ignored.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any, TextIO

import pandas as pd

from ..records import write_parquet

LINES_FILE = "simulations.jsonl"
TABLE_FILE = "simulations.parquet"


class Journal:
    """Finished simulations in one folder, by key (the column ``key`` of each row)."""

    def __init__(self, folder: Path, table_name: str, key: str) -> None:
        self.folder = Path(folder)
        self.table_name = table_name
        self.key = key
        self._rows: dict[str, dict[str, Any]] | None = None
        self._lines: TextIO | None = None

    def rows(self) -> dict[str, dict[str, Any]]:
        """Every row kept so far (the table's, then the lines written since), by key."""
        if self._rows is None:
            rows: dict[str, dict[str, Any]] = {}
            table = self.folder / TABLE_FILE
            if table.is_file():
                for row in pd.read_parquet(table).to_dict("records"):
                    rows[str(row[self.key])] = row
            lines = self.folder / LINES_FILE
            if lines.is_file():
                for line in lines.read_text(encoding="utf-8").splitlines():
                    try:
                        row = json.loads(line)
                    except json.JSONDecodeError:  # the last line of an interrupted round, cut short
                        continue
                    rows[str(row[self.key])] = row
            self._rows = rows
        return self._rows

    def add(self, row: Mapping[str, Any]) -> None:
        """Keep one finished simulation's row at once (appended and flushed: it survives an interruption)."""
        rows = self.rows()
        if self._lines is None:
            self.folder.mkdir(parents=True, exist_ok=True)
            self._lines = open(self.folder / LINES_FILE, "a", encoding="utf-8")  # noqa: SIM115 - closed in end_round
        self._lines.write(json.dumps(dict(row), allow_nan=True) + "\n")
        self._lines.flush()
        rows[str(row[self.key])] = dict(row)

    def end_round(self) -> None:
        """Gather every row into the table, sorted by key, and remove the lines file it now holds."""
        if self._lines is not None:
            self._lines.close()
            self._lines = None
        lines = self.folder / LINES_FILE
        if not lines.is_file():
            return
        rows = sorted(self.rows().values(), key=lambda row: str(row[self.key]))
        write_parquet(pd.DataFrame(rows), self.folder / TABLE_FILE, self.table_name)
        lines.unlink()


def same_numbers(held: Mapping[str, Any], wanted: Mapping[str, float]) -> bool:
    """True when ``held`` has each of ``wanted``'s numbers, exactly (NaN equal to NaN)."""
    for name, value in wanted.items():
        if name not in held:
            return False
        have = float(held[name])
        if not (have == value or (math.isnan(have) and math.isnan(value))):
            return False
    return True
