"""The port model as a policy search's evaluator: candidates as changed worlds, replications as runs."""

from __future__ import annotations

import json
import math
import sys
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ...experiment.executors import Executor
from ...experiment.journal import Journal
from ...experiment.worker import SUMMARY_FILE, RunTask, is_complete
from ...records import METHODS_FILE, RecordBook, write_json
from ...world import WorldFileError, parse_world
from ...world.paths import PathProblem, apply_changes
from .problem import FIGURES, candidate_id

SIMULATIONS_TABLE = "search/simulations"


class ModelEvaluator:
    """Candidates as changed worlds, replications as runs through a batch executor (entered by the caller).

    A run is lean by default: its worker sends back the run's :data:`FIGURES` and the journal in ``OUT`` keeps
    them (:mod:`abm.experiment.journal`); with ``keep_runs`` it also leaves its run directory in
    ``OUT/runs/<candidate id>/<seed>``. A run found in the journal, or kept complete, is not run again. A
    candidate whose changed world is invalid gives NaN figures (the search counts it infeasible).
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
        keep_runs: bool = False,
    ) -> None:
        self.world = dict(world)
        self.world_sha256 = world_sha256
        self.days, self.warmup = days, warmup
        self.out = Path(out)
        self.executor = executor
        self.command = tuple(command)
        self.keep_runs = keep_runs
        self.journal = Journal(self.out, SIMULATIONS_TABLE, "run")
        self.ran = 0
        self.reused = 0
        self.invalid: dict[str, str] = {}  # candidate id -> why its world is invalid

    def run_dir(self, cid: str, seed: int) -> Path:
        return self.out / "runs" / cid / str(seed)

    def __call__(self, candidates: Sequence[Mapping[str, Any]], seeds: Sequence[int]) -> np.ndarray:
        out = np.full((len(candidates), len(seeds), len(self.figures)), np.nan)
        held = self.journal.rows()
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
                key = f"{cid}/{seed}"
                where[key] = (k, r)
                run_dir = self.run_dir(cid, seed)
                if key in held:
                    self.reused += 1
                    continue
                if self.keep_runs and is_complete(run_dir):
                    self.journal.add(self._row(key, cid, seed, run_figures(
                        json.loads((run_dir / SUMMARY_FILE).read_text(encoding="utf-8")),
                        pd.read_parquet(run_dir / METHODS_FILE, columns=["day", "check_minutes"]), self.warmup)))
                    self.reused += 1
                    continue
                if self.keep_runs:
                    run_dir.parent.mkdir(parents=True, exist_ok=True)
                tasks.append(
                    RunTask(
                        run_id=key,
                        point=k,
                        replication=r,
                        seed=int(seed),
                        days=self.days,
                        warmup=self.warmup,
                        world=world,
                        world_sha256=self.world_sha256,
                        out=str(run_dir.resolve()) if self.keep_runs else "",
                        command=self.command,
                        values={path: value for path, value in changes.items() if isinstance(value, (int, float, str))},
                        reduce=SearchFigures(self.warmup),
                    )
                )
        for answer in self.executor.imap(tasks):
            if answer["ok"]:
                self.ran += 1
                cid, seed = answer["run_id"].rsplit("/", 1)
                self.journal.add(self._row(answer["run_id"], cid, int(seed), answer["reduced"]))
            else:
                print(f"policy search: run {answer['run_id']} failed: {answer['error']}", file=sys.stderr)
        self.journal.end_round()
        rows = self.journal.rows()
        for key, (k, r) in where.items():
            if key in rows:
                out[k, r] = [float(rows[key][figure]) for figure in self.figures]
        return out

    def _row(self, key: str, cid: str, seed: int, figures: Sequence[float]) -> dict[str, Any]:
        return {"run": key, "candidate": cid, "seed": int(seed), **dict(zip(self.figures, map(float, figures),
                                                                             strict=True))}


@dataclass(frozen=True)
class SearchFigures:
    """What a worker computes from a candidate's run in memory: the run's :data:`FIGURES`."""

    warmup: int

    def __call__(self, records: RecordBook, summary: Mapping[str, Any]) -> list[float]:
        return run_figures(summary, records.methods_table(), self.warmup)


def run_figures(summary: Mapping[str, Any], methods: pd.DataFrame, warmup: int) -> list[float]:
    """A run's :data:`FIGURES` from its summary and methods table: the summary's numbers, check hours after the
    warm-up and encounters."""
    derived = {
        "check_hours": float(methods.loc[methods["day"] >= warmup, "check_minutes"].sum()) / 60.0,
        "encounters": float(summary["detections"]) + float(summary["interdictions"]),
    }
    values = []
    for figure in FIGURES:
        value = derived[figure] if figure in derived else summary.get(figure)
        values.append(float(value) if isinstance(value, (int, float)) and not isinstance(value, bool) else math.nan)
    return values
