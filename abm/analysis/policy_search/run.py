"""A policy search run into an output folder: the folder's record, resuming, the tables, ``undertow optimise``."""

from __future__ import annotations

import json
import math
import sys
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from ...errors import InputError, refuse_unwritable
from ...experiment.budget import SHOWN_VEHICLE_DAYS
from ...experiment.executors import Executor, Placement
from ...experiment.lock import release
from ...experiment.out_folder import open_output
from ...experiment.single import package_versions
from ...atomic import write_atomically
from ...records import write_json, write_parquet
from ...world.words import words_from_data
from .evaluator import ModelEvaluator
from .optimisation_file import OptimisationPlan, describe_optimisation, load_optimisation
from .problem import PolicySearchError
from .result import PolicySearchResult
from .search import search_policy

HEADER = "optimisation.json"


def _open_store(out: Path, plan: OptimisationPlan, command: Sequence[str], resume: bool) -> Path:
    """Start a search in OUT or take one up; returns the folder's lock, which the caller releases."""

    def changed(held: dict[str, Any]) -> None:
        raise PolicySearchError(
            f"{out}: holds a different policy search (the file or its world changed); choose another --out "
            "(nothing was overwritten)"
        )

    def write_record() -> None:
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
            out / HEADER,
        )

    lock, _ = open_output(out, HEADER, "policy search", resume, PolicySearchError,
                          ("optimisation_sha256", plan.digest()), write_record, changed)
    return lock


def run_optimisation(
    plan: OptimisationPlan,
    out: str | Path,
    executor: Executor,
    resume: bool = False,
    command: Sequence[str] = (),
    figure: bool = True,
    progress: Callable[[int], None] | None = None,
    keep_runs: bool = False,
) -> PolicySearchResult:
    """Search a validated plan with an executor the caller has entered; write the tables, summary and figure.

    ``keep_runs`` keeps every candidate run's directory; by default only its figures are kept.
    """
    out = Path(out)
    lock = _open_store(out, plan, command, resume)
    try:  # the folder is locked from open to the end: one writer at a time
        return _search(plan, out, executor, command, figure, progress, keep_runs)
    finally:
        release(lock)


def _search(
    plan: OptimisationPlan, out: Path, executor: Executor, command: Sequence[str], figure: bool,
    progress: Callable[[int], None] | None, keep_runs: bool,
) -> PolicySearchResult:
    """The body of :func:`run_optimisation`, in an opened folder."""
    evaluate = ModelEvaluator(
        plan.world_data, plan.world_sha256, plan.spec.days, plan.spec.warmup_days, out, executor, command, keep_runs
    )
    result = search_policy(
        evaluate, plan.problem, plan.settings, seed=plan.spec.seed, policies=plan.policies, name=plan.spec.name,
        progress=progress,
    )
    result.search.update({"runs": evaluate.ran, "reused": evaluate.reused, "invalid": dict(evaluate.invalid)})
    write_parquet(_plain(result.selection), out / "selection.parquet", "search/selection")
    write_parquet(_plain(result.history), out / "history.parquet", "search/history")
    write_parquet(_plain(result.frontier), out / "frontier.parquet", "search/frontier")
    write_atomically(out / "summary.txt", lambda tmp: tmp.write_text(result.summary() + "\n", encoding="utf-8"))
    if figure:
        fig = result.frontier_figure(words_from_data(plan.world_data))
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


def optimise_command(
    path: str | Path, out: str | Path | None, place: Placement, resume: bool, check: bool, command: Sequence[str],
    allow_large: bool = False, keep_runs: bool = False,
) -> None:
    """``undertow optimise``: validate (``check``) or search where ``place`` says, and print the summary."""
    if check:
        print(describe_optimisation(path, allow_large))
        return
    if out is None:
        raise InputError("--out: a policy search needs an output folder (or pass --check to only validate the file)")
    place.name()  # contradictory options are refused before anything is read
    refuse_unwritable(out)
    plan = load_optimisation(path, allow_large, Path(out))
    if plan.size is not None and plan.size.vehicle_days > SHOWN_VEHICLE_DAYS:
        print(plan.size.describe(), file=sys.stderr)
    from ..progress import progress

    with place.make() as runner, progress(
        plan.settings.maxiter, "generations", "policy search"
    ) as bar:
        result = run_optimisation(plan, out, runner, resume, command, progress=bar.update, keep_runs=keep_runs)
    print(result.summary())
    print(f"\nselection.parquet, history.parquet, frontier.parquet, summary.txt and frontier.png in {out}", file=sys.stderr)
