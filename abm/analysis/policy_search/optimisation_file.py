"""An optimisation file (``kind: optimisation``): its schema, its validation, and the plan it gives."""

from __future__ import annotations

import difflib
import hashlib
import json
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import Field, field_validator

from ...experiment.budget import Keys, PlanSize, busiest_day, refuse
from ...experiment.project_file import read_project_file
from ...world import WorldFileError, file_hash, parse_world, read_yaml_mapping
from ...world.paths import PathProblem, set_path
from ...world.fields import NumberOnly, Strict, unit
from .problem import FIGURE_SOURCES, FIGURES, Allocation, Constraint, Problem, SearchSettings, Variable

CURRENT = "current"  # the name given to the world as it stands when the file names no such policy


class OptimisationFileError(WorldFileError):
    """An optimisation file that cannot be used, with the key path at fault. ``str()`` is one line."""


Number = Annotated[float, NumberOnly]
WholeNumber = Annotated[int, Field(ge=0), NumberOnly]
AtLeastOne = Annotated[int, Field(ge=1), NumberOnly]
AtLeastTwo = Annotated[int, Field(ge=2), NumberOnly]
OpenShare = Annotated[float, Field(gt=0.0, lt=1.0), NumberOnly]
Positive = Annotated[float, Field(gt=0.0), NumberOnly]


Figure = Annotated[str, Field(json_schema_extra={"enum": list(FIGURES)})]  # checked by _check_figure, with hints
PathValue = Annotated[float, NumberOnly, unit("the path's unit")]
FigureValue = Annotated[float, NumberOnly, unit("the figure's unit")]


class ObjectiveSpec(Strict):
    """The figure the search improves, averaged over a candidate's replications."""

    figure: Figure = Field(description="a run figure: a numeric figure of the run summary, check_hours or encounters")
    sense: Literal["minimise", "maximise"] = Field(description="whether less or more of the figure is better")


class VariableSpec(Strict):
    """A decision variable: a value at a dotted world path, searched within bounds."""

    path: str = Field(min_length=1, description="dotted path into the world, e.g. stations.gate_imaging.lanes")
    bounds: tuple[PathValue, PathValue] = Field(description="[low, high] the search stays within")
    integer: bool = Field(False, description="search whole numbers only")


class AllocationPath(Strict):
    """One path of an allocation and how much of the total a unit of its value takes."""

    path: str = Field(min_length=1, description="dotted path into the world")
    weight: Annotated[Positive, unit("total per unit of the path")] = Field(
        1.0, description="how much of the total one unit of this path's value spends"
    )
    max: Annotated[float, Field(ge=0.0), NumberOnly, unit("the path's unit")] | None = Field(
        None, description="cap on this path's value; what the cap leaves is unspent; null: no cap"
    )


class AllocationSpec(Strict):
    """Paths that share out a fixed total: the sum of weight x value is the total (at most, when a cap binds)."""

    name: str = Field(min_length=1, max_length=80, description="the group's name in outputs")
    total: Annotated[Positive, unit("the total's unit")] = Field(description="what the paths share out")
    integer: bool = Field(False, description="whole-number values, the total spent exactly (unit weights only)")
    paths: list[AllocationPath] = Field(min_length=2, description="the paths that share the total")


class ConstraintSpec(Strict):
    """A limit on a run figure (its mean over a candidate's replications); give exactly one of max and min."""

    figure: Figure = Field(description="a run figure, as for the objective")
    max: FigureValue | None = Field(None, description="the figure's mean must be at most this")
    min: FigureValue | None = Field(None, description="the figure's mean must be at least this")


class PolicySpec(Strict):
    """A named alternative that joins the final comparison beside the search's best."""

    name: str = Field(min_length=1, max_length=80, description="the policy's name in outputs")
    note: str = Field("", description="free text: what the policy stands for")
    set: dict[str, Any] = Field(default_factory=dict, description="dotted path -> value; empty = the world as it is")


class SearchSpec(Strict):
    """Differential evolution settings, with scipy's names and meanings."""

    popsize: Annotated[AtLeastOne, unit("candidates per dimension")] = Field(
        8, description="candidates per generation for each search dimension: a generation holds popsize x "
        "dimensions candidates (scipy's meaning)"
    )
    maxiter: Annotated[AtLeastOne, unit("generations")] = Field(10, description="the most generations the search runs")
    tol: Annotated[float, Field(ge=0.0), NumberOnly, unit("ratio")] = Field(
        0.01, description="stop when the sd of the population's objective values falls below this share of their mean"
    )
    mutation: tuple[Number, Number] = Field((0.5, 1.0), description="differential weight, drawn each generation "
                                           "between the two values; both in [0, 2] (scipy's range)",
                                           json_schema_extra={"unit": "multiplier"})

    @field_validator("mutation")
    @classmethod
    def _mutation_in_range(cls, value: tuple[float, float]) -> tuple[float, float]:
        if not 0 <= value[0] <= value[1] <= 2:
            raise ValueError(f"expected 0 <= low <= high <= 2, got {list(value)}")
        return value
    recombination: Annotated[float, Field(ge=0.0, le=1.0), NumberOnly, unit("chance")] = Field(
        0.7, description="crossover chance of each coordinate of a trial candidate"
    )
    init: Literal["latinhypercube", "sobol", "halton", "random"] = Field(
        "latinhypercube", description="how the first generation is spread over the search space"
    )


class SelectionSpec(Strict):
    """The final stage: the best candidates and the named policies run again on fresh seeds and compared."""

    top: Annotated[AtLeastOne, unit("candidates")] = Field(3, description="best feasible candidates of the search kept")
    replications: Annotated[AtLeastTwo, unit("runs")] = Field(
        8, description="fresh runs of each finalist, with seeds common to all of them"
    )
    alpha: Annotated[OpenShare, unit("probability")] = Field(
        0.05, description="significance level of the paired comparisons with the best (Bonferroni-adjusted)"
    )
    level: Annotated[OpenShare, unit("probability")] = Field(0.95, description="confidence level of every interval")


class Optimisation(Strict):
    """A whole optimisation file."""

    kind: Literal["optimisation"] = Field("optimisation", description="marks the file as an optimisation")
    name: str = Field(min_length=1, max_length=200, description="the search's name, shown in its outputs")
    note: str = Field("", description="free text: what the search asks")
    world: str = Field(min_length=1, description="world file, relative to this file")
    days: Annotated[AtLeastOne, unit("days")] = Field(description="days each run summarises, after the warm-up")
    warmup_days: Annotated[WholeNumber, unit("days")] = Field(
        0, description="days simulated first and left out of the figures"
    )
    replications: Annotated[AtLeastOne, unit("runs")] = Field(
        3, description="runs of each candidate in the search, with seeds common to every candidate"
    )
    seed: Annotated[WholeNumber, unit("seed")] = Field(description="root seed of the search and its runs")
    objective: ObjectiveSpec = Field(description="the figure to improve")
    variables: list[VariableSpec] = Field(default_factory=list, description="values the search may change")
    allocations: list[AllocationSpec] = Field(default_factory=list, description="groups of paths sharing a total")
    constraints: list[ConstraintSpec] = Field(default_factory=list, description="limits on other figures")
    policies: list[PolicySpec] = Field(
        default_factory=list, description="named alternatives for the final comparison; the world as it stands "
        "joins as 'current' unless one of them changes nothing"
    )
    search: SearchSpec = Field(default_factory=SearchSpec, description="differential evolution settings")
    selection: SelectionSpec = Field(default_factory=SelectionSpec, description="the final comparison's settings")


@dataclass(frozen=True, eq=False)
class OptimisationPlan:
    """A validated optimisation file, ready to search."""

    source: Path
    spec: Optimisation
    world_path: Path
    world_data: dict[str, Any]
    world_sha256: str
    problem: Problem
    settings: SearchSettings
    policies: dict[str, dict[str, Any]] = field(default_factory=dict)
    size: PlanSize | None = None  # what its runs will need (abm.experiment.budget)

    def digest(self) -> str:
        text = json.dumps(
            {"optimisation": self.spec.model_dump(mode="json"), "world": self.world_data},
            sort_keys=True,
            default=str,
            separators=(",", ":"),
        )
        return hashlib.sha256(text.encode("utf-8")).hexdigest()


def load_optimisation(path: str | Path, allow_large: bool = False, out: Path | None = None) -> OptimisationPlan:
    """Read and validate an optimisation file; raise :class:`OptimisationFileError` naming the key at fault."""
    source, data, spec = read_project_file(path, Optimisation, OptimisationFileError)

    def fail(key: str, message: str) -> OptimisationFileError:
        return OptimisationFileError(source, key, message)

    world_path = source.parent / spec.world
    if not world_path.is_file():
        raise fail("world", f"no world file at {world_path}")
    world_data = read_yaml_mapping(world_path)
    world = parse_world(world_data, world_path)
    _check_figure(spec.objective.figure, "objective.figure", fail)
    constraints = []
    for i, c in enumerate(spec.constraints):
        _check_figure(c.figure, f"constraints[{i}].figure", fail)
        if (c.max is None) == (c.min is None):
            raise fail(f"constraints[{i}]", "give exactly one of max or min")
        if c.figure == "missed_departure_share" and world.departures is None:
            raise fail(f"constraints[{i}].figure", "the world has no departures, so no departure can be missed")
        constraints.append(Constraint(c.figure, c.max, c.min))
    variables = [_variable(spec, i, world_data, fail) for i in range(len(spec.variables))]
    allocations = [_allocation(spec, i, world_data, fail) for i in range(len(spec.allocations))]
    if not variables and not allocations:
        raise fail("variables", "a search needs at least one variable or allocation")
    seen: dict[str, str] = {}
    for key, paths in [(f"variables[{i}]", [v.path]) for i, v in enumerate(variables)] + [
        (f"allocations[{i}]", list(a.paths)) for i, a in enumerate(allocations)
    ]:
        for p in paths:
            if p in seen:
                raise fail(key, f"changes {p}, which {seen[p]} also changes; one decision per value")
            seen[p] = key
    policies: dict[str, dict[str, Any]] = {}
    for i, policy in enumerate(spec.policies):
        if policy.name in policies:
            raise fail(f"policies[{i}].name", f"the policy name '{policy.name}' is used twice")
        _check_world(world_data, policy.set, fail, f"policies[{i}].set")
        policies[policy.name] = dict(policy.set)
    if not any(not changes for changes in policies.values()):  # the world as it stands is always a finalist
        policies[CURRENT if CURRENT not in policies else f"{CURRENT}_setting"] = {}
    problem = Problem(tuple(variables), tuple(allocations), spec.objective.figure, spec.objective.sense, tuple(constraints))
    s, sel = spec.search, spec.selection
    settings = SearchSettings(
        replications=spec.replications,
        popsize=s.popsize,
        maxiter=s.maxiter,
        tol=s.tol,
        mutation=(float(s.mutation[0]), float(s.mutation[1])),
        recombination=s.recombination,
        init=s.init,
        top=sel.top,
        selection_replications=sel.replications,
        alpha=sel.alpha,
        level=sel.level,
    )
    size = PlanSize(
        s.popsize * max(len(problem.bounds()), 1) * (s.maxiter + 1) * spec.replications
        + (sel.top + len(policies)) * sel.replications,
        spec.days + spec.warmup_days, busiest_day(world_data),
    )
    refuse(size, Keys("traffic.vehicles_per_day", "days", "search.popsize", " (in the world file)"), out, allow_large,
           fail)

    return OptimisationPlan(source, spec, world_path, world_data, file_hash(world_path), problem, settings, policies,
                            size)


def _check_figure(figure: str, key: str, fail: Callable[[str, str], OptimisationFileError]) -> None:
    if figure not in FIGURE_SOURCES or figure == "days":
        close = difflib.get_close_matches(figure, FIGURES, n=1, cutoff=0.5)
        hint = f"; did you mean '{close[0]}'?" if close else f"; expected one of {', '.join(f for f in FIGURES if f != 'days')}"
        raise fail(key, f"unknown figure '{figure}'{hint}")


def _check_world(
    world: dict[str, Any], changes: Mapping[str, Any], fail: Callable[[str, str], OptimisationFileError], key: str, prefix: str = ""
) -> None:
    data = world
    for path, value in changes.items():
        try:
            data = set_path(data, path, value)
        except PathProblem as exc:
            raise fail(f"{key}.{path}" if key.endswith(".set") else key, f"{prefix}{exc}") from None
    try:
        parse_world(data, "<candidate>")
    except WorldFileError as exc:
        raise fail(key, f"{prefix}in the world, {exc.path}: {exc.message}") from None


def _variable(spec: Optimisation, i: int, world: dict[str, Any], fail: Callable[[str, str], OptimisationFileError]) -> Variable:
    v = spec.variables[i]
    low, high = v.bounds
    if not low < high:
        raise fail(f"variables[{i}].bounds", f"expected low < high, got [{low:g}, {high:g}]")
    if v.integer and (low != int(low) or high != int(high)):
        raise fail(f"variables[{i}].bounds", f"an integer variable needs whole-number bounds, got [{low:g}, {high:g}]")
    for end, value in (("low", low), ("high", high)):
        shown = int(value) if v.integer else float(value)
        _check_world(world, {v.path: shown}, fail, f"variables[{i}].path", f"at the {end} bound, ")
    return Variable(v.path, float(low), float(high), v.integer)


def _allocation(
    spec: Optimisation, i: int, world: dict[str, Any], fail: Callable[[str, str], OptimisationFileError]
) -> Allocation:
    a = spec.allocations[i]
    key = f"allocations[{i}]"
    if a.integer and (any(p.weight != 1 for p in a.paths) or a.total != int(a.total)):
        raise fail(key, "an integer allocation needs unit weights and a whole-number total")
    allocation = Allocation(
        a.name,
        float(a.total),
        tuple(p.path for p in a.paths),
        tuple(float(p.weight) for p in a.paths),
        tuple(None if p.max is None else float(p.max) for p in a.paths),
        a.integer,
    )
    # The extremes: everything to the first path, everything to the last.
    for shares, what in (([1.0] * allocation.dim, "the first path"), ([0.0] * allocation.dim, "the last path")):
        _check_world(world, allocation.decode(shares), fail, key, f"with the total on {what}, ")
    return allocation


def describe_optimisation(path: str | Path, allow_large: bool = False) -> str:
    """Validate an optimisation file and say what it would run, in one line."""
    plan = load_optimisation(path, allow_large)
    spec, p = plan.spec, plan.problem
    dims = len(p.bounds())
    return (
        f"{path}: ok (optimisation {spec.name}; {p.sense} {p.objective} over {dims} search dimension(s), "
        f"popsize {plan.settings.popsize} x {dims} = {plan.settings.popsize * dims} candidates per generation for at "
        f"most {plan.settings.maxiter} generations, "
        f"{len(p.constraints)} constraint(s), {len(plan.policies)} named policies; {spec.replications} CRN "
        f"replications per candidate, selection {plan.settings.top} + named x {plan.settings.selection_replications} "
        f"fresh seeds; runs of {spec.warmup_days}+{spec.days} days; world {plan.world_path})"
    )
