"""Every estimator on a run's observed records: the sensitivities from its world, and flat ``est_`` numbers."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Literal

import numpy as np

from ...errors import InputError
from ...estimate.expansion import Sensitivities
from ...estimate.inputs import read_tables
from ...estimate.report import run_all
from ...estimate.results import DEFAULT_LEVEL, EstimateResult, z_value
from ...estimate.windows import Window, check_window
from ...world.schema import World
from .runs import read_world
from .truth import EstimatorCheckError, method_slug, slug_of


SENSITIVITY_STRENGTH = 1000.0  # a + b of the Beta built from the world: as if from a trial of 1000 checks


def sensitivities_from_world(world: World, strength: float = SENSITIVITY_STRENGTH) -> dict[str, tuple[float, float]]:
    """Beta(a, b) per primary station centred on its check method's detection chance in the world.

    The chance is averaged over the classes people can hide in (capacity > 0),
    weighted by traffic share: an analyst who knows the kit's sensitivity from
    trials but not the class mix of attempts. a + b = ``strength``; the mean is
    kept inside [1/strength, 1 − 1/strength] so both parameters stay positive.
    """
    classes = [(c.name, c.share) for c in world.vehicle_classes if c.capacity > 0]
    weights = np.array([share for _, share in classes], dtype=float)
    if not classes or weights.sum() <= 0:
        weights = np.ones(len(classes))
    methods = {m.name: m for m in world.methods}
    out: dict[str, tuple[float, float]] = {}
    for station in world.stations:
        if station.role != "primary":
            continue
        detection = methods[station.method].detection
        default = detection.get("default", 0.0)
        chances = np.array([detection.get(name, default) for name, _ in classes], dtype=float)
        mean = float(np.average(chances, weights=weights)) if classes else default
        mean = min(max(mean, 1.0 / strength), 1.0 - 1.0 / strength)
        out[station.name] = (mean * strength, (1.0 - mean) * strength)
    return out


SensitivityChoice = Literal["world"] | Sensitivities | None


def _sensitivities(choice: SensitivityChoice, world: World | None) -> Sensitivities | None:
    if isinstance(choice, str):
        if choice != "world":
            raise EstimatorCheckError(f"sensitivities must be 'world', a mapping or None, got {choice!r}")
        return sensitivities_from_world(world) if world is not None else None
    return choice


def run_estimators(
    run_dir: str | Path, window: Window = None, level: float = DEFAULT_LEVEL, sensitivities: SensitivityChoice = "world"
) -> tuple[list[EstimateResult], list[tuple[str, str]]]:
    """Every estimator on a run's observed records (run_all, each estimator isolated from the others' faults).

    ``sensitivities="world"`` builds them from the run's world.json
    (:func:`sensitivities_from_world`); None leaves the expansion and the
    relative-sensitivity removal unable to run. No bootstrap, so the result
    depends only on the run directory.
    """
    world = read_world(run_dir) if isinstance(sensitivities, str) else None
    chosen = _sensitivities(sensitivities, world)
    return run_all(read_tables(run_dir), window, level, chosen, isolate=True)


# --------------------------------------------------------------------------- flat numbers for a batch store


def _finite(value: float) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None


def estimates_for_run(
    run_dir: str | Path,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    sensitivities: SensitivityChoice = "world",
) -> dict[str, float | None]:
    """Flat ``est_<slug>``, ``est_<slug>_lo``, ``est_<slug>_hi`` for every estimator of the run.

    Reads observed records (and, for ``sensitivities="world"``, the run's
    world.json for the expansion's sensitivities; without it those two
    estimators are None). An estimator that cannot run gives None in its
    three columns, so every run of a batch has the same columns; no value is
    NaN or infinite. Deterministic: no bootstrap. Truth is not read. A bad
    window or level, or a directory without observed records, still raises.
    """
    return _flat_estimates(*_results_for_run(run_dir, window, level, sensitivities))


def _results_for_run(
    run_dir: str | Path, window: Window = None, level: float = DEFAULT_LEVEL, sensitivities: SensitivityChoice = "world"
) -> tuple[list[EstimateResult], list[tuple[str, str]]]:
    """:func:`run_estimators`, the world's sensitivities left out (not failing) when its world.json cannot be read."""
    window = check_window(window, "estimates")
    z_value(level, "estimates")
    if isinstance(sensitivities, str) and sensitivities == "world":
        try:
            chosen = _sensitivities("world", read_world(run_dir))
        except InputError:
            chosen = None
    else:
        chosen = _sensitivities(sensitivities, None)
    return run_estimators(run_dir, window, level, chosen)


def _flat_estimates(results: list[EstimateResult], failures: list[tuple[str, str]]) -> dict[str, float | None]:
    out: dict[str, float | None] = {}
    for name, _ in failures:
        slug = method_slug(name)
        if slug is not None and slug != "expansion":
            out.update({f"est_{slug}": None, f"est_{slug}_lo": None, f"est_{slug}_hi": None})
    for result in results:
        slug = method_slug(result.method) or slug_of(result.method)
        out[f"est_{slug}"] = _finite(result.estimate)
        out[f"est_{slug}_lo"] = _finite(result.ci_low)
        out[f"est_{slug}_hi"] = _finite(result.ci_high)
    return dict(sorted(out.items()))
