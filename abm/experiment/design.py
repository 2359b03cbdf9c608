"""Experiment files into plans: validated factors, design points and common-random-number seeds.

:func:`load_plan` reads an experiment file, validates it against
:mod:`abm.experiment.schema`, reads its world, checks every factor against the
world (paths, level values) and then every design point's world, before
anything runs. Every problem is one :class:`ExperimentFileError` line
``FILE: KEY.PATH: message``; a problem inside the world file itself names the
world file.

Designs: ``full_factorial`` (every combination of levels, first factor
slowest), ``one_at_a_time`` (a centre point of reference levels, then each
factor's other levels in turn), ``latin_hypercube`` and ``sobol`` (scrambled
samples over ranges, drawn from a stream of the root seed).

Common random numbers: replication ``r`` of every design point runs with the
same seed, ``SeedSequence(root).spawn(R)[r].generate_state(1)[0]``, and, when
the experiment names a calibration, with the same posterior draw of the
unknowns (:mod:`abm.experiment.posterior`).
"""

from __future__ import annotations

import hashlib
import itertools
import json
import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import ValidationError
from scipy.stats import qmc

from ..world import WorldFileError, file_hash, parse_world, read_yaml_mapping
from ..world.paths import PathProblem, apply_changes, set_path
from .budget import Keys, PlanSize, busiest_day, refuse
from .posterior import Posterior, PosteriorProblem, read_posterior
from .project_file import read_project_file, schema_error, shown
from .schema import SAMPLED_DESIGNS, Bundle, Experiment, Factor
from .single import SUMMARY_SOURCES

# Run-table columns a factor may not be named after.
RESERVED_COLUMNS = frozenset({"run_id", "point", "replication", "seed", "days", "warmup_days", *SUMMARY_SOURCES})
# spawn() gives children one-element spawn keys; a two-element key can never collide with a replication's.
_DESIGN_SPAWN_KEY = (0x0DE5, 0)


class ExperimentFileError(WorldFileError):
    """An experiment file that cannot be used, with the key path at fault. ``str()`` is one line."""


@dataclass(frozen=True)
class Level:
    """One level of a factor: its label in the run table and the world changes it makes."""

    label: Any
    changes: tuple[tuple[str, Any], ...]


@dataclass(frozen=True)
class PlannedFactor:
    """A validated factor: levels (full factorial, one at a time) or a range (sampled designs)."""

    label: str
    key: str  # where it is in the file, e.g. "factors[1]"
    path: str | None
    levels: tuple[Level, ...] = ()
    low: float | int | None = None
    high: float | int | None = None
    baseline: int | None = None  # index of the designated baseline level

    @property
    def integer(self) -> bool:
        """A range with whole-number bounds samples whole numbers."""
        return isinstance(self.low, int) and isinstance(self.high, int)

    @property
    def reference(self) -> int:
        """The level a one-at-a-time sweep holds this factor at: the baseline, else the first."""
        return self.baseline if self.baseline is not None else 0

    def value_at(self, u: float) -> int | float:
        """The range value at unit coordinate ``u`` (each of n equal strata of u maps to one of the range)."""
        assert self.low is not None and self.high is not None
        if self.integer:
            return int(min(self.high, self.low + int(np.floor(u * (self.high - self.low + 1)))))
        return float(self.low + u * (self.high - self.low))


@dataclass(frozen=True)
class DesignPoint:
    """One combination of factor values; every replication of it is one run."""

    index: int
    values: dict[str, Any]  # factor label -> level label or sampled value
    changes: tuple[tuple[str, Any], ...]
    compare_to: int | None  # the point its paired differences are taken against


@dataclass(frozen=True)
class RunSpec:
    """Identity of one run of the batch."""

    run_id: str
    point: int
    replication: int
    seed: int


@dataclass(frozen=True)
class Plan:
    """A validated experiment: what to run, ready for the executors."""

    source: Path
    spec: Experiment
    world_path: Path
    world_data: dict[str, Any]
    world_sha256: str
    factors: tuple[PlannedFactor, ...]
    points: tuple[DesignPoint, ...]
    seeds: tuple[int, ...]  # one per replication, shared by every point
    posterior: Posterior | None = None  # the calibration whose draws set the unknowns, one per replication

    @property
    def total_runs(self) -> int:
        return len(self.points) * len(self.seeds)

    def run_id(self, point: int, replication: int) -> str:
        """Deterministic and sortable: ``p003-r07`` (wider when the batch needs it)."""
        pw = max(3, len(str(len(self.points) - 1)))
        rw = max(2, len(str(len(self.seeds) - 1)))
        return f"p{point:0{pw}d}-r{replication:0{rw}d}"

    def runs(self) -> Iterator[RunSpec]:
        """Every run, point by point, in run-id order."""
        for point in self.points:
            for replication, seed in enumerate(self.seeds):
                yield RunSpec(self.run_id(point.index, replication), point.index, replication, seed)

    def world_for(self, point: int, replication: int = 0) -> dict[str, Any]:
        """The world mapping of a run: the base world, the replication's posterior draw if any, the point's changes."""
        world = self.world_data
        if self.posterior is not None:
            world = self.posterior.apply(world, self.posterior.draws[replication])
        return apply_changes(world, dict(self.points[point].changes))

    def run_values(self, point: int, replication: int) -> dict[str, Any]:
        """A run's columns of the run table (and values of its manifest): factor values, then any drawn unknowns."""
        values = dict(self.points[point].values)
        if self.posterior is not None:
            values.update(self.posterior.run_values(replication))
        return values

    def digest(self) -> str:
        """SHA-256 of what determines the batch's results: the experiment, the world, the points and any posterior."""
        # Without a calibration the digest is what it was before the key existed, so older batches still resume.
        unset = {"calibration"} if self.posterior is None else None
        identity = {
            "experiment": self.spec.model_dump(mode="json", exclude=unset),
            "world": self.world_data,
            "points": [[p.values, p.changes] for p in self.points],
        }
        if self.posterior is not None:
            identity["posterior"] = self.posterior.identity()
        return _sha256(identity)

    def design_table(self) -> list[dict[str, Any]]:
        """The design points as plain data, for experiment.json."""
        return [
            {"point": p.index, "values": p.values, "changes": dict(p.changes), "compare_to": p.compare_to}
            for p in self.points
        ]


def crn_seeds(root: int, replications: int) -> tuple[int, ...]:
    """One seed per replication, the same for every design point (common random numbers)."""
    return tuple(int(child.generate_state(1)[0]) for child in np.random.SeedSequence(root).spawn(replications))


def load_plan(
    path: str | Path, calibration: str | Path | None = None, allow_large: bool = False, out: Path | None = None
) -> Plan:
    """Read, validate and expand an experiment file; raise ExperimentFileError (or WorldFileError).

    ``calibration`` names a calibration output folder in place of the file's
    ``calibration:`` key (``undertow demo`` passes the one it has just made).
    A plan too large for this machine (or, without ``allow_large``, above the
    ceilings of :mod:`abm.experiment.budget`) is refused before its design
    points are expanded; ``out`` is where its records would go.
    """
    source, data, spec = read_project_file(path, Experiment, ExperimentFileError)
    if calibration is not None:
        spec = spec.model_copy(update={"calibration": str(Path(calibration).resolve())})
    _check_design_keys(spec, source)
    world_path = source.parent / spec.world
    if not world_path.is_file():
        raise ExperimentFileError(source, "world", f"no world file at {world_path}")
    world_data = read_yaml_mapping(world_path)
    parse_world(world_data, world_path)
    factors = tuple(_plan_factor(spec, i, source, world_data) for i in range(len(spec.factors)))
    _check_labels(factors, source)
    _check_overlaps(factors, world_data, source)
    _check_size(spec, factors, world_data, source, allow_large, out)
    points = _design_points(spec, factors)
    for point in points:
        try:
            parse_world(apply_changes(world_data, dict(point.changes)), "<design point>")
        except WorldFileError as exc:
            where = f"design point {point.index} ({point_shown(point)})"
            raise ExperimentFileError(source, "factors", f"{where}: in the world, {exc.path}: {exc.message}") from None
    posterior = _plan_posterior(spec, source, world_data, factors, points) if spec.calibration is not None else None
    return Plan(
        source=source,
        spec=spec,
        world_path=world_path,
        world_data=world_data,
        world_sha256=file_hash(world_path),
        factors=factors,
        points=tuple(points),
        seeds=crn_seeds(spec.seed, spec.replications),
        posterior=posterior,
    )


# -- checks ---------------------------------------------------------------------------------


def _point_count(spec: Experiment, factors: Sequence[PlannedFactor]) -> int:
    """How many design points the design will have, without expanding them."""
    if spec.design == "full_factorial":
        return math.prod(len(f.levels) for f in factors)
    if spec.design == "one_at_a_time":
        return 1 + sum(len(f.levels) - 1 for f in factors)
    assert spec.samples is not None
    return spec.samples


def _check_size(
    spec: Experiment, factors: Sequence[PlannedFactor], world: dict[str, Any], source: Path, allow_large: bool,
    out: Path | None,
) -> None:
    """Refuse, naming the key, a plan that will not fit (see :mod:`abm.experiment.budget`)."""
    points = _point_count(spec, factors)
    size = PlanSize(points * spec.replications, spec.days + spec.warmup_days, busiest_day(world))
    runs_key = "samples" if spec.samples is not None and spec.replications * 10 < spec.samples else "replications"
    keys = Keys("traffic.vehicles_per_day", "days", runs_key, " (in the world file)")
    refuse(size, keys, out, allow_large, lambda key, message: ExperimentFileError(source, key, message))


def _check_design_keys(spec: Experiment, source: Path) -> None:
    sampled = spec.design in SAMPLED_DESIGNS
    if sampled and spec.samples is None:
        raise ExperimentFileError(source, "samples", f"a {spec.design} design needs samples (how many design points)")
    if not sampled and spec.samples is not None:
        raise ExperimentFileError(source, "samples", f"samples is for sampled designs only, not {spec.design}")
    if spec.design == "sobol" and spec.samples is not None and spec.samples & (spec.samples - 1):
        raise ExperimentFileError(source, "samples", f"a sobol design needs a power of two, got {spec.samples}")
    if sampled and not spec.factors:
        raise ExperimentFileError(source, "factors", f"a {spec.design} design needs at least one factor with a range")


def _plan_factor(spec: Experiment, i: int, source: Path, world: dict[str, Any]) -> PlannedFactor:
    """Check one factor against the design and the world; its levels with their world changes."""
    factor = spec.factors[i]
    key = f"factors[{i}]"

    def fail(where: str, message: str) -> ExperimentFileError:
        return ExperimentFileError(source, f"{key}.{where}" if where else key, message)

    if factor.levels is None and factor.range is None:
        raise fail("", "a factor needs levels (or a range, for sampled designs)")
    if factor.levels is not None and factor.range is not None:
        raise fail("range", "a factor has levels or a range, not both")
    if factor.path is None and factor.name is None:
        raise fail("name", "required for a factor whose levels are bundles (a factor without a path)")
    if factor.path is None and factor.range is not None:
        raise fail("range", "a range needs a path to vary")

    def at_path(_: str) -> str:
        return f"{key}.path"

    sampled = spec.design in SAMPLED_DESIGNS
    if sampled and factor.range is None:
        raise fail("levels", f"a {spec.design} design samples ranges; give this factor range: [low, high]")
    if not sampled and factor.range is not None:
        raise fail("range", f"a {spec.design} design takes levels; ranges are for latin_hypercube or sobol")

    if factor.range is not None:
        low, high = factor.range
        if not low < high:
            raise fail("range", f"expected low < high, got [{low}, {high}]")
        if factor.baseline is not None:
            raise fail("baseline", "a sampled range has no baseline level")
        for end, value in (("low", low), ("high", high)):
            _check_changes(world, ((factor.path, value),), source, f"{key}.range", at_path, f"at the {end} end, ")
        return PlannedFactor(factor.label, key, factor.path, low=low, high=high)

    assert factor.levels is not None
    if not factor.levels:
        raise fail("levels", "is empty; expected at least one level")
    levels = _bundle_levels(factor, key, source) if factor.path is None else _value_levels(factor, key, source)
    for j, level in enumerate(levels):
        where = f"{key}.levels[{j}]"
        prefix = f"level {shown(level.label)} of factor {shown(factor.label)}: "
        _check_changes(world, level.changes, source, where, at_path if factor.path else lambda p: f"{where}.set.{p}",
                       prefix)
    baseline = _baseline(factor, levels, key, source)
    return PlannedFactor(factor.label, key, factor.path, levels=tuple(levels), baseline=baseline)


def _value_levels(factor: Factor, key: str, source: Path) -> list[Level]:
    assert factor.levels is not None and factor.path is not None
    seen: list[Any] = []
    for j, value in enumerate(factor.levels):
        if any(_same(value, other) for other in seen):
            raise ExperimentFileError(source, f"{key}.levels[{j}]", f"repeats the level {shown(value)}")
        seen.append(value)
    return [Level(value, ((factor.path, value),)) for value in factor.levels]


def _bundle_levels(factor: Factor, key: str, source: Path) -> list[Level]:
    assert factor.levels is not None
    levels: list[Level] = []
    for j, raw in enumerate(factor.levels):
        where = f"{key}.levels[{j}]"
        if not isinstance(raw, dict):
            raise ExperimentFileError(
                source,
                where,
                f"expected a bundle {{name: ..., set: {{path: value}}}} (or give the factor a path), got {shown(raw)}",
            )
        try:
            bundle = Bundle.model_validate(raw)
        except ValidationError as exc:
            problem = schema_error(exc, raw, source, Bundle, ExperimentFileError)
            at = f"{where}.{problem.path}" if problem.path else where
            raise ExperimentFileError(source, at, problem.message) from None
        if any(level.label == bundle.name for level in levels):
            raise ExperimentFileError(source, f"{where}.name", f"the bundle name '{bundle.name}' is used twice here")
        levels.append(Level(bundle.name, tuple(bundle.set.items())))
    return levels


def _baseline(factor: Factor, levels: Sequence[Level], key: str, source: Path) -> int | None:
    if factor.baseline is None:
        return None
    for j, level in enumerate(levels):
        if _same(level.label, factor.baseline):
            return j
    listed = ", ".join(shown(level.label) for level in levels)
    message = f"{shown(factor.baseline)} is not one of the levels ({listed})"
    raise ExperimentFileError(source, f"{key}.baseline", message)


def _check_changes(
    world: dict[str, Any],
    changes: Sequence[tuple[str, Any]],
    source: Path,
    where: str,
    path_key: Callable[[str], str],
    prefix: str = "",
) -> None:
    """Every path must lead into the world, and the changed world must still be valid."""
    data = world
    for path, value in changes:
        try:
            data = set_path(data, path, value)
        except PathProblem as exc:
            raise ExperimentFileError(source, path_key(path), f"{prefix}{exc}") from None
    try:
        parse_world(data, "<level>")
    except WorldFileError as exc:
        raise ExperimentFileError(source, where, f"{prefix}in the world, {exc.path}: {exc.message}") from None


def _plan_posterior(
    spec: Experiment,
    source: Path,
    world: dict[str, Any],
    factors: Sequence[PlannedFactor],
    points: Sequence[DesignPoint],
) -> Posterior:
    """Read the named calibration's posterior and check it against the run table and every draw's worlds."""
    assert spec.calibration is not None
    described = [(f"design point {p.index} ({point_shown(p)})", dict(p.changes)) for p in points]
    try:
        posterior = read_posterior(source.parent / spec.calibration, spec.seed, spec.replications)
        posterior.check_columns({f.label: f.key for f in factors}, RESERVED_COLUMNS)
        posterior.check_world(world, described)
    except PosteriorProblem as exc:
        raise ExperimentFileError(source, "calibration", str(exc)) from None
    return posterior


def _check_labels(factors: Sequence[PlannedFactor], source: Path) -> None:
    for i, factor in enumerate(factors):
        if factor.label in RESERVED_COLUMNS:
            message = f"'{factor.label}' is a run-table column; choose another name"
            raise ExperimentFileError(source, f"{factor.key}.name", message)
        for other in factors[:i]:
            if other.label == factor.label:
                raise ExperimentFileError(source, f"{factor.key}.name", f"'{factor.label}' already names {other.key}")


def _check_overlaps(factors: Sequence[PlannedFactor], world: dict[str, Any], source: Path) -> None:
    """Two factors changing the same value would make one of them meaningless."""
    touched: list[tuple[PlannedFactor, tuple[Any, ...], str]] = []
    for factor in factors:
        paths = [factor.path] if factor.path else sorted({p for level in factor.levels for p, _ in level.changes})
        for path in paths:
            here = _location(world, path)
            for other, there, other_path in touched:
                if other is not factor and (here[: len(there)] == there or there[: len(here)] == here):
                    raise ExperimentFileError(
                        source,
                        factor.key,
                        f"changes {path}, which {other.key} also changes ({other_path}); one factor per value",
                    )
            touched.append((factor, here, path))


# -- design points --------------------------------------------------------------------------


def _design_points(spec: Experiment, factors: Sequence[PlannedFactor]) -> list[DesignPoint]:
    if spec.design == "full_factorial":
        combos = list(itertools.product(*(range(len(f.levels)) for f in factors)))
        return _level_points(factors, combos, _factorial_comparators(factors, combos))
    if spec.design == "one_at_a_time":
        centre = tuple(f.reference for f in factors)
        combos = [centre]
        for i, factor in enumerate(factors):
            for j in range(len(factor.levels)):
                if j != factor.reference:
                    combos.append(centre[:i] + (j,) + centre[i + 1 :])
        return _level_points(factors, combos, [None] + [0] * (len(combos) - 1))
    assert spec.samples is not None
    unit = _unit_sample(spec, len(factors))
    points = []
    for index, row in enumerate(unit):
        values = {f.label: f.value_at(float(u)) for f, u in zip(factors, row, strict=True)}
        changes = tuple((f.path, values[f.label]) for f in factors if f.path is not None)
        points.append(DesignPoint(index, values, changes, None))
    return points


def _unit_sample(spec: Experiment, d: int) -> np.ndarray:
    """Scrambled samples in [0, 1)^d from the design stream of the root seed."""
    assert spec.samples is not None
    rng = np.random.default_rng(np.random.SeedSequence(spec.seed, spawn_key=_DESIGN_SPAWN_KEY))
    if spec.design == "latin_hypercube":
        return qmc.LatinHypercube(d, rng=rng).random(spec.samples)
    return qmc.Sobol(d, rng=rng).random_base2(int(spec.samples).bit_length() - 1)


def _level_points(
    factors: Sequence[PlannedFactor], combos: Sequence[tuple[int, ...]], comparators: Sequence[int | None]
) -> list[DesignPoint]:
    points = []
    for index, (combo, compare_to) in enumerate(zip(combos, comparators, strict=True)):
        levels = [f.levels[j] for f, j in zip(factors, combo, strict=True)]
        values = {f.label: level.label for f, level in zip(factors, levels, strict=True)}
        changes = tuple(change for level in levels for change in level.changes)
        points.append(DesignPoint(index, values, changes, compare_to))
    return points


def _factorial_comparators(factors: Sequence[PlannedFactor], combos: Sequence[tuple[int, ...]]) -> list[int | None]:
    """Each point is compared with the point that differs only in holding the baseline factor at its baseline."""
    with_baseline = [i for i, f in enumerate(factors) if f.baseline is not None]
    if not with_baseline:
        return [None] * len(combos)
    b = with_baseline[0]
    index = {combo: k for k, combo in enumerate(combos)}
    base = factors[b].baseline
    return [None if combo[b] == base else index[combo[:b] + (base,) + combo[b + 1 :]] for combo in combos]


# -- helpers --------------------------------------------------------------------------------


class _Marker:
    """A value that survives deep copies as itself, to find where a path lands."""

    def __deepcopy__(self, memo: dict[int, Any]) -> "_Marker":
        return self


def _location(world: dict[str, Any], path: str) -> tuple[Any, ...]:
    """The concrete keys and indices a dotted path resolves to (names and indices alike)."""
    marker = _Marker()
    stack: list[tuple[Any, tuple[Any, ...]]] = [(set_path(world, path, marker), ())]
    while stack:
        node, loc = stack.pop()
        if node is marker:
            return loc
        items = node.items() if isinstance(node, dict) else enumerate(node) if isinstance(node, list) else ()
        stack.extend((child, loc + (k,)) for k, child in items)
    raise AssertionError("a path that resolved has a location")


def _same(a: Any, b: Any) -> bool:
    """Level equality where true is not 1."""
    if isinstance(a, bool) or isinstance(b, bool):
        return type(a) is type(b) and a == b
    return a == b


def point_shown(point: DesignPoint) -> str:
    """A design point's factor values as they read in a message."""
    return ", ".join(f"{k}={shown(v)}" for k, v in point.values.items())


def _keys_as_text(value: Any) -> Any:
    if isinstance(value, dict):
        return {str(k): _keys_as_text(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_keys_as_text(v) for v in value]
    return value


def _sha256(value: Any) -> str:
    """Hash of a value's canonical JSON."""
    text = json.dumps(_keys_as_text(value), sort_keys=True, default=str, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def describe_experiment(path: str | Path, allow_large: bool = False) -> str:
    """Validate an experiment file and say what it would run, in one line."""
    plan = load_plan(path, allow_large=allow_large)
    spec = plan.spec
    unknowns = f"; {plan.posterior.describe()}" if plan.posterior is not None else ""
    return (
        f"{path}: ok (experiment {spec.name}; {spec.design}, {len(plan.points)} design points x "
        f"{spec.replications} replications = {plan.total_runs} runs of {spec.warmup_days}+{spec.days} days; "
        f"world {plan.world_path}{unknowns})"
    )
