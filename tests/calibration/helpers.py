"""Synthetic record sets for the calibration tests: runs of the small reference world with a known inflow."""

from __future__ import annotations

import shutil
from pathlib import Path
from typing import Any

import yaml

from abm.experiment.single import run_to_directory
from abm.observed import OBSERVED_DIR
from abm.world import file_hash, load_world

ROOT = Path(__file__).resolve().parents[2]
SMALL_WORLD = ROOT / "worlds" / "reference" / "small_inflow" / "world.yaml"
TRUE_ARRIVALS = 6.0  # adversary.arrivals_per_day of the small world
DAYS, WARMUP = 28, 7


def write_yaml(path: Path, data: Any) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def world_file(folder: Path, behaviour: str = "static") -> Path:
    """The small world with the given behaviour, written into ``folder``."""
    data = yaml.safe_load(SMALL_WORLD.read_text(encoding="utf-8"))
    data["adversary"]["behaviour"] = behaviour
    return write_yaml(folder / f"world_{behaviour}.yaml", data)


def make_target(folder: Path, world: Path, seed: int, days: int = DAYS, warmup: int = WARMUP) -> tuple[Path, dict[str, Any]]:
    """A run whose observed records are the calibration target; everything but ``observed/`` is deleted.

    Returns the target directory and its summary (read before deletion: the test's own view of the truth).
    """
    target = folder / f"target-{world.stem}-{seed}"
    summary = run_to_directory(load_world(world), file_hash(world), days, seed, target, warmup=warmup)
    for entry in target.iterdir():
        if entry.name != OBSERVED_DIR:
            shutil.rmtree(entry) if entry.is_dir() else entry.unlink()
    return target, summary


def calibration_data(world_path: Path, target: Path, **changes: Any) -> dict[str, Any]:
    """A calibration of the small world's inflow to ``target`` (keys replaced by ``changes``)."""
    data: dict[str, Any] = {
        "kind": "calibration",
        "name": "small inflow (test)",
        "world": str(world_path),
        "observed": {"path": str(target), "first_day": WARMUP},
        "days": DAYS,
        "warmup_days": WARMUP,
        "seed": 5,
        "summaries": ["detections_by_station", "repeat_frequencies"],
        "priors": [{"path": "adversary.arrivals_per_day", "dist": "uniform", "low": 1, "high": 20}],
        "method": {"name": "rejection", "draws": 12, "accept": 0.5, "regression": False},
        "predictive_runs": 2,
        "self_check": 0,  # too few draws for one; the tests that measure it set it
    }
    data.update(changes)
    return data
