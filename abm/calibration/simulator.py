"""The port model as an ABC simulator, and the calibration store.

:class:`ModelSimulator` is a :class:`~abm.calibration.abc.simulation.BatchSimulator`:
each parameter row becomes a candidate world (the priors' paths set), each
simulation a :class:`~abm.experiment.worker.RunTask` for the batch executors,
labelled ``<stage>/p<i>`` (``gen-<k>/p<i>``, ``predictive/p<i>``). A candidate
is lean by default: its worker computes the candidate's summaries (from its
observed tables, the same statistics as the target's) and latent quantities
(crossings and totals, from its own truth: candidate runs are the
calibration's own, so that is allowed) in memory and sends back only those
numbers, which the stage's journal keeps (:mod:`abm.experiment.journal`).
With ``keep_runs`` each candidate also leaves its run directory
``OUT/<label>``, as an ordinary run.

A simulation already in the journal with the same parameters, seed and
summary statistics is not run again, which is how ``--resume`` skips finished
simulations, also after a change of settings that leaves the draws alone
(accept share, more draws: the prior is sampled row by row). A kept run
directory of the same parameters and seed also serves after the summary
statistics changed: its summaries are computed again from its records.

Layout of ``OUT``::

    calibration.json          the calibration, its digest, the observed summaries, package versions, the command
    gen-<k>/simulations.parquet  every simulation of generation k: label, seed, parameters, summaries, latent
                              quantities (simulations.jsonl while a round of them is under way)
    gen-<k>/particles.parquet the particles kept in generation k: parameters, latent quantities, weight,
                              distance, run label and summaries (and unadjusted values, for rejection)
    gen-<k>/generation.json   tolerance, simulations, the distance's scale and the settings' digest
    gen-0/reference.parquet   every prior draw of generation 0 with its summaries and latent quantities
                              (what rejection ABC and the self-check read)
    predictive/simulations.parquet  the posterior predictive runs
    gen-<k>/p<i>/, predictive/p<i>/  with --keep-runs: one run directory per simulation
    posterior.parquet, posterior_summary.parquet, diagnostics.parquet, predictive_check.parquet,
    self_check.parquet, summary.txt, figures/*.png
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import shutil
from collections.abc import Callable, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError
from ..experiment.executors import Executor
from ..experiment.journal import Journal, same_numbers
from ..experiment.lock import release
from ..experiment.out_folder import open_output
from ..experiment.single import package_versions
from ..experiment.worker import SUMMARY_FILE, RunTask, is_complete
from ..observed import OBSERVED_DIR, conform
from ..progress import progress
from ..records import RecordBook, write_json, write_parquet
from .abc.posterior import Generation, ReferenceTable
from .abc.simulation import Simulated
from .config import LATENT, CalibrationPlan
from .summaries import SummarySpec

HEADER = "calibration.json"
PARTICLES = "particles.parquet"
GENERATION = "generation.json"
REFERENCE = "reference.parquet"
MANIFEST_FILE = "manifest.json"
SIMULATIONS_TABLE = "calibration/generation/simulations"
SUMMARIES_KEY = "summaries_sha256"


class CalibrationStoreError(InputError):
    """An output folder that cannot take this calibration."""


class CandidateRunFailed(InputError):
    """A candidate run raised; the calibration cannot go on without it."""


@dataclasses.dataclass(frozen=True)
class CandidateFigures:
    """What a worker computes from a candidate run in memory: its summary statistics and latent quantities."""

    spec: SummarySpec
    warmup: int

    def __call__(self, records: RecordBook, summary: Mapping[str, Any]) -> dict[str, list[float]]:
        observed = records.observed_tables(tables_read(self.spec))  # only what the summaries read
        return {"summaries": candidate_summaries(self.spec, observed.__getitem__, self.warmup),
                "latent": latent_of(summary)}


def tables_read(spec: SummarySpec) -> tuple[str, ...]:
    """The observed tables a candidate's summaries are computed from."""
    return ("encounters", "checks") if spec.needs_checks() else ("encounters",)


def candidate_summaries(spec: SummarySpec, table: Callable[[str], pd.DataFrame], warmup: int) -> list[float]:
    """A candidate's summaries from the observed tables ``table(name)`` gives, in the schema's dtypes (in memory,
    or read back and conformed from its run directory), computed as for the observed records calibrated to."""
    return [float(v) for v in spec.compute({name: table(name) for name in tables_read(spec)}, warmup)]


def latent_of(summary: Mapping[str, Any]) -> list[float]:
    """A candidate run's latent quantities, from its summary (NaN where it has none)."""
    return [float(summary[key]) if summary.get(key) is not None else float("nan") for key in LATENT]


class ModelSimulator:
    """Candidate runs through a batch executor (entered by the caller), kept in each stage's journal."""

    def __init__(
        self, plan: CalibrationPlan, out: Path, executor: Executor, command: Sequence[str] = (), keep_runs: bool = False
    ) -> None:
        self.plan = plan
        self.out = Path(out)
        self.executor = executor
        self.command = tuple(command)
        self.keep_runs = keep_runs
        self.figures = CandidateFigures(plan.summary_spec, plan.spec.warmup_days)
        self.summaries_sha256 = hashlib.sha256(
            json.dumps([dataclasses.asdict(plan.summary_spec), plan.spec.warmup_days], sort_keys=True).encode()
        ).hexdigest()
        self.ran = 0  # simulations run by this process
        self.reused = 0  # simulations found finished in the store

    def _values(self, theta: np.ndarray) -> dict[str, float]:
        return {name: float(v) for name, v in zip(self.plan.priors.names, theta, strict=True)}

    def _task(self, theta: np.ndarray, seed: int, label: str, index: int) -> RunTask:
        spec = self.plan.spec
        return RunTask(
            run_id=label,
            point=index,
            replication=0,
            seed=int(seed),
            days=spec.days,
            warmup=spec.warmup_days,
            world=self.plan.world_for(theta),
            world_sha256=self.plan.world_sha256,
            out=str((self.out / label).resolve()) if self.keep_runs else "",
            command=self.command,
            values=self._values(theta),
            reduce=self.figures,
        )

    def __call__(self, theta: np.ndarray, seeds: np.ndarray, labels: Sequence[str]) -> Simulated:
        journal = Journal(self.out / labels[0].split("/")[0], SIMULATIONS_TABLE, "simulation")
        held = journal.rows()
        todo = []
        for i, label in enumerate(labels):
            row = held.get(label)
            if row is not None and row.get(SUMMARIES_KEY) == self.summaries_sha256 and self._same(row, theta[i], seeds[i]):
                continue
            if self.keep_runs and self._reusable(self.out / label, theta[i], seeds[i]):
                journal.add(self._row(label, theta[i], seeds[i], self.figures_from_directory(self.out / label)))
                continue
            todo.append(i)
        failures = []
        if todo:
            for folder in {(self.out / labels[i]).parent for i in todo}:
                folder.mkdir(parents=True, exist_ok=True)
            tasks = (self._task(theta[i], seeds[i], labels[i], i) for i in todo)
            where = {labels[i]: i for i in todo}
            with progress(len(todo), "runs", f"candidate runs ({journal.folder.name})") as bar:
                for answer in self.executor.imap(tasks):
                    bar.update(1)
                    if answer["ok"]:
                        i = where[answer["run_id"]]
                        journal.add(self._row(labels[i], theta[i], seeds[i], answer["reduced"]))
                    else:
                        failures.append(f"{answer['run_id']}: {answer['error']}")
        journal.end_round()
        self.ran += len(todo) - len(failures)
        self.reused += len(labels) - len(todo)
        if failures:
            raise CandidateRunFailed(
                f"{len(failures)} candidate run(s) failed, first {sorted(failures)[0]}; fix the cause and rerun with "
                "--resume (finished runs are kept)"
            )
        rows = journal.rows()
        names = [f"summary:{name}" for name in self.plan.summary_spec.names()]
        summaries = np.array([[float(rows[label][n]) for n in names] for label in labels], dtype=float)
        latent = np.array([[float(rows[label][k]) for k in LATENT] for label in labels], dtype=float)
        return Simulated(summaries.reshape(len(labels), len(names)), latent)

    def _same(self, row: Mapping[str, Any], theta: np.ndarray, seed: int) -> bool:
        return int(row["seed"]) == int(seed) and same_numbers(row, self._values(theta))

    def _row(self, label: str, theta: np.ndarray, seed: int, figures: Mapping[str, list[float]]) -> dict[str, Any]:
        """A journal row: label, seed, parameters, latent quantities, summaries and the summaries' digest."""
        row: dict[str, Any] = {"simulation": label, "seed": int(seed), **self._values(theta)}
        row.update(zip(LATENT, figures["latent"], strict=True))
        row.update(zip((f"summary:{n}" for n in self.plan.summary_spec.names()), figures["summaries"], strict=True))
        row[SUMMARIES_KEY] = self.summaries_sha256
        return row

    def _reusable(self, run_dir: Path, theta: np.ndarray, seed: int) -> bool:
        """A complete run of these very parameters and seed; a run of other ones (settings changed) is removed.

        Removing is safe: the folder is this calibration's own candidate run, and
        a run with the same label but other parameters can never be used again.
        """
        if not is_complete(run_dir):
            return False
        manifest = json.loads((run_dir / MANIFEST_FILE).read_text(encoding="utf-8"))
        held = manifest.get("experiment_run", {}).get("values", {})
        if held == self._values(theta) and manifest.get("seed") == int(seed):
            return True
        shutil.rmtree(run_dir)
        return False

    def figures_from_directory(self, run_dir: Path) -> dict[str, list[float]]:
        """A kept candidate run's figures, read from its run directory."""
        summary = json.loads((run_dir / SUMMARY_FILE).read_text(encoding="utf-8"))
        return {"summaries": candidate_summaries(self.figures.spec,
                                                 lambda name: conform(name, pd.read_parquet(run_dir / OBSERVED_DIR / f"{name}.parquet")),
                                                 self.figures.warmup),
                "latent": latent_of(summary)}


class CalibrationStore:
    """The output folder of one calibration, and the checkpoint of its generations."""

    def __init__(self, out: str | Path, plan: CalibrationPlan) -> None:
        self.out = Path(out)
        self.plan = plan
        self.lock: Path | None = None  # held from open() to close(): one writer per folder

    def close(self) -> None:
        """Give up the folder's lock."""
        if self.lock is not None:
            release(self.lock)
            self.lock = None

    def open(self, command: Sequence[str], resume: bool) -> None:
        """Start a calibration in OUT, or (``resume``) take up the same calibration found there."""

        def changed(held: dict[str, Any]) -> None:
            if held.get("simulation_sha256") != self.plan.simulation_digest():
                raise CalibrationStoreError(
                    f"{self.out}: holds a different calibration (its world, priors, seed or days changed since it "
                    "started, so its runs cannot be reused); choose another --out (nothing was overwritten)"
                )
            # Only settings changed (method, summaries, records, level...): finished runs of unchanged draws
            # are reused, generations made under the old settings are made again.

        self.lock, _ = open_output(self.out, HEADER, "calibration", resume, CalibrationStoreError,
                                   ("calibration_sha256", self.plan.digest()), lambda: self._write_header(command),
                                   changed)

    def _write_header(self, command: Sequence[str]) -> None:
        write_json(
            {
                "calibration": self.plan.spec.model_dump(mode="json"),
                "calibration_file": str(self.plan.source),
                "calibration_sha256": self.plan.digest(),
                "simulation_sha256": self.plan.simulation_digest(),
                "world_file": str(self.plan.world_path),
                "world_sha256": self.plan.world_sha256,
                "observed_path": str(self.plan.observed_path),
                "observed_summaries": dict(zip(self.plan.summary_spec.names(), map(float, self.plan.observed), strict=True)),
                "packages": package_versions(),
                "command": list(command),
            },
            self.out / HEADER,
        )

    # -- the checkpoint (abm.calibration.abc.smc.Checkpoint) -------------------------------------
    def save(self, generation: Generation) -> None:
        """Write a finished generation's particles and settings."""
        folder = self.out / f"gen-{generation.index}"
        if generation.reference is not None:
            write_parquet(reference_frame(self.plan, generation.reference), folder / REFERENCE,
                          "calibration/generation/reference")
        write_parquet(particles_frame(self.plan, generation), folder / PARTICLES, "calibration/generation/particles")
        write_json(
            {
                "index": generation.index,
                "epsilon": generation.epsilon,
                "simulations": generation.simulations,
                "scale": [float(v) for v in generation.scale],
                "calibration_sha256": self.plan.digest(),
            },
            folder / GENERATION,
        )

    def load(self) -> list[Generation]:
        """Finished generations of these very settings, 0, 1, ... up to the first one missing or made otherwise."""
        done: list[Generation] = []
        while True:
            folder = self.out / f"gen-{len(done)}"
            needed = [folder / GENERATION, folder / PARTICLES] + ([folder / REFERENCE] if not done else [])
            if not all(path.is_file() for path in needed):
                return done
            info = json.loads((folder / GENERATION).read_text(encoding="utf-8"))
            if info.get("calibration_sha256") != self.plan.digest():
                return done
            reference = reference_from_frame(self.plan, pd.read_parquet(folder / REFERENCE)) if not done else None
            done.append(generation_from_frame(self.plan, pd.read_parquet(folder / PARTICLES), info, reference))


def particles_frame(plan: CalibrationPlan, generation: Generation) -> pd.DataFrame:
    """One row per particle (column names: parameters, latent quantities, then bookkeeping and summaries)."""
    names = plan.priors.names
    frame = pd.DataFrame(generation.theta, columns=list(names))
    for j, key in enumerate(LATENT):
        frame[key] = generation.latent[:, j]
    frame["weight"] = generation.weights
    frame["distance"] = generation.distances
    frame["simulation"] = list(generation.labels)
    if generation.theta_raw is not None:
        for j, name in enumerate(names):
            frame[f"unadjusted:{name}"] = generation.theta_raw[:, j]
    if generation.latent_raw is not None:
        for j, key in enumerate(LATENT):
            frame[f"unadjusted:{key}"] = generation.latent_raw[:, j]
    for j, name in enumerate(plan.summary_spec.names()):
        frame[f"summary:{name}"] = generation.summaries[:, j]
    return frame


def reference_frame(plan: CalibrationPlan, table: ReferenceTable) -> pd.DataFrame:
    """Every prior draw of generation 0: parameters, latent quantities, run label and summaries."""
    frame = pd.DataFrame(table.theta, columns=list(plan.priors.names))
    for j, key in enumerate(LATENT):
        frame[key] = table.latent[:, j]
    frame["simulation"] = list(table.labels)
    for j, name in enumerate(plan.summary_spec.names()):
        frame[f"summary:{name}"] = table.summaries[:, j]
    return frame


def reference_from_frame(plan: CalibrationPlan, frame: pd.DataFrame) -> ReferenceTable:
    """The inverse of :func:`reference_frame`."""
    return ReferenceTable(
        theta=frame[list(plan.priors.names)].to_numpy(dtype=float),
        summaries=frame[[f"summary:{n}" for n in plan.summary_spec.names()]].to_numpy(dtype=float),
        latent=frame[list(LATENT)].to_numpy(dtype=float),
        labels=tuple(frame["simulation"].astype(str)),
    )


def generation_from_frame(
    plan: CalibrationPlan, frame: pd.DataFrame, info: dict[str, Any], reference: ReferenceTable | None = None
) -> Generation:
    """The inverse of :func:`particles_frame` (with the generation's settings and, for generation 0, its draws)."""
    names = list(plan.priors.names)
    raw = [f"unadjusted:{n}" for n in names]
    raw_latent = [f"unadjusted:{k}" for k in LATENT]
    return Generation(
        index=int(info["index"]),
        epsilon=float(info["epsilon"]),
        simulations=int(info["simulations"]),
        theta=frame[names].to_numpy(dtype=float),
        weights=frame["weight"].to_numpy(dtype=float),
        distances=frame["distance"].to_numpy(dtype=float),
        summaries=frame[[f"summary:{n}" for n in plan.summary_spec.names()]].to_numpy(dtype=float),
        latent=frame[list(LATENT)].to_numpy(dtype=float),
        labels=tuple(frame["simulation"].astype(str)),
        scale=np.asarray(info["scale"], dtype=float),
        theta_raw=frame[raw].to_numpy(dtype=float) if set(raw) <= set(frame.columns) else None,
        latent_raw=frame[raw_latent].to_numpy(dtype=float) if set(raw_latent) <= set(frame.columns) else None,
        reference=reference,
    )
