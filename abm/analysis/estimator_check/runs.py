"""Reading a run for the estimator check: its world, the days its summary covers, its truth per estimator,
and the runs of a batch store."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from ...estimate.removal import CARLE_STRUB, RELATIVE, TWO_PASS, ZIPPIN
from ...estimate.windows import Window, check_window
from ...records import read_truth
from ...world import parse_world
from ...world.schema import World
from .truth import (
    EstimatorCheckError,
    PERSONS_AT_RISK,
    Route,
    TRUTH_TABLE,
    UNDETECTED_SUFFIX,
    attempts_reaching,
    passed_unfound,
    persons_at_risk,
    slug_of,
)


WORLD_FILE = "world.json"  # as abm.experiment.single writes it
MANIFEST_FILE = "manifest.json"


def read_world(run_dir: str | Path) -> World:
    """The validated world a run used (its ``world.json``)."""
    path = Path(run_dir) / WORLD_FILE
    if not path.is_file():
        raise EstimatorCheckError(f"{path}: missing; the check needs the world a run used")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise EstimatorCheckError(f"{path}: not readable JSON ({exc})") from None
    return parse_world(data, path)


def summarised_days(run_dir: str | Path) -> tuple[int, int]:
    """The days a run's summary covers, (first, last) inclusive: after its warm-up, from its manifest."""
    manifest = json.loads((Path(run_dir) / MANIFEST_FILE).read_text(encoding="utf-8"))
    warmup = int(manifest.get("warmup_days", 0))
    return warmup, warmup + int(manifest["days"]) - 1


def truth_for_run(run_dir: str | Path, window: Window = None) -> dict[str, int | None]:
    """``truth_<slug>`` for the slugs of :func:`estimates_for_run`: the truth each estimator targets.

    None where the truth cannot be counted exactly (see :class:`Route`). This reads truth records: it
    belongs beside the estimates in a store, never inside an estimator.
    """
    world = read_world(run_dir)
    route = Route.from_world(world)
    attempts = read_truth(run_dir)["attempts"]
    window = check_window(window, "estimator check")
    at_risk = persons_at_risk(attempts, window)
    out: dict[str, int | None] = {}
    for rule in TRUTH_TABLE:
        if rule.truth == PERSONS_AT_RISK:
            out[f"truth_{rule.slug}"] = at_risk
        elif rule.method in (TWO_PASS, CARLE_STRUB, ZIPPIN, RELATIVE) and route.primaries:
            out[f"truth_{rule.slug}"] = attempts_reaching(attempts, route, route.primaries[0], window)
    for station in route.primaries:
        slug = f"expansion_{slug_of(station)}"
        exact = station not in route.inexact
        out[f"truth_{slug}"] = attempts_reaching(attempts, route, station, window) if exact else None
        out[f"truth_{slug}{UNDETECTED_SUFFIX}"] = passed_unfound(attempts, route, station, window) if exact else None
    return dict(sorted(out.items()))


def runs_from_store(out: str | Path) -> list[tuple[Path, dict[str, Any]]]:
    """(run directory, factor labels) for every completed run of a batch store (``OUT/runs/*``).

    Labels are the design point's factor values from each run's manifest
    (``experiment_run.values``); replications of a design point share them.
    """
    base = Path(out) / "runs"
    if not base.is_dir():
        raise EstimatorCheckError(f"{base}: no runs folder; is {out} a batch output folder?")
    found = []
    for run_dir in sorted(p for p in base.iterdir() if p.is_dir() and not p.name.startswith(".")):
        manifest_path = run_dir / MANIFEST_FILE
        if not manifest_path.is_file():
            continue
        manifest = json.loads(manifest_path.read_text(encoding="utf-8"))
        info = manifest.get("experiment_run", {}) if isinstance(manifest, dict) else {}
        found.append((run_dir, dict(info.get("values", {}))))
    return found
