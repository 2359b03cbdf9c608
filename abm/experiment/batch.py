"""A batch: every run of an experiment, through an executor, into a store.

:func:`run_batch` validates the experiment (every design point's world
included) before anything runs, opens the store (new, or resumed), ships the
runs still to do to the executor as small task messages, records failures as
they come back and finally rebuilds the summary and failure tables from the
run directories.
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from .compare import compare_points, format_comparison
from .budget import SHOWN_VEHICLE_DAYS, PlanSize, busiest_day
from .design import Plan, RunSpec, load_plan, point_shown
from .executors import Placement, make_executor
from .store import FAILURES_TABLE, Store, SummaryExtension
from ..errors import refuse_unwritable
from ..progress import progress
from ..world.words import words_from_data
from .worker import RunTask


@dataclass(frozen=True)
class BatchResult:
    """What a batch left in its store."""

    out: Path
    plan: Plan
    ran: int  # runs attempted by this invocation (the rest were complete already)
    summary: pd.DataFrame
    failures: pd.DataFrame
    comparison: pd.DataFrame

    @property
    def total(self) -> int:
        return self.plan.total_runs

    @property
    def failed(self) -> int:
        return len(self.failures)


def _tasks(
    plan: Plan, todo: Sequence[RunSpec], store: Store, command: Sequence[str], extensions: Sequence[SummaryExtension]
) -> Iterator[RunTask]:
    """Task messages, built as the executor asks for them; a world is built once per point and posterior draw."""
    cached: tuple[tuple[int, int | None], dict[str, Any]] | None = None
    for spec in todo:
        key = (spec.point, plan.posterior.draws[spec.replication] if plan.posterior is not None else None)
        if cached is None or cached[0] != key:
            cached = (key, plan.world_for(spec.point, spec.replication))
        yield RunTask(
            run_id=spec.run_id,
            point=spec.point,
            replication=spec.replication,
            seed=spec.seed,
            days=plan.spec.days,
            warmup=plan.spec.warmup_days,
            world=cached[1],
            world_sha256=plan.world_sha256,
            out=str(store.run_dir(spec.run_id).resolve()),
            command=tuple(command),
            values=plan.run_values(spec.point, spec.replication),
            extensions=tuple(extensions),
        )


def run_batch(
    experiment: str | Path,
    out: str | Path,
    executor: str = "serial",
    workers: int | None = None,
    scheduler: str | None = None,
    resume: bool = False,
    command: Sequence[str] = (),
    show_progress: bool | None = None,
    extensions: Sequence[SummaryExtension] = (),
    calibration: str | Path | None = None,
    on_warning: Callable[[str], None] | None = None,
    allow_large: bool = False,
    shared_output: bool = False,
) -> BatchResult:
    """Run (or finish, with ``resume``) every run of an experiment into ``out``.

    With a ``scheduler``, the cluster's workers send each run's files back to be written here, unless
    ``shared_output`` says they see ``out`` at the same path (then they write in place).

    ``calibration`` overrides the file's ``calibration:`` folder (see :func:`load_plan`).
    ``on_warning`` is given each load warning (:func:`load_warnings`) before any run starts, and the plan's
    size when it is large. ``allow_large`` lets a plan past the ceilings of :mod:`abm.experiment.budget`.

    A run that raises is recorded in failures.parquet and the batch goes on.
    ``show_progress`` None shows a bar on a terminal and progress lines otherwise (False: nothing). ``extensions`` add
    summary columns per run (the command line adds every estimator's result);
    workers call them as each run finishes, so whatever they cache is computed
    in parallel, and the store calls them again when it builds the summary.
    """
    # The executor first: a process pool's server then imports the engine while the plan is read.
    runner = make_executor(executor, workers, scheduler, [extension.__module__ for extension in extensions],
                           shared_output)
    refuse_unwritable(out)
    plan = load_plan(experiment, calibration, allow_large, Path(out))
    store = Store(out)
    store.open(plan, list(command), resume)
    try:  # the folder is locked from open to close: one writer at a time
        done = store.complete(plan)
        todo = [spec for spec in plan.runs() if spec.run_id not in done]
        by_id = {spec.run_id: spec for spec in todo}
        failed = 0
        if todo:
            with contextlib.ExitStack() as stack:
                try:
                    stack.enter_context(runner)  # a scheduler that cannot be reached fails here, before any run
                except BaseException:
                    store.discard_if_empty()  # so a retry needs no --resume
                    raise
                if on_warning is not None:  # once work can start: a refused --out or scheduler stays one line
                    size = PlanSize(plan.total_runs, plan.spec.days + plan.spec.warmup_days,
                                    max(busiest_day(plan.world_for(p.index)) for p in plan.points))
                    if size.vehicle_days > SHOWN_VEHICLE_DAYS:
                        on_warning(size.describe())
                    for warning in load_warnings(plan):
                        on_warning(warning)
                    if store.damaged:
                        plural = "s are" if len(store.damaged) > 1 else " is"
                        on_warning(f"warning: {len(store.damaged)} damaged run{plural} run again "
                                   f"(first: {store.damaged[0]})")
                bar = stack.enter_context(progress(plan.total_runs, "runs", "batch", len(done), show_progress))
                for answer in runner.imap(_tasks(plan, todo, store, command, extensions)):
                    if not answer["ok"]:
                        failed += 1
                        store.record_failure(by_id[answer["run_id"]], answer["error"], answer["traceback"])
                        bar.set_postfix_str(f"{failed} failed")
                    bar.update(1)
        summary, failures = store.rebuild(plan, extensions)
    finally:
        store.close()
    labels = [f.label for f in plan.factors]
    comparison = compare_points(summary, labels, {p.index: p.compare_to for p in plan.points})
    return BatchResult(Path(out), plan, len(todo), summary, failures, comparison)


def load_warnings(plan: Plan) -> list[str]:
    """The load report's warnings for every design point's world, each once, naming the points it holds for."""
    from ..port.load import load_report
    from ..world import parse_world

    holds: dict[str, list[str]] = {}
    for point in plan.points:
        report = load_report(parse_world(plan.world_for(point.index), plan.world_path))
        for warning in report.warnings:
            holds.setdefault(warning, []).append(point_shown(point))
    if len(plan.points) == 1:
        return list(holds)
    return [warning if len(points) == len(plan.points) else f"{warning} (design points: {'; '.join(points)})"
            for warning, points in holds.items()]


def print_warning(text: str) -> None:
    """A warning line on stderr, where it does not mix with a command's answer."""
    print(text, file=sys.stderr, flush=True)


def batch_command(
    experiment: str | Path,
    out: str | Path,
    place: Placement,
    resume: bool,
    command: Sequence[str],
    extensions: Sequence[SummaryExtension] = (),
    allow_large: bool = False,
) -> bool:
    """``undertow batch``: run the batch where ``place`` says, print the comparison; False when some runs failed
    (noted on stderr)."""
    result = run_batch(experiment, out, place.name(), place.workers, place.scheduler, resume, command,
                       extensions=extensions, on_warning=print_warning, allow_large=allow_large,
                       shared_output=place.shared_output)
    done = len(result.summary)  # runs read back whole from the store, not answers that said so
    print(f"{result.plan.spec.name}: {done} of {result.total} runs complete ({result.ran} run now) -> {result.out}")
    print(format_comparison(result.comparison, [f.label for f in result.plan.factors],
                            words=words_from_data(result.plan.world_data)))
    if result.failed:
        print(
            f"undertow batch: {result.failed} of {result.total} runs failed; errors in {Path(out) / FAILURES_TABLE}",
            file=sys.stderr,
        )
    return done == result.total
