"""Small experiments on the demo world for the experiment tests, kept short to stay fast."""

from __future__ import annotations

import copy
import sys
from pathlib import Path
from typing import Any

import yaml

ROOT = Path(__file__).resolve().parents[2]
DEMO_WORLD = ROOT / "worlds" / "kestrel_quay" / "world.yaml"

# Three policies at equal staff hours but for the surge; a few short days keep each run well under a second.
POLICY_FACTOR: dict[str, Any] = {
    "name": "policy",
    "baseline": "current",
    "levels": [
        {"name": "current", "set": {}},
        {"name": "double_imaging", "set": {"stations.gate_imaging.selection.fraction": 0.4}},
        {
            "name": "night_surge",
            "set": {
                "roster.teams.night_shift.lanes.gate_imaging": 4,
                "roster.teams.night_shift.lanes.checkin_probe": 5,
            },
        },
    ],
}

BASE_EXPERIMENT: dict[str, Any] = {
    "kind": "experiment",
    "name": "test experiment (illustrative)",
    "world": str(DEMO_WORLD),
    "days": 5,
    "warmup_days": 1,
    "replications": 2,
    "seed": 11,
    "factors": [POLICY_FACTOR],
}


def experiment(**changes: Any) -> dict[str, Any]:
    """The base experiment with top-level keys replaced (a key set to None is removed)."""
    data = copy.deepcopy(BASE_EXPERIMENT)
    for key, value in changes.items():
        if value is None:
            data.pop(key, None)
        else:
            data[key] = value
    return data


def write_yaml(path: Path, data: Any) -> Path:
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def undertow_command() -> list[str]:
    """The installed console script, as a user runs it (the module entry point if it is not installed)."""
    script = Path(sys.executable).parent / "undertow"
    return [str(script)] if script.exists() else [sys.executable, "-m", "abm.cli"]
