"""One run directory as the single-run report reads it: its records over the days its summary covers.

A run directory is what ``undertow run`` (or a batch's worker) writes: a
``manifest.json`` beside its records and, since runs record their files, a
``files.json``. Whatever a run's summary leaves out (its warm-up) the report
leaves out too, so every figure counts the same days as ``summary.json``.
A damaged run is refused as every reader refuses it
(:func:`abm.run_files.require_whole`); tables that older runs did not write
yet (the queue and departure tables) are ``None`` and their sections say so.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from ..analysis.estimator_check.runs import MANIFEST_FILE, read_world, summarised_days
from ..errors import InputError
from ..observed import OBSERVED_DIR
from ..records import DEPARTURES_FILE, QUEUE_HOURS_FILE, QUEUES_FILE, TRUTH_DIR
from ..run_files import FILES_RECORD, require_whole
from ..world.schema import World
from ..world.words import Words, words_for

DAILY_FILE = "daily.parquet"
SUMMARY_FILE = "summary.json"


class RunReportInputError(InputError):
    """A folder the single-run report cannot read."""


def is_run_directory(path: Path) -> bool:
    """True for a folder written as one run: a manifest beside its file record or its daily table."""
    return (path / MANIFEST_FILE).is_file() and ((path / FILES_RECORD).is_file() or (path / DAILY_FILE).is_file())


@dataclass(frozen=True)
class RunView:
    """What the report needs of one run, its tables cut to the summarised days ``first_day``..``last_day``."""

    path: Path
    manifest: dict[str, Any]
    world: World
    words: Words
    summary: dict[str, Any]
    first_day: int
    last_day: int
    daily: pd.DataFrame  # daily.parquet
    arrivals: pd.DataFrame  # truth/arrivals
    attempts: pd.DataFrame  # truth/attempts
    encounters: pd.DataFrame  # observed/encounters
    checks: pd.DataFrame  # observed/checks
    false_alarms: pd.DataFrame  # observed/false_alarms
    queues: pd.DataFrame | None  # queues.parquet (None: a run from before it was written)
    queue_hours: pd.DataFrame | None  # queue_hours.parquet
    departures: pd.DataFrame | None  # departures.parquet

    @property
    def days(self) -> int:
        return self.last_day - self.first_day + 1

    @property
    def warmup(self) -> int:
        return self.first_day

    @property
    def window_text(self) -> str:
        """ "days 7–36 (30 days after a 7-day warm-up)" """
        after = f" after a {self.warmup}-day warm-up" if self.warmup else ""
        return f"days {self.first_day}–{self.last_day} ({self.days} days{after})"


def _read_json(path: Path) -> dict[str, Any]:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise RunReportInputError(f"{path}: not readable JSON ({exc.__class__.__name__})") from None
    if not isinstance(data, dict):
        raise RunReportInputError(f"{path}: expected a JSON object")
    return data


def _table(path: Path, first: int, last: int, needed: bool = True) -> pd.DataFrame | None:
    """A table of the run, its rows cut to days ``first``..``last`` when it has a day column."""
    if not path.is_file():
        if needed:
            raise RunReportInputError(f"{path}: missing; the report needs a whole run directory")
        return None
    frame = pd.read_parquet(path)
    if "day" in frame:
        frame = frame[frame["day"].between(first, last)].reset_index(drop=True)
    return frame


def load_run(run_dir: str | Path) -> RunView:
    """Read a run directory for the report; one-line errors for a damaged or incomplete run."""
    path = Path(run_dir)
    require_whole(path)  # the refusal every reader of runs gives, naming the damaged file
    manifest = _read_json(path / MANIFEST_FILE)
    if "days" not in manifest:
        raise RunReportInputError(f"{path / MANIFEST_FILE}: names no days; is {path} a run directory?")
    summary = _read_json(path / SUMMARY_FILE)
    world = read_world(path)
    first, last = summarised_days(path)
    truth, observed = path / TRUTH_DIR, path / OBSERVED_DIR
    return RunView(
        path=path,
        manifest=manifest,
        world=world,
        words=words_for(world),
        summary=summary,
        first_day=first,
        last_day=last,
        daily=_table(path / DAILY_FILE, first, last),
        arrivals=_table(truth / "arrivals.parquet", first, last),
        attempts=_table(truth / "attempts.parquet", first, last),
        encounters=_table(observed / "encounters.parquet", first, last),
        checks=_table(observed / "checks.parquet", first, last),
        false_alarms=_table(observed / "false_alarms.parquet", first, last),
        queues=_table(path / QUEUES_FILE, first, last, needed=False),
        queue_hours=_table(path / QUEUE_HOURS_FILE, first, last, needed=False),
        departures=_table(path / DEPARTURES_FILE, first, last, needed=False),
    )
