"""Calibration files: what to fit, to which records, with which priors and which method.

A calibration file::

    kind: calibration                     # optional marker
    name: Kestrel Quay inflow (illustrative)
    world: world.yaml                     # relative to this file
    observed:
      path: ../../outputs/kestrel-target  # a run directory, or a folder of observed tables (CSV/Parquet)
      first_day: 7                        # the records' day where the calibration window starts (default 0)
    days: 28                              # length of the window; candidate runs summarise days warmup .. warmup+days-1
    warmup_days: 7                        # days each candidate run simulates first
    seed: 20240612
    summaries: [detections_by_station, detections_week, interdictions_week, repeat_frequencies]
    priors:                               # one per unknown, at a dotted world path
      - {path: adversary.arrivals_per_day, dist: gamma, shape: 4, rate: 0.3, bounds: [1, 60]}
      - {path: adversary.adaptive.rationality, dist: uniform, low: 0.5, high: 5}
      - {path: methods.gas_probe.detection, name: probe_sensitivity, multiply: true,
         dist: normal, mean: 1.0, sd: 0.1, bounds: [0.7, 1.15]}
    method: {name: smc, particles: 100, generations: 4, initial_draws: 300, quantile: 0.5}
    # or    {name: rejection, draws: 1000, accept: 0.1, regression: true}
    predictive_runs: 20                   # fresh runs at posterior draws, for the predictive check
    level: 0.9                            # credible level of every interval

:func:`load_calibration` validates the file, the world, every prior's path and
the world at each end of every prior's range (at the 0.1% and 99.9% quantiles
where a prior is unbounded), and the observed records (they must cover the
window and name the world's stations), before anything runs. Every problem is
one :class:`CalibrationFileError` line ``FILE: KEY.PATH: message``.
"""

from __future__ import annotations

import dataclasses
import difflib
import hashlib
import json
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any, Literal

import numpy as np
from pydantic import Field

from ..errors import InputError
from ..observed import RecordNames
from ..world import WorldFileError, file_hash, parse_world, read_yaml_mapping
from ..world.paths import PathProblem, apply_unknowns, get_path, holds_numbers, set_path
from ..experiment.budget import Keys, PlanSize, busiest_day, refuse
from ..experiment.project_file import read_project_file
from ..world.fields import NumberOnly, Strict, unit
from .priors import DISTRIBUTIONS, Prior, PriorError, PriorSet
from .abc.rejection import kept_count
from .self_check import MIN_TRIALS
from .summaries import DEFAULT_GROUPS, SUMMARY_GROUPS, SummarySpec, observed_span
from .target import load_target


# What each candidate run reports from its own truth, besides its observed summaries (persons, in the
# window): these are the calibration's latent quantities. Candidate runs are the calibration's own.
LATENT = ("attempts", "persons", "crossings", "crossings_after_last_check")
LATENT_MEANING = {
    "attempts": "person-attempts",
    "persons": "distinct persons who tried",
    "crossings": "persons who eventually crossed (some after earlier detections)",
    "crossings_after_last_check": "crossings by persons who boarded after every station (no record can show them)",
}
# Column names of the particle tables besides the parameters; a prior may not take one.
RESERVED_NAMES = frozenset({*LATENT, "weight", "distance", "simulation"})


class CalibrationFileError(WorldFileError):
    """A calibration file that cannot be used, with the key path at fault. ``str()`` is one line."""


Number = Annotated[float, NumberOnly]
Value = Annotated[float, NumberOnly, unit("the unknown's unit")]  # a value at the prior's path, or its multiplier
WholeNumber = Annotated[int, Field(ge=0), NumberOnly]
AtLeastOne = Annotated[int, Field(ge=1), NumberOnly]
AtLeastTwo = Annotated[int, Field(ge=2), NumberOnly]
OpenShare = Annotated[float, Field(gt=0.0, lt=1.0), NumberOnly]
Share = Annotated[float, Field(gt=0.0, le=1.0), NumberOnly]


class PriorSpec(Strict):
    """One unknown: a dotted world path and its prior."""

    path: str = Field(min_length=1, description="dotted path into the world, e.g. adversary.arrivals_per_day")
    name: str | None = Field(None, min_length=1, max_length=80, description="column name; defaults to the path")
    dist: Literal["uniform", "loguniform", "normal", "gamma"] = Field(
        description="prior family: uniform and loguniform take low and high; normal mean and sd; gamma shape and rate"
    )
    low: Value | None = Field(None, description="uniform, loguniform: lower end")
    high: Value | None = Field(None, description="uniform, loguniform: upper end")
    mean: Value | None = Field(None, description="normal: mean")
    sd: Value | None = Field(None, description="normal: standard deviation")
    shape: Annotated[float, NumberOnly, unit("dimensionless")] | None = Field(None, description="gamma: shape")
    rate: Annotated[float, NumberOnly, unit("1 / the unknown's unit")] | None = Field(
        None, description="gamma: rate (1 / scale)"
    )
    bounds: tuple[Value, Value] | None = Field(None, description="[low, high] to truncate the prior to")
    multiply: bool = Field(False, description="multiply every number at the path by the value instead of replacing it")

    @property
    def label(self) -> str:
        return self.name or self.path


class ObservedSpec(Strict):
    """The records to calibrate to."""

    path: str = Field(min_length=1, description="run directory or folder of observed tables, relative to this file")
    first_day: Annotated[WholeNumber, unit("days")] = Field(
        0, description="day of the records where the calibration window starts"
    )


class MethodSpec(Strict):
    """The ABC method and its settings (each method's own keys only; a key left out takes the default named)."""

    name: Literal["smc", "rejection"] = Field(
        "smc", description="ABC-SMC (population Monte Carlo), or rejection with a regression adjustment"
    )
    particles: Annotated[AtLeastTwo, unit("particles")] | None = Field(
        None, description="smc: particles of every generation (default 200)"
    )
    generations: Annotated[AtLeastOne, unit("generations")] | None = Field(
        None, description="smc: most generations, the first included (default 4)"
    )
    initial_draws: Annotated[AtLeastTwo, unit("runs")] | None = Field(
        None, description="smc: prior draws of the first generation, at least particles (default 4 x particles)"
    )
    quantile: Annotated[OpenShare, unit("share")] | None = Field(
        None, description="smc: each tolerance is this quantile of the last generation's distances (default 0.5)"
    )
    max_simulations: Annotated[AtLeastOne, unit("runs")] | None = Field(
        None, description="smc: most runs of each later generation (default 20 x particles)"
    )
    draws: Annotated[AtLeastTwo, unit("runs")] | None = Field(None, description="rejection: prior draws (default 1000)")
    accept: Annotated[Share, unit("share")] | None = Field(
        None, description="rejection: share of draws kept, the nearest (default 0.1)"
    )
    regression: bool | None = Field(
        None, description="rejection: local-linear regression adjustment of the kept draws (default true)"
    )


METHOD_KEYS = {
    "smc": ("particles", "generations", "initial_draws", "quantile", "max_simulations"),
    "rejection": ("draws", "accept", "regression"),
}
METHOD_DEFAULTS: dict[str, Any] = {
    "particles": 200,
    "generations": 4,
    "quantile": 0.5,
    "draws": 1000,
    "accept": 0.1,
    "regression": True,
}


class Calibration(Strict):
    """A whole calibration file."""

    kind: Literal["calibration"] = Field("calibration", description="marks the file as a calibration")
    name: str = Field(min_length=1, max_length=200, description="the calibration's name, shown in its outputs")
    note: str = Field("", description="free text: what is fitted and why")
    world: str = Field(min_length=1, description="world file, relative to this file")
    observed: ObservedSpec = Field(description="the records to fit to")
    days: Annotated[AtLeastOne, unit("days")] = Field(description="days in the calibration window")
    warmup_days: Annotated[WholeNumber, unit("days")] = Field(
        0, description="days each candidate run simulates before the window"
    )
    seed: Annotated[WholeNumber, unit("seed")] = Field(description="root seed of the draws and the candidate runs")
    priors: list[PriorSpec] = Field(min_length=1, description="one prior per unknown")
    summaries: list[str] = Field(
        default_factory=lambda: list(DEFAULT_GROUPS), min_length=1,
        description="groups of summary statistics compared between candidate runs and the records",
        json_schema_extra={"items": {"enum": list(SUMMARY_GROUPS), "type": "string"}},
    )
    method: MethodSpec = Field(default_factory=MethodSpec, description="the ABC method and its settings")
    predictive_runs: Annotated[WholeNumber, unit("runs")] = Field(
        20, description="fresh runs at posterior draws for the predictive check"
    )
    self_check: Annotated[WholeNumber, unit("data sets")] = Field(
        100, description="pseudo-observed data sets of the coverage self-check (at least 50; 0 skips it, with a warning)"
    )
    level: Annotated[OpenShare, unit("probability")] = Field(0.9, description="credible level of every interval")


@dataclass(frozen=True, eq=False)
class CalibrationPlan:
    """A validated calibration: priors, summaries, the observed summaries and the world, ready to run."""

    source: Path
    spec: Calibration
    world_path: Path
    world_data: dict[str, Any]
    world_sha256: str
    observed_path: Path
    priors: PriorSet
    summary_spec: SummarySpec
    observed: np.ndarray  # the observed summaries, in summary_spec.names() order
    size: PlanSize | None = None  # what its candidate runs will need (abm.experiment.budget)

    @property
    def method(self) -> str:
        return self.spec.method.name

    def setting(self, key: str) -> Any:
        """A method setting as given, else its default."""
        value = getattr(self.spec.method, key)
        if value is not None:
            return value
        if key == "initial_draws":
            return 4 * self.setting("particles")
        if key == "max_simulations":
            return 20 * self.setting("particles")
        return METHOD_DEFAULTS[key]

    def world_for(self, theta: np.ndarray) -> dict[str, Any]:
        """The world mapping with one parameter vector written to the priors' paths."""
        return world_with(self.world_data, self.priors, theta)

    def digest(self) -> str:
        """SHA-256 of what determines the calibration's results: the file, the world and the observed summaries."""
        payload = {
            "calibration": self.spec.model_dump(mode="json"),
            "world": self.world_data,
            "observed": [float(v) for v in self.observed],
        }
        return _sha256(payload)

    def simulation_digest(self) -> str:
        """SHA-256 of what decides each candidate run given its label: world, priors, seed and days.

        Settings outside it (method, summaries, observed records, level,
        predictive runs, self-check) change which runs are used, not what a
        run with a given label and parameters holds.
        """
        spec = self.spec
        payload = {
            "world": self.world_data,
            "priors": [prior.model_dump(mode="json") for prior in spec.priors],
            "seed": spec.seed,
            "days": spec.days,
            "warmup_days": spec.warmup_days,
        }
        return _sha256(payload)


def _sha256(payload: dict[str, Any]) -> str:
    text = json.dumps(payload, sort_keys=True, default=str, separators=(",", ":"))
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def world_with(world: dict[str, Any], priors: PriorSet, theta: np.ndarray) -> dict[str, Any]:
    """``world`` with each prior's value set at (or, for a multiplier, multiplied into) its path."""
    unknowns = []
    for prior, value in zip(priors.priors, np.asarray(theta, dtype=float), strict=True):
        assert prior.path is not None
        unknowns.append((prior.path, float(value), prior.multiply))
    return apply_unknowns(world, unknowns)


# -- loading -----------------------------------------------------------------------------------


def load_calibration(path: str | Path, allow_large: bool = False, out: Path | None = None) -> CalibrationPlan:
    """Read and validate a calibration file; raise :class:`CalibrationFileError` naming the key at fault.

    A calibration too large for this machine (or, without ``allow_large``, above the ceilings of
    :mod:`abm.experiment.budget`) is refused; ``out`` is where its runs would go.
    """
    source, data, spec = read_project_file(path, Calibration, CalibrationFileError)
    _check_method(spec, source)
    for i, group in enumerate(spec.summaries):
        if group not in SUMMARY_GROUPS:
            close = difflib.get_close_matches(group, SUMMARY_GROUPS, n=1, cutoff=0.5)
            hint = f"did you mean '{close[0]}'?" if close else f"expected one of {', '.join(SUMMARY_GROUPS)}"
            raise CalibrationFileError(source, f"summaries[{i}]", f"unknown summary group '{group}'; {hint}")
    world_path = source.parent / spec.world
    if not world_path.is_file():
        raise CalibrationFileError(source, "world", f"no world file at {world_path}")
    world_data = read_yaml_mapping(world_path)
    world = parse_world(world_data, world_path)
    priors = PriorSet.of([_prior(spec, i, source) for i in range(len(spec.priors))])
    _check_labels(spec, source)
    for i in range(len(spec.priors)):
        _check_prior_in_world(spec, i, priors, world_data, source)
    summary_spec = SummarySpec(tuple(spec.summaries), spec.days, tuple(world.station_names), tuple(world.point_names))
    observed_path = source.parent / spec.observed.path
    observed = _observed_summaries(spec, observed_path, summary_spec, source, RecordNames.of_world(world))
    plan = CalibrationPlan(
        source=source,
        spec=spec,
        world_path=world_path,
        world_data=world_data,
        world_sha256=file_hash(world_path),
        observed_path=observed_path,
        priors=priors,
        summary_spec=summary_spec,
        observed=observed,
    )
    _check_settings(plan)
    return dataclasses.replace(plan, size=_check_size(plan, allow_large, out))


def _check_size(plan: CalibrationPlan, allow_large: bool, out: Path | None) -> PlanSize:
    """Refuse, naming the key, a calibration whose candidate runs will not fit (see :mod:`abm.experiment.budget`);
    return what it will need."""
    if plan.method == "smc":
        limit = plan.setting("max_simulations")
        runs = limit if limit is not None else plan.setting("initial_draws") + math.ceil(
            plan.setting("generations") * plan.setting("particles") / plan.setting("quantile"))
        key = "method.max_simulations" if limit is not None else "method.particles"
    else:
        runs, key = plan.setting("draws"), "method.draws"
    spec = plan.spec
    size = PlanSize(runs + spec.predictive_runs, spec.days + spec.warmup_days, busiest_day(plan.world_data))
    keys = Keys("traffic.vehicles_per_day", "days", key, " (in the world file)")
    refuse(size, keys, out, allow_large, lambda where, message: CalibrationFileError(plan.source, where, message))
    return size


def _check_method(spec: Calibration, source: Path) -> None:
    method = spec.method
    for other, keys in METHOD_KEYS.items():
        if other == method.name:
            continue
        for key in keys:
            if getattr(method, key) is not None:
                raise CalibrationFileError(source, f"method.{key}", f"is a setting of method {other}, not {method.name}")
    if method.name == "smc":
        particles = method.particles or METHOD_DEFAULTS["particles"]
        if method.initial_draws is not None and method.initial_draws < particles:
            raise CalibrationFileError(
                source, "method.initial_draws", f"must be at least particles ({particles}), got {method.initial_draws}"
            )


def _check_settings(plan: CalibrationPlan) -> None:
    """Refuse, before any run, settings with which the method or its self-check cannot work."""
    source, k = plan.source, len(plan.summary_spec.names())
    trials = plan.spec.self_check
    if plan.method == "smc":
        particles, pool = plan.setting("particles"), plan.setting("initial_draws")
        if particles < 2 * k:
            raise CalibrationFileError(
                source, "method.particles", f"{particles} particles for {k} summaries; use at least {2 * k} (2 x summaries)"
            )
        keep, where = particles, "method.particles"
    else:
        pool, accept = plan.setting("draws"), plan.setting("accept")
        keep, where = kept_count(accept, pool), "method.accept"
        if plan.setting("regression") and kept_count(accept, pool - 1) <= k + 1:
            # The self-check keeps its share of one draw fewer, so both must leave more than k + 1.
            need = k + 2
            raise CalibrationFileError(
                source,
                where,
                f"keeps {kept_count(accept, pool)} of {pool} draws, but the regression adjustment needs more than "
                f"summaries + 1 ({k + 1}); use accept >= {need / (pool - 1):.3g} or draws >= {math.ceil(need / accept) + 1}",
            )
    if 0 < trials < MIN_TRIALS:
        raise CalibrationFileError(
            source, "self_check", f"at least {MIN_TRIALS} pseudo-observed data sets give a coverage measure; got {trials} (0 skips it)"
        )
    if trials > pool - 1:
        key = "method.initial_draws" if plan.method == "smc" else "method.draws"
        raise CalibrationFileError(
            source, "self_check", f"{trials} trials need more prior draws than {pool}; lower it or raise {key} to {trials + 1}"
        )
    if plan.method == "smc" and trials and keep <= k + 1:
        raise CalibrationFileError(source, where, f"the self-check keeps {keep} draws; it needs more than summaries + 1 ({k + 1})")


def _prior(spec: Calibration, i: int, source: Path) -> Prior:
    item = spec.priors[i]
    key = f"priors[{i}]"
    needed = DISTRIBUTIONS[item.dist]
    for param in ("low", "high", "mean", "sd", "shape", "rate"):
        value = getattr(item, param)
        if param in needed and value is None:
            raise CalibrationFileError(source, f"{key}.{param}", f"required for a {item.dist} prior")
        if param not in needed and value is not None:
            raise CalibrationFileError(
                source, f"{key}.{param}", f"is not a parameter of a {item.dist} prior (it takes {', '.join(needed)})"
            )
    try:
        return Prior.make(
            item.label,
            item.dist,
            bounds=item.bounds,
            path=item.path,
            multiply=item.multiply,
            **{p: float(getattr(item, p)) for p in needed},
        )
    except PriorError as exc:
        message = str(exc).removeprefix(f"{item.label}: ")
        where = f"{key}.bounds" if "bounds" in message else key
        raise CalibrationFileError(source, where, message) from None


def _check_labels(spec: Calibration, source: Path) -> None:
    for i, item in enumerate(spec.priors):
        if item.label in RESERVED_NAMES or item.label.startswith(("summary:", "unadjusted:")):
            raise CalibrationFileError(source, f"priors[{i}].name", f"'{item.label}' names a column of the results; choose another")
        for j, other in enumerate(spec.priors[:i]):
            if other.path == item.path:
                raise CalibrationFileError(source, f"priors[{i}].path", f"priors[{j}] already calibrates {item.path}")
            if other.label == item.label:
                raise CalibrationFileError(source, f"priors[{i}].name", f"'{item.label}' already names priors[{j}]")


def _check_prior_in_world(spec: Calibration, i: int, priors: PriorSet, world: dict[str, Any], source: Path) -> None:
    """The path must lead into the world, and the world must stay valid at both ends of the prior's range."""
    prior = priors.priors[i]
    assert prior.path is not None
    key = f"priors[{i}]"
    try:
        current = get_path(world, prior.path) if prior.multiply else None
        set_path(world, prior.path, 1.0)
    except PathProblem as exc:
        raise CalibrationFileError(source, f"{key}.path", str(exc)) from None
    if prior.multiply and not holds_numbers(current):
        raise CalibrationFileError(source, f"{key}.path", f"a multiplier needs numbers at {prior.path}; found none")
    low, high = prior.support()
    ends = (
        ("low", low if math.isfinite(low) else float(prior.ppf(np.array([0.001]))[0])),
        ("high", high if math.isfinite(high) else float(prior.ppf(np.array([0.999]))[0])),
    )
    # The other unknowns stay at their world values: each prior is checked alone, as an experiment checks factors.
    for end, value in ends:
        single = PriorSet.of([prior])
        try:
            parse_world(world_with(world, single, np.array([value])), "<calibration>")
        except WorldFileError as exc:
            if exc.message.startswith("unknown key"):  # the path made up a key: the path is what is wrong
                raise CalibrationFileError(source, f"{key}.path", f"{exc.path}: {exc.message}") from None
            where = f"{key}.bounds" if prior.bounds != (-math.inf, math.inf) else key
            raise CalibrationFileError(
                source, where, f"at the {end} end of the prior ({value:g}), in the world, {exc.path}: {exc.message}"
            ) from None


def _observed_summaries(
    spec: Calibration, path: Path, summary_spec: SummarySpec, source: Path, names: RecordNames
) -> np.ndarray:
    try:
        tables = load_target(path, names)  # every station, class, point and method must be the world's
    except InputError as exc:
        raise CalibrationFileError(source, "observed.path", str(exc)) from None
    stations = tables["stations"]
    named = sorted(stations["station"].astype(str))
    if named != sorted(summary_spec.stations):
        raise CalibrationFileError(
            source,
            "observed.path",
            f"the records' stations ({', '.join(named) or 'none'}) are not the world's "
            f"({', '.join(sorted(summary_spec.stations))})",
        )
    span = observed_span(tables)
    first, last = spec.observed.first_day, spec.observed.first_day + spec.days - 1
    if span is None:
        raise CalibrationFileError(source, "observed.path", "the records hold no checks and no encounters")
    if span[1] < last:
        raise CalibrationFileError(
            source, "days", f"the window (days {first}-{last} of the records) runs past their last day, {span[1]}"
        )
    return summary_spec.compute(tables, first)


# -- one-line schema errors ------------------------------------------------------------------


def describe_calibration(path: str | Path, allow_large: bool = False) -> str:
    """Validate a calibration file and say what it would run, in one line."""
    plan = load_calibration(path, allow_large)
    spec = plan.spec
    if plan.method == "smc":
        how = (
            f"ABC-SMC, {plan.setting('particles')} particles x up to {plan.setting('generations')} generations "
            f"({plan.setting('initial_draws')} prior draws first)"
        )
    else:
        how = f"rejection, {plan.setting('draws')} prior draws keeping {plan.setting('accept'):.0%}"
    names = ", ".join(plan.priors.names)
    check = f"self-check over {spec.self_check} pseudo-observed data sets" if spec.self_check else "no self-check"
    return (
        f"{path}: ok (calibration {spec.name}; {len(plan.priors.names)} unknowns: {names}; "
        f"{len(plan.observed)} summaries; {how}; {check}; runs of {spec.warmup_days}+{spec.days} days; "
        f"world {plan.world_path})"
    )

