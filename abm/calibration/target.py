"""The record set being calibrated: its observed part only.

A calibration may read the simulated truth of its own candidate runs, never
that of the records it is fitted to: this module is the only one that loads
those records, and it imports nothing but the observed-record schema
(``tests/calibration/test_target_firewall.py`` parses it to check).

The records can be a run directory (only its ``observed/`` folder is opened)
or an agency's own extract: a folder of observed tables as ``.csv`` or
``.parquet`` (``docs/observed_records.md``). Both are read and checked by
:func:`abm.observed.read_records`.
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from ..observed import RecordNames, read_records


def load_target(path: str | Path, names: RecordNames | None = None) -> dict[str, pd.DataFrame]:
    """The observed tables of a run directory or extract folder, checked (against the world's ``names`` if given)."""
    return read_records(path, names)
