"""Reading the records of a run directory that displacement needs."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from ...errors import InputError
from ...experiment.single import WORLD_FILE
from ...observed import read_observed
from ...records import TRUTH_COLUMNS, TRUTH_DIR, read_truth
from ...run_files import damage
from ...world import parse_world
from ...world.schema import World
from .result import Window


MANIFEST_FILE = "manifest.json"
DAILY_FILE = "daily.parquet"


class DisplacementInputError(InputError):
    """Run directories or settings a displacement comparison cannot use."""


@dataclass(frozen=True)
class _Run:
    """The records of one run directory that displacement needs."""

    path: Path
    world: World
    days: int
    seed: int | None
    warmup_days: int
    attempts: pd.DataFrame
    exits: pd.DataFrame
    detections: pd.DataFrame


def _read_run(run_dir: str | Path) -> _Run:
    path = Path(run_dir)
    if not path.is_dir():
        raise DisplacementInputError(f"{path}: no such run directory")
    problem = damage(path)
    if problem is not None:
        raise DisplacementInputError(f"{problem}; the run is damaged: rerun it")
    missing = [name for name in TRUTH_COLUMNS if not (path / TRUTH_DIR / f"{name}.parquet").is_file()]
    if missing:
        raise DisplacementInputError(
            f"{path}: no truth records ({TRUTH_DIR}/{missing[0]}.parquet missing); displacement needs a whole run directory"
        )
    daily_file = path / DAILY_FILE
    if not daily_file.is_file():
        raise DisplacementInputError(f"{daily_file}: missing; displacement needs a whole run directory")
    # The daily table has one row per simulated day, warm-up included, so it gives the span of the records.
    daily_days = pd.read_parquet(daily_file, columns=["day"])["day"]
    if daily_days.empty:
        raise DisplacementInputError(f"{daily_file}: no days recorded")
    manifest = _read_json(path / MANIFEST_FILE)
    if not isinstance(manifest, dict):
        raise DisplacementInputError(f"{path / MANIFEST_FILE}: expected a JSON object")
    world = parse_world(_read_json(path / WORLD_FILE), path / WORLD_FILE)
    truth = read_truth(path)
    encounters = read_observed(path)["encounters"]
    attempts = truth["attempts"].copy()
    attempts["option"] = attempts["point"] + "/" + attempts["band"] + "/" + attempts["vehicle_class"]
    if "depth" not in attempts:  # records from before depth was recorded: every attempt at the first level
        attempts["depth"] = world.depths[0].name
    seed, warmup = manifest.get("seed"), manifest.get("warmup_days", 0)
    return _Run(
        path=path,
        world=world,
        days=int(daily_days.max()) + 1,
        seed=seed if isinstance(seed, int) else None,
        warmup_days=warmup if isinstance(warmup, int) else 0,
        attempts=attempts,
        exits=truth["exits"],
        detections=encounters[encounters["kind"] == "detection"],
    )


def _read_json(path: Path) -> Any:
    if not path.is_file():
        raise DisplacementInputError(f"{path}: missing; displacement needs a whole run directory")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise DisplacementInputError(f"{path}: not valid JSON ({exc})") from None


def _in_window(frame: pd.DataFrame, window: Window) -> pd.DataFrame:
    return frame[(frame["day"] >= window.start_day) & (frame["day"] < window.end_day)]
