"""Policy search: which policy does best within the delay and staff the port can bear, by simulation.

An optimisation file names decision variables (dotted world paths with
bounds), groups of variables that share out a fixed total (staff lanes, a
budget of check minutes per vehicle), an objective figure of the runs, and
constraints on other figures::

    kind: optimisation
    name: Kestrel Quay check shares (illustrative)
    world: world.yaml
    days: 21
    warmup_days: 5
    replications: 3                   # common-random-number replications per candidate in the search
    seed: 20240613
    objective: {figure: detections, sense: maximise}   # or {figure: crossings, sense: minimise}
    variables:
      - {path: stations.gate_imaging.selection.fraction, bounds: [0.05, 0.6]}
      - {path: stations.checkin_probe.selection.queue_threshold, bounds: [4, 30], integer: true}
    allocations:                      # share out a fixed total: sum of weight x value = total
      - name: mobile_lanes
        total: 2
        integer: true
        paths: [{path: roster.teams.mobile_team.lanes.yard_dogs}, {path: roster.teams.mobile_team.lanes.checkin_probe}]
    constraints:
      - {figure: time_in_port_p95_min, max: 60}
      - {figure: staff_hours, max: 15000}
    policies:                         # named alternatives that join the final comparison
      - {name: current, set: {}}
    search: {popsize: 6, maxiter: 8}
    selection: {top: 3, replications: 8, alpha: 0.05}

Figures are the numeric figures of a run's summary (``crossings`` and
``attempts`` from truth; ``detections``, ``staff_hours`` (lane-hours
rostered), ``time_in_port_p95_min``, ``missed_departure_share`` ... observed)
plus ``check_hours`` (hours spent checking, from ``methods.parquet``;
observed) and ``encounters`` (detections + interdictions), each averaged over
the replications of a candidate.

Allocations
    A group of m paths with weights w_i and a total T is searched through m - 1
    shares in [0, 1] (stick-breaking): path 1 gets share u_1 of T, path 2 share
    u_2 of what is left, ..., the last path the rest; each value is
    (its part of T) / w_i, capped at the path's ``max``. A cap leaves its
    surplus unspent, so the total is what the group may spend at most. With
    ``integer: true`` (unit weights and a whole total) values are whole
    numbers and the total is spent exactly.

Method
    1. Search: :func:`scipy.optimize.differential_evolution` over the
       variables, each candidate's objective and constraint figures estimated
       by the mean of ``replications`` runs that share their seeds with every
       other candidate (common random numbers), so the objective is a
       deterministic function of the policy and differences between candidates
       are not seed noise. Constraints go to scipy as a
       :class:`~scipy.optimize.NonlinearConstraint` (Lampinen's rule: a
       feasible candidate beats an infeasible one, infeasible ones compare by
       violation), the whole population is simulated as one batch
       (``vectorized``), and a candidate is never simulated twice.
    2. Selection: the ``top`` best feasible candidates of the search, with the
       named ``policies``, are run again with ``selection.replications`` fresh
       seeds, common to all of them. The incumbent is the best fresh mean among
       candidates whose fresh constraint means are within limits; every other
       candidate is compared with it by a two-sided paired t-test on the
       per-seed differences, Bonferroni-adjusted over the comparisons: "worse"
       or "better" when the difference is significant at level ``alpha``, else
       "not distinguishable", and a candidate that breaks a constraint on the
       fresh seeds says which (a screening step after Nelson, Swann, Goldsman &
       Song 2001, [mem]; not Rinott's two-stage procedure, which would fix the
       replications from a first-stage variance). A candidate the search found
       at a constraint's edge often lands just past it on fresh seeds: the
       search keeps the candidates its own seeds flattered. A tighter limit in
       the file buys a margin (common practice, no source).
    3. Frontier: among every candidate the search simulated, those no other
       candidate beats on both detections (more) and delay
       (``time_in_port_p95_min``, less).

Runs live in ``OUT/runs/<candidate>/<seed>/`` (a candidate's id is a hash of
its world changes), so an interrupted search resumes with ``--resume``
without repeating a run: the search is deterministic given the seed and
replays through the finished runs.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
import sys
import textwrap
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Annotated, Any, Literal, Protocol

import numpy as np
import pandas as pd
from pydantic import Field
from scipy import optimize, stats

from ..experiment.compare import MIN_REPLICATIONS, bounded_mean_interval, figure_scale, mean_interval
from ..experiment.design import read_project_file
from ..errors import InputError
from ..experiment.executors import Executor, choose_executor, make_executor
from ..experiment.single import SUMMARY_SOURCES, package_versions
from ..experiment.worker import SUMMARY_FILE, RunTask, is_complete
from ..records import METHODS_FILE, write_atomically, write_json, write_parquet
from ..world import WorldFileError, file_hash, parse_world, read_yaml_mapping
from ..world.paths import PathProblem, apply_changes, set_path
from ..world.schema import NumberOnly, Strict

# Figures a candidate is judged on: the numeric run-summary figures and two derived ones.
DERIVED = {"check_hours": "observed", "encounters": "observed"}
FIGURE_SOURCES = dict(SUMMARY_SOURCES) | DERIVED
FIGURES = tuple(FIGURE_SOURCES)
BENEFIT, DELAY = "detections", "time_in_port_p95_min"  # the frontier's axes
REPORTED = (BENEFIT, DELAY, "crossings", "check_hours")  # figures every finalist's row carries
# Spawn-key purposes: the search's common seeds, the selection's fresh seeds, differential evolution's own draws.
_SEARCH, _FRESH, _EVOLUTION = 0x5EA, 0xF5E, 0xDE
CURRENT = "current"  # the name given to the world as it stands when the file names no such policy
INVALID = 1e12  # objective and violation of a candidate whose world is invalid or whose runs failed
CAUTION = (
    "Model estimates, not counts: the search compares policies inside this model, with its invented numbers. "
    "A policy that displaces attempts can push people toward more dangerous boarding; defer to law, "
    "safeguarding duties and the agencies' own practice."
)


class PolicySearchError(InputError):
    """Settings or evaluations a policy search cannot work with."""


class OptimisationFileError(WorldFileError):
    """An optimisation file that cannot be used, with the key path at fault. ``str()`` is one line."""


# -- the problem -------------------------------------------------------------------------------


@dataclass(frozen=True)
class Variable:
    """A decision variable at a dotted world path, within bounds (whole numbers when ``integer``)."""

    path: str
    low: float
    high: float
    integer: bool = False


@dataclass(frozen=True)
class Allocation:
    """Paths that share a total: sum of weight x value = total (at most, when a cap binds)."""

    name: str
    total: float
    paths: tuple[str, ...]
    weights: tuple[float, ...]
    caps: tuple[float | None, ...]
    integer: bool = False

    @property
    def dim(self) -> int:
        return len(self.paths) - 1

    def decode(self, shares: Sequence[float]) -> dict[str, float | int]:
        """Values per path from m - 1 stick-breaking shares (see the module docstring)."""
        left = float(self.total)
        values: dict[str, float | int] = {}
        for i, path in enumerate(self.paths):
            part = left * float(shares[i]) if i < self.dim else left
            value = part / self.weights[i]
            if self.caps[i] is not None:
                value = min(value, float(self.caps[i]))
            if self.integer:
                value = int(round(value))
            values[path] = value
            left = max(0.0, left - value * self.weights[i])
        return values


@dataclass(frozen=True)
class Constraint:
    """A figure's replication mean must stay at most ``max`` (or at least ``min``)."""

    figure: str
    max: float | None = None
    min: float | None = None

    def violation(self, value: float) -> float:
        """How far past the limit (<= 0 when met); a missing value is a violation."""
        if not math.isfinite(value):
            return INVALID
        return value - self.max if self.max is not None else float(self.min) - value  # type: ignore[arg-type]

    def describe(self) -> str:
        return f"{self.figure} <= {self.max:g}" if self.max is not None else f"{self.figure} >= {self.min:g}"


@dataclass(frozen=True)
class Problem:
    """What is searched, what is optimised and what must hold."""

    variables: tuple[Variable, ...]
    allocations: tuple[Allocation, ...]
    objective: str
    sense: Literal["minimise", "maximise"]
    constraints: tuple[Constraint, ...] = ()

    def __post_init__(self) -> None:
        if not self.variables and not self.allocations:
            raise PolicySearchError("a policy search needs at least one variable or allocation")

    @property
    def sign(self) -> float:
        """+1 to minimise, -1 to maximise: the search always minimises sign x objective."""
        return 1.0 if self.sense == "minimise" else -1.0

    @property
    def names(self) -> tuple[str, ...]:
        """The world paths a candidate sets, in order."""
        return tuple(v.path for v in self.variables) + tuple(p for a in self.allocations for p in a.paths)

    def bounds(self) -> list[tuple[float, float]]:
        return [(v.low, v.high) for v in self.variables] + [(0.0, 1.0)] * sum(a.dim for a in self.allocations)

    def integrality(self) -> np.ndarray:
        return np.array([v.integer for v in self.variables] + [False] * sum(a.dim for a in self.allocations))

    def decode(self, x: Sequence[float]) -> dict[str, Any]:
        """A point of the search space as world changes (path -> value)."""
        changes: dict[str, Any] = {}
        for i, variable in enumerate(self.variables):
            changes[variable.path] = int(round(x[i])) if variable.integer else float(x[i])
        k = len(self.variables)
        for allocation in self.allocations:
            changes.update(allocation.decode(x[k : k + allocation.dim]))
            k += allocation.dim
        return changes


class Evaluator(Protocol):
    """Runs candidates (world changes) with given seeds; returns figures of shape (candidates, seeds, figures).

    ``figures`` names the last axis; a candidate that cannot run gives NaN rows.
    """

    figures: tuple[str, ...]

    def __call__(self, candidates: Sequence[Mapping[str, Any]], seeds: Sequence[int]) -> np.ndarray: ...


def candidate_id(changes: Mapping[str, Any]) -> str:
    """A short stable id of a candidate's world changes (values rounded to 12 significant digits)."""

    def canon(value: Any) -> Any:
        if isinstance(value, float):
            return float(f"{value:.12g}")
        if isinstance(value, dict):
            return {str(k): canon(v) for k, v in value.items()}
        if isinstance(value, (list, tuple)):
            return [canon(v) for v in value]
        return value

    text = json.dumps(canon(dict(changes)), sort_keys=True, separators=(",", ":"), default=str)
    return "c-" + hashlib.sha256(text.encode("utf-8")).hexdigest()[:12]


def replication_seeds(seed: int, purpose: int, n: int) -> tuple[int, ...]:
    """``n`` seeds for one purpose of a search (the search's common random numbers, or fresh ones)."""
    root = np.random.SeedSequence(seed, spawn_key=(purpose,))
    return tuple(int(child.generate_state(1)[0]) for child in root.spawn(n))


class _Cache:
    """Figures per candidate (mean over the search's seeds), each candidate simulated once."""

    def __init__(self, evaluate: Evaluator, seeds: Sequence[int]) -> None:
        self.evaluate = evaluate
        self.seeds = tuple(seeds)
        self.index = {name: j for j, name in enumerate(evaluate.figures)}
        self.changes: dict[str, dict[str, Any]] = {}
        self.values: dict[str, np.ndarray] = {}  # id -> (seeds, figures)
        self.order: list[str] = []

    def get(self, candidates: Sequence[dict[str, Any]]) -> list[np.ndarray]:
        ids = [candidate_id(c) for c in candidates]
        missing = list(dict.fromkeys(i for i in ids if i not in self.values))
        if missing:
            first = {i: c for i, c in zip(ids, candidates, strict=True)}
            figures = np.asarray(self.evaluate([first[i] for i in missing], self.seeds), dtype=float)
            for k, i in enumerate(missing):
                self.changes[i], self.values[i] = first[i], figures[k]
                self.order.append(i)
        return [self.values[i] for i in ids]

    def mean(self, cid: str, figure: str) -> float:
        column = self.values[cid][:, self.index[figure]]
        return float(np.mean(column)) if np.isfinite(column).all() else math.nan


# -- results -----------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class PolicySearchResult:
    """The best policy, its figures on fresh seeds, the runner-ups and the detections/delay frontier."""

    name: str
    problem: Problem
    best: str  # the incumbent's candidate name
    best_changes: dict[str, Any]
    selection: pd.DataFrame  # one row per finalist: fresh means, intervals, constraint status, comparison
    history: pd.DataFrame  # every candidate the search simulated (means over the search's seeds)
    frontier: pd.DataFrame  # the non-dominated candidates on detections (more) and delay (less)
    search: dict[str, Any]  # what differential evolution reported, and the runs it took
    level: float = 0.95

    def to_frame(self) -> pd.DataFrame:
        """The finalists, best first."""
        return self.selection

    def summary(self) -> str:
        """The result in words, for a briefing."""
        p = self.problem
        sel = self.selection
        best = sel[sel["candidate"] == self.best].iloc[0]
        reps = int(best["replications"])
        lines = [
            f"Policy search: {self.name}",
            f"Objective: {p.sense} {p.objective} ({FIGURE_SOURCES.get(p.objective, '')}); constraints: "
            + (", ".join(c.describe() for c in p.constraints) or "none")
            + ".",
            f"Search: differential evolution, {self.search['candidates']} candidates x {self.search['replications']} "
            f"common-random-number replications ({self.search['nit']} generations; {self.search['message']}).",
            f"Selection: {len(sel)} finalists x {reps} fresh common seeds; two-sided paired t-tests against the "
            f"incumbent, Bonferroni-adjusted, alpha {self.search['alpha']}.",
            "",
            f"Best policy ({self.best}):",
        ]
        for path, value in self.best_changes.items():
            lines.append(f"  {path} = {_shown(value)}")
        if not self.best_changes:
            lines.append("  the world as it stands (no changes)")
        lines.append(f"  on fresh seeds ({self.level:.0%} intervals over {reps} replications; log scale for counts "
                     "and times, logit scale for shares):")
        if reps < MIN_REPLICATIONS:
            lines.append(f"  warning: only {reps} fresh replications: these intervals are unreliable; raise "
                         f"selection.replications to at least {MIN_REPLICATIONS}")
        for figure in dict.fromkeys([p.objective, *(c.figure for c in p.constraints), *REPORTED]):
            if f"{figure}_mean" in sel.columns:
                lines.append(
                    f"    {figure:<26} {_interval(best, figure)}  {FIGURE_SOURCES.get(figure, '')}"
                    + _status(best, figure, p.constraints)
                )
        others = sel[sel["candidate"] != self.best]
        if len(others):
            lines += ["", f"Runner-ups (candidate minus best in {p.objective}, per common seed; {self.level:.0%} interval):"]
            for _, row in others.iterrows():
                diff = f"{row['difference']:+.4g} [{row['difference_low']:+.4g}, {row['difference_high']:+.4g}]"
                lines.append(
                    f"  {row['candidate']:<18} {p.objective} {row[f'{p.objective}_mean']:>9.4g}  difference {diff:<28} "
                    f"{row['verdict']}"
                )
                lines.append(f"    settings: {_settings(row)}")
        lines += [
            "",
            f"Detections/delay frontier: {len(self.frontier)} of {len(self.history)} searched candidates are not "
            f"beaten on both {BENEFIT} and {DELAY}.",
            "",
            CAUTION,
        ]
        return "\n".join(lines)

    def frontier_figure(self) -> Any:
        """Detections against delay for every searched candidate, the frontier joined, finalists marked."""
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        fig = Figure(figsize=(6.4, 4.4), layout="constrained")
        FigureCanvasAgg(fig)
        ax = fig.add_subplot(1, 1, 1)
        h = self.history
        ax.scatter(h[DELAY], h[BENEFIT], s=12, c=np.where(h["feasible"], "#4c72b0", "#bbbbbb"), label="searched")
        f = self.frontier.sort_values(DELAY)
        ax.plot(f[DELAY], f[BENEFIT], "-", color="#dd8452", label="frontier of the search (search seeds)")
        sel = self.selection
        fresh = sel.rename(columns={f"{DELAY}_mean": DELAY, f"{BENEFIT}_mean": BENEFIT})
        on = frontier(fresh)
        ax.plot(on[DELAY], on[BENEFIT], "--", color="#333333", linewidth=1, label="frontier of the finalists (fresh seeds)")
        ax.scatter(fresh[DELAY], fresh[BENEFIT], marker="x", color="#333333", label="finalists (fresh seeds)")
        best = fresh[fresh["candidate"] == self.best]
        ax.scatter(best[DELAY], best[BENEFIT], marker="*", s=140, color="#c44e52", label="best")
        ax.set_xlabel("Time in port, 95th percentile (minutes; observed)")
        ax.set_ylabel("Detections (persons; observed)")
        ax.set_title(textwrap.fill(f"{self.name}: detections against delay", 70), fontsize=9)
        fig.legend(*ax.get_legend_handles_labels(), fontsize=7, loc="outside lower center", ncol=2, frameon=False)
        if self.best not in set(on["candidate"]):
            why = (f"The best is chosen by {self.problem.sense} {self.problem.objective} within the constraints on "
                   "fresh seeds, not by detections against delay, so it need not lie on either frontier.")
            fig.suptitle(textwrap.fill(why, 90), fontsize=7, color="#444444")  # in the layout: never cut off
        return fig


def _settings(row: pd.Series) -> str:
    """A candidate's world changes as they read: "stations.gate_imaging.selection.fraction = 0.31; ..."."""
    parts = [f"{column[4:]} = {_shown(row[column])}" for column in row.index
             if column.startswith("set:") and not (isinstance(row[column], float) and math.isnan(row[column]))]
    return "; ".join(parts) or "the world as it stands (no changes)"


def _shown(value: Any) -> str:
    return f"{value:.4g}" if isinstance(value, float) else str(value)


def _interval(row: pd.Series, figure: str) -> str:
    mean, low, high = row[f"{figure}_mean"], row[f"{figure}_low"], row[f"{figure}_high"]
    if not math.isfinite(mean):
        return f"{'n/a':>28}"
    return f"{mean:>10.4g} [{low:.4g}, {high:.4g}]".ljust(28)


def _status(row: pd.Series, figure: str, constraints: Sequence[Constraint]) -> str:
    for c in constraints:
        if c.figure == figure:
            return f"  {c.describe()}: {row[f'status:{figure}']}"
    return ""


# -- the search --------------------------------------------------------------------------------


@dataclass(frozen=True)
class SearchSettings:
    """Differential evolution (scipy's names) and the selection stage."""

    replications: int = 3
    popsize: int = 8
    maxiter: int = 10
    tol: float = 0.01
    mutation: tuple[float, float] = (0.5, 1.0)
    recombination: float = 0.7
    init: str = "latinhypercube"
    top: int = 3
    selection_replications: int = 8
    alpha: float = 0.05
    level: float = 0.95


def search_policy(
    evaluate: Evaluator,
    problem: Problem,
    settings: SearchSettings,
    *,
    seed: int,
    policies: Mapping[str, Mapping[str, Any]] | None = None,
    name: str = "policy search",
    progress: Callable[[int], None] | None = None,
) -> PolicySearchResult:
    """Search, select and trace the frontier (see the module docstring); ``policies`` join the selection."""
    for figure in {problem.objective, BENEFIT, DELAY, *(c.figure for c in problem.constraints)}:
        if figure not in evaluate.figures:
            raise PolicySearchError(f"the evaluator gives no figure '{figure}' (it gives {', '.join(evaluate.figures)})")
    cache = _Cache(evaluate, replication_seeds(seed, _SEARCH, settings.replications))

    def columns(x: np.ndarray) -> list[str]:
        points = [problem.decode(x[:, s]) for s in range(x.shape[1])]
        cache.get(points)
        return [candidate_id(p) for p in points]

    def objective(x: np.ndarray) -> np.ndarray:
        values = [problem.sign * cache.mean(cid, problem.objective) for cid in columns(np.atleast_2d(x.T).T)]
        return np.array([v if math.isfinite(v) else INVALID for v in values])

    def violations(x: np.ndarray) -> np.ndarray:
        ids = columns(np.atleast_2d(x.T).T)
        return np.array([[c.violation(cache.mean(cid, c.figure)) for cid in ids] for c in problem.constraints])

    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(_EVOLUTION,)))
    constraints = [optimize.NonlinearConstraint(violations, -np.inf, 0.0)] if problem.constraints else []
    integer = problem.integrality()

    def tick(intermediate_result: optimize.OptimizeResult) -> None:  # scipy passes the result by this name
        if progress is not None:
            progress(1)

    de = optimize.differential_evolution(
        objective,
        problem.bounds(),
        strategy="best1bin",
        maxiter=settings.maxiter,
        popsize=settings.popsize,
        tol=settings.tol,
        mutation=settings.mutation,
        recombination=settings.recombination,
        init=settings.init,
        polish=False,
        integrality=integer if integer.any() else None,
        vectorized=True,
        updating="deferred",
        constraints=constraints,
        rng=rng,
        callback=tick,
    )
    history = _history(cache, problem)
    finalists = _finalists(history, problem, settings.top)
    named = {label: dict(changes) for label, changes in (policies or {}).items()}
    selection, best = _select(evaluate, finalists, named, cache, problem, settings, seed)
    best_changes = named[best] if best in named else cache.changes[best]
    return PolicySearchResult(
        name=name,
        problem=problem,
        best=best,
        best_changes=dict(best_changes),
        selection=selection,
        history=history,
        frontier=frontier(history),
        search={
            "nit": int(de.nit),
            "nfev": int(de.nfev),
            "message": _stopped(de, settings.maxiter),
            "success": bool(de.success),
            "candidates": len(cache.order),
            "replications": settings.replications,
            "alpha": settings.alpha,
        },
        level=settings.level,
    )


def _stopped(de: optimize.OptimizeResult, maxiter: int) -> str:
    """Why the search stopped, in our words rather than the library's."""
    if de.success:
        return "stopped when the population stopped improving (its spread fell below search.tol)"
    if de.nit >= maxiter:
        return (f"stopped at the limit of {maxiter} generations (search.maxiter) before the population settled; "
                "a larger maxiter searches further")
    return "stopped early: no candidate met the constraints well enough to go on; widen the bounds or the limits"


def _history(cache: _Cache, problem: Problem) -> pd.DataFrame:
    """Every searched candidate: its changes, mean figures over the search's seeds, feasibility, objective."""
    rows = []
    for cid in cache.order:
        row: dict[str, Any] = {"candidate": cid}
        row.update(cache.changes[cid])
        for figure in cache.evaluate.figures:
            row[figure] = cache.mean(cid, figure)
        row["feasible"] = all(c.violation(row[c.figure]) <= 0 for c in problem.constraints) and math.isfinite(
            row[problem.objective]
        )
        rows.append(row)
    return pd.DataFrame(rows)


def _finalists(history: pd.DataFrame, problem: Problem, top: int) -> list[str]:
    """The ``top`` best feasible candidates; the least violating ones if too few are feasible."""
    key = problem.sign * history[problem.objective]
    feasible = history[history["feasible"]].assign(_key=key).sort_values("_key", kind="stable")
    chosen = list(feasible["candidate"][:top])
    if len(chosen) < top:
        rest = history[~history["candidate"].isin(chosen)].copy()
        rest["_violation"] = [
            sum(max(0.0, c.violation(row[c.figure])) for c in problem.constraints) for _, row in rest.iterrows()
        ]
        chosen += list(rest.sort_values(["_violation"], kind="stable")["candidate"][: top - len(chosen)])
    return chosen


def _select(
    evaluate: Evaluator,
    finalists: Sequence[str],
    named: Mapping[str, Mapping[str, Any]],
    cache: _Cache,
    problem: Problem,
    settings: SearchSettings,
    seed: int,
) -> tuple[pd.DataFrame, str]:
    """Fresh common seeds for every finalist; the incumbent and paired t comparisons against it."""
    seeds = replication_seeds(seed, _FRESH, settings.selection_replications)
    labels = list(finalists) + [n for n in named if candidate_id(named[n]) not in finalists]
    changes = [cache.changes[c] if c in cache.changes else dict(named[c]) for c in labels]
    values = np.asarray(evaluate(changes, seeds), dtype=float)  # (candidates, seeds, figures)
    index = {name: j for j, name in enumerate(evaluate.figures)}
    figures = [f for f in dict.fromkeys([problem.objective, *(c.figure for c in problem.constraints), *REPORTED]) if f in index]
    rows = []
    for k, label in enumerate(labels):
        row: dict[str, Any] = {"candidate": label, "named": label in named, "replications": len(seeds)}
        row.update({f"set:{path}": value for path, value in changes[k].items()})
        for figure in figures:
            row[f"{figure}_mean"], row[f"{figure}_low"], row[f"{figure}_high"] = bounded_mean_interval(
                values[k, :, index[figure]], figure_scale(figure), settings.level
            )
        broken = []
        for c in problem.constraints:
            mean, low, high = row[f"{c.figure}_mean"], row[f"{c.figure}_low"], row[f"{c.figure}_high"]
            edge = low if c.max is not None else high
            if c.violation(mean) <= 0:
                row[f"status:{c.figure}"] = "met"
            else:
                broken.append(c.figure)
                shown = math.isfinite(edge) and c.violation(edge) > 0
                row[f"status:{c.figure}"] = "violated" if shown else "mean over the limit"
        row["feasible"] = not broken and math.isfinite(row[f"{problem.objective}_mean"])
        row["breaks"] = ", ".join(broken)
        rows.append(row)
    table = pd.DataFrame(rows)
    loss = values[:, :, index[problem.objective]] * problem.sign  # lower is better
    means = np.array([np.mean(r) if np.isfinite(r).all() else np.inf for r in loss])
    pool = np.flatnonzero(table["feasible"]) if table["feasible"].any() else np.arange(len(labels))
    incumbent = int(pool[np.argmin(means[pool])])
    tests = max(1, len(labels) - 1)
    diffs, lows, highs, pvalues, verdicts = [], [], [], [], []
    for k in range(len(labels)):
        if k == incumbent:
            diffs.append(0.0), lows.append(0.0), highs.append(0.0), pvalues.append(math.nan), verdicts.append("best")
            continue
        d = (loss[k] - loss[incumbent]) * problem.sign  # the candidate minus the incumbent, in the objective's units
        mean, low, high = mean_interval(d, settings.level)
        p = _paired_p(d)
        if p < settings.alpha / tests:
            verdict = "worse" if mean * problem.sign > 0 else "better"
        else:
            verdict = "not distinguishable"
        if not table.loc[k, "feasible"]:
            verdict += f", but breaks {table.loc[k, 'breaks'] or 'a run'}" if verdict == "better" else f"; breaks {table.loc[k, 'breaks'] or 'a run'}"
        diffs.append(mean), lows.append(low), highs.append(high), pvalues.append(p), verdicts.append(verdict)
    table["difference"], table["difference_low"], table["difference_high"] = diffs, lows, highs
    table["p_value"], table["verdict"] = pvalues, verdicts
    # The incumbent first, then feasible finalists, then the rest, each by their fresh mean.
    table["_order"] = [(-1 if k == incumbent else (0 if table.loc[k, "feasible"] else 1), means[k]) for k in range(len(labels))]
    table = table.sort_values("_order", kind="stable").drop(columns="_order").reset_index(drop=True)
    return table, labels[incumbent]


def _paired_p(d: np.ndarray) -> float:
    """Two-sided paired t-test p-value of mean difference 0 (1 when every difference is 0; 0 when all agree and differ)."""
    d = d[np.isfinite(d)]
    if d.size < 2:
        return 1.0
    sd = float(d.std(ddof=1))
    if sd == 0:
        return 1.0 if d.mean() == 0 else 0.0
    return float(2 * stats.t.sf(abs(d.mean()) / (sd / math.sqrt(d.size)), d.size - 1))


def frontier(history: pd.DataFrame, benefit: str = BENEFIT, cost: str = DELAY) -> pd.DataFrame:
    """Candidates no other candidate beats on both ``benefit`` (higher) and ``cost`` (lower), by cost."""
    frame = history[np.isfinite(history[benefit]) & np.isfinite(history[cost])]
    b, c = frame[benefit].to_numpy(), frame[cost].to_numpy()
    dominated = np.array(
        [bool(np.any((b >= b[i]) & (c <= c[i]) & ((b > b[i]) | (c < c[i])))) for i in range(len(frame))], dtype=bool
    )
    return frame[~dominated].sort_values(cost, kind="stable").reset_index(drop=True)


# -- the port model as an evaluator --------------------------------------------------------------


class ModelEvaluator:
    """Candidates as changed worlds, replications as runs through a batch executor (entered by the caller).

    A run lives in ``OUT/runs/<candidate id>/<seed>``; one found complete is
    read, not run again. A candidate whose changed world is invalid gives NaN
    figures (the search counts it infeasible).
    """

    figures = FIGURES

    def __init__(
        self,
        world: Mapping[str, Any],
        world_sha256: str,
        days: int,
        warmup: int,
        out: Path,
        executor: Executor,
        command: Sequence[str] = (),
    ) -> None:
        self.world = dict(world)
        self.world_sha256 = world_sha256
        self.days, self.warmup = days, warmup
        self.out = Path(out)
        self.executor = executor
        self.command = tuple(command)
        self.ran = 0
        self.reused = 0
        self.invalid: dict[str, str] = {}  # candidate id -> why its world is invalid

    def run_dir(self, cid: str, seed: int) -> Path:
        return self.out / "runs" / cid / str(seed)

    def __call__(self, candidates: Sequence[Mapping[str, Any]], seeds: Sequence[int]) -> np.ndarray:
        out = np.full((len(candidates), len(seeds), len(self.figures)), np.nan)
        tasks, where = [], {}
        for k, changes in enumerate(candidates):
            cid = candidate_id(changes)
            try:
                world = apply_changes(self.world, dict(changes))
                parse_world(world, f"<candidate {cid}>")
            except (WorldFileError, PathProblem) as exc:
                self.invalid[cid] = str(exc)
                continue
            write_json({"candidate": cid, "set": dict(changes)}, self.out / "candidates" / f"{cid}.json")
            for r, seed in enumerate(seeds):
                run_dir = self.run_dir(cid, seed)
                where[f"{cid}/{seed}"] = (k, r, run_dir)
                if is_complete(run_dir):
                    self.reused += 1
                    continue
                run_dir.parent.mkdir(parents=True, exist_ok=True)
                tasks.append(
                    RunTask(
                        run_id=f"{cid}/{seed}",
                        point=k,
                        replication=r,
                        seed=int(seed),
                        days=self.days,
                        warmup=self.warmup,
                        world=world,
                        world_sha256=self.world_sha256,
                        out=str(run_dir.resolve()),
                        command=self.command,
                        values={path: value for path, value in changes.items() if isinstance(value, (int, float, str))},
                    )
                )
        failed = set()
        for answer in self.executor.imap(tasks):
            if answer["ok"]:
                self.ran += 1
            else:
                failed.add(answer["run_id"])
                print(f"policy search: run {answer['run_id']} failed: {answer['error']}", file=sys.stderr)
        for key, (k, r, run_dir) in where.items():
            if key not in failed:
                out[k, r] = run_figures(run_dir, self.warmup)
        return out


def run_figures(run_dir: Path, warmup: int) -> np.ndarray:
    """A run's :data:`FIGURES`: its summary's numbers, check hours after the warm-up and encounters."""
    summary = json.loads((run_dir / SUMMARY_FILE).read_text(encoding="utf-8"))
    methods = pd.read_parquet(run_dir / METHODS_FILE, columns=["day", "check_minutes"])
    derived = {
        "check_hours": float(methods.loc[methods["day"] >= warmup, "check_minutes"].sum()) / 60.0,
        "encounters": float(summary["detections"]) + float(summary["interdictions"]),
    }
    values = []
    for figure in FIGURES:
        value = derived[figure] if figure in derived else summary.get(figure)
        values.append(float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else math.nan)
    return np.array(values)


# -- optimisation files -----------------------------------------------------------------------


Number = Annotated[float, NumberOnly]
WholeNumber = Annotated[int, Field(ge=0), NumberOnly]
AtLeastOne = Annotated[int, Field(ge=1), NumberOnly]
AtLeastTwo = Annotated[int, Field(ge=2), NumberOnly]
OpenShare = Annotated[float, Field(gt=0.0, lt=1.0), NumberOnly]
Positive = Annotated[float, Field(gt=0.0), NumberOnly]


class ObjectiveSpec(Strict):
    figure: str
    sense: Literal["minimise", "maximise"]


class VariableSpec(Strict):
    path: str = Field(min_length=1)
    bounds: tuple[Number, Number]
    integer: bool = False


class AllocationPath(Strict):
    path: str = Field(min_length=1)
    weight: Positive = 1.0
    max: Annotated[float, Field(ge=0.0), NumberOnly] | None = None


class AllocationSpec(Strict):
    name: str = Field(min_length=1, max_length=80)
    total: Positive
    integer: bool = False
    paths: list[AllocationPath] = Field(min_length=2)


class ConstraintSpec(Strict):
    figure: str
    max: Number | None = None
    min: Number | None = None


class PolicySpec(Strict):
    name: str = Field(min_length=1, max_length=80)
    note: str = ""
    set: dict[str, Any] = Field(default_factory=dict)


class SearchSpec(Strict):
    popsize: AtLeastOne = Field(8, description="candidates per generation for each search dimension: a generation "
                                "holds popsize x dimensions candidates (scipy's meaning)")
    maxiter: AtLeastOne = Field(10, description="the most generations the search runs")
    tol: Annotated[float, Field(ge=0.0), NumberOnly] = 0.01
    mutation: tuple[Number, Number] = (0.5, 1.0)
    recombination: Annotated[float, Field(ge=0.0, le=1.0), NumberOnly] = 0.7
    init: Literal["latinhypercube", "sobol", "halton", "random"] = "latinhypercube"


class SelectionSpec(Strict):
    top: AtLeastOne = 3
    replications: AtLeastTwo = 8
    alpha: OpenShare = 0.05
    level: OpenShare = 0.95


class Optimisation(Strict):
    """A whole optimisation file."""

    kind: Literal["optimisation"] = "optimisation"
    name: str = Field(min_length=1, max_length=200)
    note: str = ""
    world: str = Field(min_length=1)
    days: AtLeastOne
    warmup_days: WholeNumber = 0
    replications: AtLeastOne = 3
    seed: WholeNumber
    objective: ObjectiveSpec
    variables: list[VariableSpec] = Field(default_factory=list)
    allocations: list[AllocationSpec] = Field(default_factory=list)
    constraints: list[ConstraintSpec] = Field(default_factory=list)
    policies: list[PolicySpec] = Field(default_factory=list)
    search: SearchSpec = Field(default_factory=SearchSpec)
    selection: SelectionSpec = Field(default_factory=SelectionSpec)


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

    def digest(self) -> str:
        text = json.dumps(
            {"optimisation": self.spec.model_dump(mode="json"), "world": self.world_data},
            sort_keys=True,
            default=str,
            separators=(",", ":"),
        )
        return hashlib.sha256(text.encode("utf-8")).hexdigest()


def load_optimisation(path: str | Path) -> OptimisationPlan:
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
    return OptimisationPlan(source, spec, world_path, world_data, file_hash(world_path), problem, settings, policies)


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


# -- running an optimisation file -------------------------------------------------------------

HEADER = "optimisation.json"


def _open_store(out: Path, plan: OptimisationPlan, command: Sequence[str], resume: bool) -> None:
    header = out / HEADER
    if out.exists() and not out.is_dir():
        raise PolicySearchError(f"{out}: is a file; --out needs a folder")
    if header.is_file():
        if not resume:
            raise PolicySearchError(
                f"{out}: already holds a policy search; pass --resume to finish it, or choose another --out "
                "(nothing was overwritten)"
            )
        if json.loads(header.read_text(encoding="utf-8")).get("optimisation_sha256") != plan.digest():
            raise PolicySearchError(
                f"{out}: holds a different policy search (the file or its world changed); choose another --out "
                "(nothing was overwritten)"
            )
        return
    if out.is_dir() and any(out.iterdir()):
        raise PolicySearchError(f"{out}: is not empty and holds no policy search; choose another --out (nothing was overwritten)")
    out.mkdir(parents=True, exist_ok=True)
    write_json(
        {
            "optimisation": plan.spec.model_dump(mode="json"),
            "optimisation_file": str(plan.source),
            "optimisation_sha256": plan.digest(),
            "world_file": str(plan.world_path),
            "world_sha256": plan.world_sha256,
            "packages": package_versions(),
            "command": list(command),
        },
        header,
    )


def run_optimisation(
    plan: OptimisationPlan,
    out: str | Path,
    executor: Executor,
    resume: bool = False,
    command: Sequence[str] = (),
    figure: bool = True,
    progress: Callable[[int], None] | None = None,
) -> PolicySearchResult:
    """Search a validated plan with an executor the caller has entered; write the tables, summary and figure."""
    out = Path(out)
    _open_store(out, plan, command, resume)
    evaluate = ModelEvaluator(
        plan.world_data, plan.world_sha256, plan.spec.days, plan.spec.warmup_days, out, executor, command
    )
    result = search_policy(
        evaluate, plan.problem, plan.settings, seed=plan.spec.seed, policies=plan.policies, name=plan.spec.name,
        progress=progress,
    )
    result.search.update({"runs": evaluate.ran, "reused": evaluate.reused, "invalid": dict(evaluate.invalid)})
    write_parquet(_plain(result.selection), out / "selection.parquet")
    write_parquet(_plain(result.history), out / "history.parquet")
    write_parquet(_plain(result.frontier), out / "frontier.parquet")
    write_atomically(out / "summary.txt", lambda tmp: tmp.write_text(result.summary() + "\n", encoding="utf-8"))
    if figure:
        fig = result.frontier_figure()
        write_atomically(out / "frontier.png", lambda tmp: fig.savefig(tmp, dpi=110, format="png"))
    return result


def _plain(frame: pd.DataFrame) -> pd.DataFrame:
    """Columns of mixed values (a policy's settings) as JSON text, so the table writes to Parquet."""
    out = frame.copy()
    for column in out.columns:
        if out[column].dtype == object:
            kinds = {type(v) for v in out[column] if v is not None and not (isinstance(v, float) and math.isnan(v))}
            if len(kinds) > 1 or (kinds and not kinds <= {str}):
                out[column] = [json.dumps(v, default=str) for v in out[column]]
    return out


def describe_optimisation(path: str | Path) -> str:
    """Validate an optimisation file and say what it would run, in one line."""
    plan = load_optimisation(path)
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


def optimise_command(
    path: str | Path,
    out: str | Path | None,
    executor: str | None,
    workers: int | None,
    scheduler: str | None,
    resume: bool,
    check: bool,
    command: Sequence[str],
) -> None:
    """``undertow optimise``: validate (``check``) or search, and print the summary."""
    if check:
        print(describe_optimisation(path))
        return
    if out is None:
        raise InputError("--out: a policy search needs an output folder (or pass --check to only validate the file)")
    executor = choose_executor(executor, workers, scheduler)
    plan = load_optimisation(path)
    from ..progress import progress

    with make_executor(executor, workers, scheduler) as runner, progress(
        plan.settings.maxiter, "generations", "policy search"
    ) as bar:
        result = run_optimisation(plan, out, runner, resume, command, progress=bar.update)
    print(result.summary())
    print(f"\nselection.parquet, history.parquet, frontier.parquet, summary.txt and frontier.png in {out}", file=sys.stderr)
