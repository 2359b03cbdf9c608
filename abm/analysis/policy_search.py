"""Policy search: which policy does best within the delay and staff the crossing can bear, by simulation.

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

Reading the file and running it on the port model is :mod:`abm.analysis.optimisation`;
this module is the search itself, on any evaluator. Each run's figures are kept in ``OUT/simulations.parquet`` by
``<candidate>/<seed>`` (a candidate's id is a hash of its world changes; ``--keep-runs`` also keeps its run in
``OUT/runs/<candidate>/<seed>/``), so an interrupted search resumes with ``--resume`` without repeating a run: the
search is deterministic given the seed and replays through the finished runs.
"""

from __future__ import annotations

import hashlib
import json
import math
import textwrap
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal, Protocol

import numpy as np
import pandas as pd
from scipy import optimize, stats

from ..errors import InputError
from ..experiment.compare import MIN_REPLICATIONS, bounded_mean_interval, figure_scale, mean_interval
from ..experiment.single import SUMMARY_SOURCES
from ..world.words import GENERIC, Words

# Figures a candidate is judged on: the numeric run-summary figures and two derived ones.
DERIVED = {"check_hours": "observed", "encounters": "observed"}
FIGURE_SOURCES = dict(SUMMARY_SOURCES) | DERIVED
FIGURES = tuple(FIGURE_SOURCES)
BENEFIT, DELAY = "detections", "time_in_port_p95_min"  # the frontier's axes
REPORTED = (BENEFIT, DELAY, "crossings", "check_hours")  # figures every finalist's row carries
# Spawn-key purposes: the search's common seeds, the selection's fresh seeds, differential evolution's own draws.
_SEARCH, _FRESH, _EVOLUTION = 0x5EA, 0xF5E, 0xDE
INVALID = 1e12  # objective and violation of a candidate whose world is invalid or whose runs failed
CAUTION = (
    "Model estimates, not counts: the search compares policies inside this model, with its invented numbers. "
    "A policy that displaces attempts can push people toward more dangerous boarding; defer to law, "
    "safeguarding duties and the agencies' own practice."
)


class PolicySearchError(InputError):
    """Settings or evaluations a policy search cannot work with."""




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

    def frontier_figure(self, words: Words = GENERIC) -> Any:
        """Detections against delay for every searched candidate, the frontier joined, finalists marked.

        ``words`` are the crossing's own ("time in the terminal") for the axis.
        """
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
        ax.set_xlabel(words.fill("{Time_at_site}, 95th percentile (minutes; observed)"))
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
