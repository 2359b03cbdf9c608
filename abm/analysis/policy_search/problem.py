"""The problem a policy search solves: decision variables, allocations, constraints, the figures judged.

Also what every stage shares: the evaluator's interface, a candidate's id,
the seeds of each purpose and the search's record of evaluated candidates.
"""

from __future__ import annotations

import hashlib
import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Literal, Protocol

import numpy as np

from ...errors import InputError
from ...experiment.single import SUMMARY_SOURCES
from ..frontier import BENEFIT, DELAY

# Figures a candidate is judged on: the numeric run-summary figures and two derived ones.
DERIVED = {"check_hours": "observed", "encounters": "observed"}
FIGURE_SOURCES = dict(SUMMARY_SOURCES) | DERIVED
FIGURES = tuple(FIGURE_SOURCES)
REPORTED = (BENEFIT, DELAY, "crossings", "check_hours")  # figures every finalist's row carries
# Spawn-key purposes: the search's common seeds, the selection's fresh seeds, differential evolution's own draws.
SEARCH_SEEDS, FRESH_SEEDS, EVOLUTION_SEEDS = 0x5EA, 0xF5E, 0xDE
INVALID = 1e12  # objective and violation of a candidate whose world is invalid or whose runs failed


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


class CandidateCache:
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
