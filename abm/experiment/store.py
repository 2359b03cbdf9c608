"""The batch store: one output folder holding a whole experiment's runs and tables.

Layout of ``OUT``::

    experiment.json    the experiment, its digest, the design points, package versions, the command
                       (and ``calibration``: the folder, digests and draws of a calibrated experiment)
    runs/<run-id>/     one run directory per run (the layout of abm.experiment.single)
    failed/<run-id>.json  the error and traceback of a run that raised (until it is redone)
    summary.parquet    one row per completed run, sorted by run id
    failures.parquet   one row per failed run, sorted by run id

Run directories appear by rename only when complete, so a run either exists
whole or not at all; the tables are rebuilt from the run directories, so they
do not depend on the order runs finished in, on the executor, or on how many
times the batch was interrupted and resumed.
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import pandas as pd

from ..errors import InputError
from ..records import write_json, write_parquet
from ..run_files import damage
from .design import Plan, PlannedFactor, RunSpec
from .lock import release
from .out_folder import open_output
from .posterior import DRAW_COLUMN
from .single import SUMMARY_SOURCES, package_versions
from .worker import SUMMARY_FILE, is_complete

EXPERIMENT_FILE = "experiment.json"
RUNS_DIR = "runs"
FAILED_DIR = "failed"
SUMMARY_TABLE = "summary.parquet"
FAILURES_TABLE = "failures.parquet"
RUN_COLUMNS = ("run_id", "point", "replication")
FAILURE_COLUMNS = {
    "run_id": "string",
    "point": "int64",
    "replication": "int64",
    "seed": "int64",
    "error": "string",
    "traceback": "string",
}

# Extra summary columns computed from a completed run directory (e.g. estimator results). Each function
# takes the run directory and returns {column: value}; the store adds the columns to every row.
SummaryExtension = Callable[[Path], Mapping[str, Any]]


class StoreError(InputError):
    """An output folder that cannot take this batch."""


class Store:
    """The output folder of one batch."""

    def __init__(self, out: str | Path) -> None:
        self.out = Path(out)
        self.runs = self.out / RUNS_DIR
        self.failed = self.out / FAILED_DIR
        self.lock: Path | None = None  # held from open() to close(): one writer per folder
        self.damaged: list[str] = []  # what was wrong with each damaged run complete() found
        self.created: list[Path] = []  # folders open() made for a new batch, deepest last
        self.started = False  # open() wrote a new batch's record (rather than taking up one)

    def discard_if_empty(self) -> None:
        """Undo a batch this open() started when it ran nothing (its executor could not start), so a retry needs
        no --resume. Only what :meth:`open` made goes: the experiment record, then the folders it created."""
        if not self.started or (self.runs.is_dir() and any(self.runs.iterdir())):
            return
        (self.out / EXPERIMENT_FILE).unlink(missing_ok=True)
        self.close()
        for folder in reversed(self.created):
            if folder.is_dir() and not any(folder.iterdir()):
                folder.rmdir()

    def close(self) -> None:
        """Give up the folder's lock (a store that was never opened holds none)."""
        if self.lock is not None:
            release(self.lock)
            self.lock = None

    def run_dir(self, run_id: str) -> Path:
        return self.runs / run_id

    def open(self, plan: Plan, command: list[str], resume: bool) -> None:
        """Start a new batch in OUT, or (``resume``) take up the same experiment's batch found there."""

        def changed(held: dict[str, Any]) -> None:
            _refuse_changed_posterior(self.out, held, plan)
            raise StoreError(
                f"{self.out}: holds a batch of a different experiment (the experiment or its world changed "
                "since it started); choose another --out (nothing was overwritten)"
            )

        def write_record() -> None:
            self.runs.mkdir(parents=True, exist_ok=True)
            calibration = {"calibration": plan.posterior.record()} if plan.posterior is not None else {}
            write_json(
                {
                    "experiment": plan.spec.model_dump(mode="json"),
                    "experiment_file": str(plan.source),
                    "experiment_sha256": plan.digest(),
                    "world_file": str(plan.world_path),
                    "world_sha256": plan.world_sha256,
                    "factors": [_factor_record(f) for f in plan.factors],
                    "design": plan.design_table(),
                    "seeds": list(plan.seeds),
                    "runs": plan.total_runs,
                    "packages": package_versions(),
                    "command": command,
                    **calibration,
                },
                self.out / EXPERIMENT_FILE,
            )
            self.started = True

        created = [p for p in (self.out, self.runs) if not p.exists()]
        # Taken up, the lock is held before tidying: a second writer must not tidy the first's runs away.
        self.lock, taken_up = open_output(self.out, EXPERIMENT_FILE, "batch", resume, StoreError,
                                          ("experiment_sha256", plan.digest()), write_record, changed)
        if taken_up:
            self._tidy()
        else:
            self.created = created

    def _tidy(self) -> None:
        """Before resuming: partial runs are redone from scratch, and so are failed ones."""
        self.runs.mkdir(parents=True, exist_ok=True)
        for entry in self.runs.iterdir():
            if entry.name.startswith(".") and entry.is_dir():
                shutil.rmtree(entry)
        if self.failed.is_dir():
            shutil.rmtree(self.failed)

    def complete(self, plan: Plan) -> set[str]:
        """Run ids of the plan whose run directories are complete and whole (sizes and SHA-256 as recorded).

        A damaged run (a file cut short, missing or changed) is removed, so the batch runs it again;
        ``self.damaged`` keeps what was wrong with each.
        """
        done = set()
        self.damaged = []
        for spec in plan.runs():
            run_dir = self.run_dir(spec.run_id)
            if not (run_dir / SUMMARY_FILE).is_file():
                continue
            problem = damage(run_dir)
            if problem is None:
                done.add(spec.run_id)
            else:
                self.damaged.append(problem)
                shutil.rmtree(run_dir)  # inside this batch's runs/: the tool's own, and redone next
        return done

    def record_failure(self, spec: RunSpec, error: str, trace: str) -> None:
        """Keep a failed run's error until the batch is rebuilt (or the run is redone)."""
        write_json(
            {
                "run_id": spec.run_id,
                "point": spec.point,
                "replication": spec.replication,
                "seed": spec.seed,
                "error": error,
                "traceback": trace,
            },
            self.failed / f"{spec.run_id}.json",
        )

    def rebuild(self, plan: Plan, extensions: Sequence[SummaryExtension] = ()) -> tuple[pd.DataFrame, pd.DataFrame]:
        """Write summary.parquet and failures.parquet from the run directories; return both tables.

        Each of ``extensions`` adds columns computed from a run directory to that run's row.
        """
        for entry in self.runs.iterdir() if self.runs.is_dir() else ():
            if entry.name.startswith(".") and entry.is_dir():
                shutil.rmtree(entry)  # left by a run that raised while writing
        summary_rows: list[dict[str, Any]] = []
        failure_rows: list[dict[str, Any]] = []
        for spec in plan.runs():
            run_dir = self.run_dir(spec.run_id)
            if is_complete(run_dir):
                summary_rows.append(_summary_row(spec, plan, run_dir, extensions))
            elif (self.failed / f"{spec.run_id}.json").is_file():
                failure_rows.append(json.loads((self.failed / f"{spec.run_id}.json").read_text(encoding="utf-8")))
        summary = _summary_frame(summary_rows, plan)
        failures = pd.DataFrame(failure_rows, columns=list(FAILURE_COLUMNS)).astype(FAILURE_COLUMNS)
        write_parquet(summary, self.out / SUMMARY_TABLE, "batch/summary")
        write_parquet(failures, self.out / FAILURES_TABLE, "batch/failures")
        return summary, failures


def _refuse_changed_posterior(out: Path, held: Mapping[str, Any], plan: Plan) -> None:
    """Name the posterior when it is what changed: the experiment file itself may be untouched."""
    before = (held.get("calibration") or {}).get("posterior_sha256")
    if before is not None and plan.posterior is not None and before != plan.posterior.sha256:
        raise StoreError(
            f"{out}: holds a batch whose unknowns came from a different posterior (calibration "
            f"{plan.posterior.folder} changed since the batch started); choose another --out (nothing was overwritten)"
        )


def _factor_record(factor: PlannedFactor) -> dict[str, Any]:
    record: dict[str, Any] = {"label": factor.label, "key": factor.key, "path": factor.path}
    if factor.levels:
        record["levels"] = [level.label for level in factor.levels]
        record["baseline"] = None if factor.baseline is None else factor.levels[factor.baseline].label
    else:
        record["range"] = [factor.low, factor.high]
    return record


def _summary_row(spec: RunSpec, plan: Plan, run_dir: Path, extensions: Sequence[SummaryExtension]) -> dict[str, Any]:
    summary = json.loads((run_dir / SUMMARY_FILE).read_text(encoding="utf-8"))
    manifest = json.loads((run_dir / "manifest.json").read_text(encoding="utf-8"))
    row: dict[str, Any] = {"run_id": spec.run_id, "point": spec.point, "replication": spec.replication}
    row.update(plan.points[spec.point].values)
    row["seed"] = int(manifest["seed"])  # as the run recorded it
    if plan.posterior is not None:
        row.update(plan.posterior.run_values(spec.replication))
    row.update({key: value for key, value in summary.items() if key != "sources"})
    for extension in extensions:
        row.update(extension(run_dir))
    return row


def _figure_order(keys: set[str]) -> list[str]:
    known = ["days", "warmup_days", *SUMMARY_SOURCES]
    return [k for k in known if k in keys] + sorted(keys - set(known))


def _factor_dtype(factor: PlannedFactor) -> str:
    """One column type per factor, whatever values its levels take."""
    if not factor.levels:
        return "int64" if factor.integer else "float64"
    labels = [level.label for level in factor.levels]
    if all(isinstance(v, bool) for v in labels):
        return "bool"
    if any(isinstance(v, bool) for v in labels):
        return "string"
    if all(isinstance(v, int) for v in labels):
        return "int64"
    if all(isinstance(v, (int, float)) for v in labels):
        return "float64"
    return "string"


def _summary_frame(rows: list[dict[str, Any]], plan: Plan) -> pd.DataFrame:
    labels = [f.label for f in plan.factors]
    types: dict[str, str] = {"run_id": "string", "point": "int64", "replication": "int64", "seed": "int64"}
    drawn = [DRAW_COLUMN, *(u.label for u in plan.posterior.unknowns)] if plan.posterior is not None else []
    types.update({column: "int64" if column == DRAW_COLUMN else "float64" for column in drawn})
    fixed = [*RUN_COLUMNS, *labels, "seed", *drawn]
    extra = set().union(*(row.keys() for row in rows)) - set(fixed) if rows else set()
    frame = pd.DataFrame(rows, columns=fixed + _figure_order(extra))
    for factor in plan.factors:
        types[factor.label] = _factor_dtype(factor)
        if types[factor.label] == "string":
            frame[factor.label] = [v if isinstance(v, str) else json.dumps(v) for v in frame[factor.label]]
    for column in frame.columns[len(fixed) :]:
        present = [v for v in frame[column] if v is not None]
        if all(isinstance(v, int) and not isinstance(v, bool) for v in present) and len(present) == len(frame):
            types[column] = "int64"
        elif all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in present):
            types[column] = "float64"
    return frame.astype(types)
