"""The selection: finalists run again on fresh common seeds, compared with the incumbent by paired t-tests."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from ...experiment.compare import bounded_mean_interval, figure_scale, mean_interval
from .problem import (
    FRESH_SEEDS, REPORTED, CandidateCache, Evaluator, Problem, SearchSettings, candidate_id, replication_seeds,
)


def select(
    evaluate: Evaluator,
    finalists: Sequence[str],
    named: Mapping[str, Mapping[str, Any]],
    cache: CandidateCache,
    problem: Problem,
    settings: SearchSettings,
    seed: int,
) -> tuple[pd.DataFrame, str]:
    """Fresh common seeds for every finalist; the incumbent and paired t comparisons against it."""
    seeds = replication_seeds(seed, FRESH_SEEDS, settings.selection_replications)
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
