"""Every estimator against truth in every run: one row per run and compared estimator."""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

import pandas as pd

from ...estimate.expansion import EXPANSION
from ...estimate.results import DEFAULT_LEVEL, EstimateResult
from ...estimate.windows import Window, check_window
from ...records import read_truth
from ...world.schema import World
from .cache import cached_results
from .estimates import SensitivityChoice, _sensitivities, run_estimators
from .runs import read_world, summarised_days
from .truth import (
    EXCLUDED_TARGETS,
    EstimatorCheckError,
    PASSED_UNFOUND,
    PERSONS_AT_RISK,
    REACHING,
    RULES,
    Route,
    UNDETECTED_SUFFIX,
    _PERSONS_TARGET,
    _REACHING_TARGET,
    _rule_for,
    method_slug,
    slug_of,
    truth_value,
)


PER_RUN_COLUMNS = (
    "run", "slug", "method", "label", "quantity", "target", "estimate", "ci_low", "ci_high", "level",
    "observed", "truth", "error", "ratio", "covered", "exact", "note",
)
SKIPPED_COLUMNS = ("run", "slug", "method", "why")

RunsGiven = Mapping[str | Path, Mapping[str, Any]] | Iterable[str | Path | tuple[str | Path, Mapping[str, Any]]]


def _runs(runs: RunsGiven) -> list[tuple[Path, dict[str, Any]]]:
    if isinstance(runs, Mapping):
        items = list(runs.items())
    else:
        items = [(item, {}) if isinstance(item, (str, Path)) else item for item in runs]
    out = []
    for entry in items:
        try:
            path, labels = entry
        except (TypeError, ValueError):
            raise EstimatorCheckError(f"a run is a directory or (directory, labels), got {entry!r}") from None
        if not isinstance(labels, Mapping):
            raise EstimatorCheckError(f"labels of run {path} must be a mapping of factor -> level, got {labels!r}")
        out.append((Path(path), {str(k): _scalar(v) for k, v in labels.items()}))
    if not out:
        raise EstimatorCheckError("no runs given")
    return out


def _scalar(value: Any) -> Any:
    """A label value fit for grouping: scalars as they are, anything else as JSON text."""
    if value is None or isinstance(value, (str, int, float, bool)):
        return value
    return json.dumps(value, sort_keys=True, default=str)


def _comparisons(result: EstimateResult, route: Route) -> tuple[list[dict[str, Any]], list[tuple[str, str]]]:
    """(comparison rows without the truth, (slug, why) skipped) for one estimator result."""
    slug = method_slug(result.method) or slug_of(result.method)
    for prefix, why in EXCLUDED_TARGETS:
        if result.target.startswith(prefix):
            return [], [(slug, why)]
    rule = _rule_for(result.method)
    if rule is None:
        return [], [(slug, "no truth mapping for this estimator in TRUTH_TABLE")]
    base = {"method": result.method, "target": result.target, "level": result.level, "observed": result.observed}
    if rule.truth == PERSONS_AT_RISK:
        if result.target != _PERSONS_TARGET:
            return [], [(slug, f"target '{result.target}' is not the '{_PERSONS_TARGET}' TRUTH_TABLE expects")]
        row = dict(base, slug=slug, label=rule.label, quantity=PERSONS_AT_RISK, note="")
        return [dict(row, estimate=result.estimate, ci_low=result.ci_low, ci_high=result.ci_high)], []
    match = _REACHING_TARGET.match(result.target)
    if not match or match["station"] not in route.position:
        return [], [(slug, f"target '{result.target}' names no station of the run's route")]
    station = match["station"]
    note = route.inexact.get(station, "")
    rows = [
        dict(
            base, slug=slug, label=rule.label if rule.method != EXPANSION else f"{rule.label} at '{station}'",
            quantity=f"{REACHING}:{station}", note=note,
            estimate=result.estimate, ci_low=result.ci_low, ci_high=result.ci_high,
        )
    ]
    if rule.method == EXPANSION:
        undetected = RULES[EXPANSION + UNDETECTED_SUFFIX]
        rows.append(
            dict(
                base, method=result.method + UNDETECTED_SUFFIX, slug=slug + UNDETECTED_SUFFIX,
                label=f"{undetected.label} at '{station}'", quantity=f"{PASSED_UNFOUND}:{station}", note=note,
                estimate=result.undetected, ci_low=result.ci_low - result.observed,
                ci_high=result.ci_high - result.observed,
            )
        )
    return rows, []


def check_run(
    run_dir: str | Path,
    labels: Mapping[str, Any] | None = None,
    *,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    sensitivities: SensitivityChoice = "world",
    include_inexact: bool = False,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """One run: (comparison rows, skipped rows); see :func:`check_runs`."""
    return check_runs(
        [(run_dir, dict(labels or {}))], window=window, level=level, sensitivities=sensitivities,
        include_inexact=include_inexact,
    )


def check_runs(
    runs: RunsGiven,
    *,
    window: Window = None,
    level: float = DEFAULT_LEVEL,
    sensitivities: SensitivityChoice = "world",
    include_inexact: bool = False,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Every estimator against truth in every run: (per-run table, skipped table).

    ``runs``: run directories, each alone or with a label dict of factors
    (e.g. ``{"behaviour": "adaptive", "policy": "more_dogs"}``), or a mapping
    directory -> labels. A ``behaviour`` label is taken from the run's world
    when not given. The per-run table has one row per run x compared
    estimator with the label columns then :data:`PER_RUN_COLUMNS`; ``exact``
    is False (and ``note`` says why) for a truth that cannot be counted
    exactly, and such rows are only kept with ``include_inexact``. The skipped
    table lists per run the estimators that could not run, whose target has no
    truth to match, or whose comparison was inexact and left out, with why.
    ``df.attrs["factors"]`` names the label columns.
    """
    window = check_window(window, "estimator check")
    given = _runs(runs)
    rows: list[dict[str, Any]] = []
    skipped: list[dict[str, Any]] = []
    factors: list[str] = []
    for path, labels in given:
        world = read_world(path)
        labels = {"behaviour": world.adversary.behaviour, **labels}
        factors += [k for k in labels if k not in factors]
        compared, left_out = _check_one_run(path, world, labels, window, level, sensitivities, include_inexact)
        rows += compared
        skipped += left_out
    per_run = pd.DataFrame(rows, columns=[*factors, *PER_RUN_COLUMNS])
    skipped_frame = pd.DataFrame(skipped, columns=[*factors, *SKIPPED_COLUMNS])
    per_run = per_run.astype({"truth": "int64", "covered": "bool", "exact": "bool"}) if len(per_run) else per_run
    for frame in (per_run, skipped_frame):
        frame.attrs["factors"] = list(factors)
    return per_run, skipped_frame


def _check_one_run(
    path: Path,
    world: World,
    labels: Mapping[str, Any],
    window: Window,
    level: float,
    sensitivities: SensitivityChoice,
    include_inexact: bool,
) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """One run's (comparison rows, skipped rows), each led by its labels and run; see :func:`check_runs`."""
    route = Route.from_world(world)
    try:
        attempts = read_truth(path)["attempts"]
    except (OSError, ValueError) as exc:
        raise EstimatorCheckError(f"{path}: no truth records to compare with ({exc})") from None
    if _cached_setting(path, window, level, sensitivities):
        results, failures = cached_results(path)  # what the batch's workers already computed
    else:
        results, failures = run_estimators(path, window, level, _sensitivities(sensitivities, world))
    rows: list[dict[str, Any]] = []
    skipped: list[dict[str, Any]] = []
    for name, reason in failures:
        skipped.append({**labels, "run": str(path), "slug": method_slug(name) or slug_of(name), "method": name,
                        "why": f"cannot run: {reason}"})
    for result in results:
        compared, left_out = _comparisons(result, route)
        for slug, why in left_out:
            skipped.append({**labels, "run": str(path), "slug": slug, "method": result.method, "why": why})
        for row in compared:
            exact = not row["note"]
            if not exact and not include_inexact:
                skipped.append({**labels, "run": str(path), "slug": row["slug"], "method": row["method"],
                                "why": f"truth not exact: {row['note']}"})
                continue
            truth = truth_value(row["quantity"], attempts, route, window)
            error = row["estimate"] - truth
            rows.append(
                {
                    **labels,
                    **row,
                    "run": str(path),
                    "truth": truth,
                    "error": error,
                    "ratio": row["estimate"] / truth if truth else math.nan,
                    "covered": bool(row["ci_low"] <= truth <= row["ci_high"]),
                    "exact": exact,
                }
            )
    return rows, skipped


def _cached_setting(path: Path, window: Window, level: float, sensitivities: SensitivityChoice) -> bool:
    """The request is the one :func:`cached_results` answers for this run."""
    if not (isinstance(sensitivities, str) and sensitivities == "world" and level == DEFAULT_LEVEL):
        return False
    try:
        return window == summarised_days(path)
    except (OSError, KeyError, ValueError):  # no manifest to say which days the run summarises
        return False
