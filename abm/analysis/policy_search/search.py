"""The search: differential evolution over a problem on any evaluator, then selection and the frontier."""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import pandas as pd
from scipy import optimize

from ..frontier import BENEFIT, DELAY, frontier
from .problem import (
    EVOLUTION_SEEDS, INVALID, SEARCH_SEEDS, CandidateCache, Evaluator, PolicySearchError, Problem, SearchSettings,
    candidate_id, replication_seeds,
)
from .result import PolicySearchResult
from .selection import select


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
    """Search, select and trace the frontier (see the package docstring); ``policies`` join the selection."""
    for figure in {problem.objective, BENEFIT, DELAY, *(c.figure for c in problem.constraints)}:
        if figure not in evaluate.figures:
            raise PolicySearchError(f"the evaluator gives no figure '{figure}' (it gives {', '.join(evaluate.figures)})")
    cache = CandidateCache(evaluate, replication_seeds(seed, SEARCH_SEEDS, settings.replications))
    de = _evolve(cache, problem, settings, seed, progress)
    history = _history(cache, problem)
    finalists = _finalists(history, problem, settings.top)
    named = {label: dict(changes) for label, changes in (policies or {}).items()}
    selection, best = select(evaluate, finalists, named, cache, problem, settings, seed)
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


def _evolve(
    cache: CandidateCache,
    problem: Problem,
    settings: SearchSettings,
    seed: int,
    progress: Callable[[int], None] | None,
) -> optimize.OptimizeResult:
    """Differential evolution over the problem, each candidate's figures from ``cache`` (see the package docstring)."""

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

    rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(EVOLUTION_SEEDS,)))
    constraints = [optimize.NonlinearConstraint(violations, -np.inf, 0.0)] if problem.constraints else []
    integer = problem.integrality()

    def tick(intermediate_result: optimize.OptimizeResult) -> None:  # scipy passes the result by this name
        if progress is not None:
            progress(1)

    return optimize.differential_evolution(
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


def _stopped(de: optimize.OptimizeResult, maxiter: int) -> str:
    """Why the search stopped, in our words rather than the library's."""
    if de.success:
        return "stopped when the population stopped improving (its spread fell below search.tol)"
    if de.nit >= maxiter:
        return (f"stopped at the limit of {maxiter} generations (search.maxiter) before the population settled; "
                "a larger maxiter searches further")
    return "stopped early: no candidate met the constraints well enough to go on; widen the bounds or the limits"


def _history(cache: CandidateCache, problem: Problem) -> pd.DataFrame:
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
