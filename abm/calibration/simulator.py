"""The port model as an ABC simulator, and the calibration store.

:class:`ModelSimulator` is a :class:`~abm.calibration.abc.BatchSimulator`:
each parameter row becomes a candidate world (the priors' paths set), each
simulation a :class:`~abm.experiment.worker.RunTask` for the batch executors,
each run a run directory ``OUT/<label>`` (``OUT/gen-<k>/p<i>``,
``OUT/predictive/p<i>``). A run directory that is already complete, with the
same parameters and seed in its manifest, is not run again, which is how
``--resume`` skips finished simulations, also after a change of settings that
leaves the draws alone (summaries, accept share, more draws: the prior is
sampled row by row). The summaries of
a candidate come from its ``observed/`` tables, like those of the target; its
latent quantities (crossings and totals) from its own summary, which reads its
truth: candidate runs are the calibration's own, so that is allowed.

Layout of ``OUT``::

    calibration.json          the calibration, its digest, the observed summaries, package versions, the command
    gen-<k>/p<i>/             one run directory per simulation of generation k
    gen-<k>/particles.parquet the particles kept in generation k: parameters, latent quantities, weight,
                              distance, run label and summaries (and unadjusted values, for rejection)
    gen-<k>/generation.json   tolerance, simulations, the distance's scale and the settings' digest
    gen-0/reference.parquet   every prior draw of generation 0 with its summaries and latent quantities
                              (what rejection ABC and the self-check read)
    predictive/p<i>/          the posterior predictive runs
    posterior.parquet, posterior_summary.parquet, diagnostics.parquet, predictive_check.parquet,
    self_check.parquet, summary.txt, figures/*.png
"""

from __future__ import annotations

import json
import shutil
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import InputError
from ..experiment.executors import Executor
from ..experiment.lock import acquire, release
from ..experiment.out_folder import held_record
from ..experiment.single import package_versions
from ..experiment.worker import SUMMARY_FILE, RunTask, is_complete
from ..observed import OBSERVED_DIR, conform
from ..progress import progress
from ..records import write_json, write_parquet
from .abc import Generation, ReferenceTable, Simulated
from .config import LATENT, CalibrationPlan

HEADER = "calibration.json"
PARTICLES = "particles.parquet"
GENERATION = "generation.json"
REFERENCE = "reference.parquet"
MANIFEST_FILE = "manifest.json"


class CalibrationStoreError(InputError):
    """An output folder that cannot take this calibration."""


class CandidateRunFailed(InputError):
    """A candidate run raised; the calibration cannot go on without it."""


class ModelSimulator:
    """Candidate runs through a batch executor (entered by the caller), one run directory each."""

    def __init__(self, plan: CalibrationPlan, out: Path, executor: Executor, command: Sequence[str] = ()) -> None:
        self.plan = plan
        self.out = Path(out)
        self.executor = executor
        self.command = tuple(command)
        self.ran = 0  # simulations run by this process
        self.reused = 0  # simulations found complete in the store

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
            out=str((self.out / label).resolve()),
            command=self.command,
            values={name: float(v) for name, v in zip(self.plan.priors.names, theta, strict=True)},
        )

    def __call__(self, theta: np.ndarray, seeds: np.ndarray, labels: Sequence[str]) -> Simulated:
        dirs = [self.out / label for label in labels]
        index = {label: i for i, label in enumerate(labels)}
        todo = [i for i, d in enumerate(dirs) if not self._reusable(d, theta[i], seeds[i])]
        for folder in {dirs[i].parent for i in todo}:
            folder.mkdir(parents=True, exist_ok=True)
        summaries: list[np.ndarray | None] = [None] * len(labels)
        failures = []
        if todo:
            tasks = (self._task(theta[i], seeds[i], labels[i], i) for i in todo)
            stage = labels[0].split("/")[0]
            with progress(len(todo), "runs", f"candidate runs ({stage})") as bar:
                for answer in self.executor.imap(tasks):
                    bar.update(1)
                    self._take(answer, index, dirs, summaries, failures)
        self.ran += len(todo) - len(failures)
        self.reused += len(labels) - len(todo)
        if failures:
            raise CandidateRunFailed(
                f"{len(failures)} candidate run(s) failed, first {sorted(failures)[0]}; fix the cause and rerun with "
                "--resume (finished runs are kept)"
            )
        rows = [row if row is not None else self._summaries(d) for row, d in zip(summaries, dirs, strict=True)]
        latent = np.array([[_figure(d, key) for key in LATENT] for d in dirs], dtype=float)
        return Simulated(np.vstack(rows), latent)

    def _take(
        self,
        answer: dict[str, Any],
        index: dict[str, int],
        dirs: list[Path],
        summaries: list[np.ndarray | None],
        failures: list[str],
    ) -> None:
        """Read a finished run as it comes back, while the workers go on with the others."""
        if answer["ok"]:
            i = index[answer["run_id"]]
            summaries[i] = self._summaries(dirs[i])
        else:
            failures.append(f"{answer['run_id']}: {answer['error']}")

    def _reusable(self, run_dir: Path, theta: np.ndarray, seed: int) -> bool:
        """A complete run of these very parameters and seed; a run of other ones (settings changed) is removed.

        Removing is safe: the folder is this calibration's own candidate run, and
        a run with the same label but other parameters can never be used again.
        """
        if not is_complete(run_dir):
            return False
        manifest = json.loads((run_dir / MANIFEST_FILE).read_text(encoding="utf-8"))
        held = manifest.get("experiment_run", {}).get("values", {})
        wanted = {name: float(v) for name, v in zip(self.plan.priors.names, theta, strict=True)}
        if held == wanted and manifest.get("seed") == int(seed):
            return True
        shutil.rmtree(run_dir)
        return False

    def _summaries(self, run_dir: Path) -> np.ndarray:
        """A candidate run's summaries, from the observed tables they need (the same statistics as the target's)."""
        spec = self.plan.summary_spec
        names = ("encounters", "checks") if spec.needs_checks() else ("encounters",)
        tables = {name: conform(name, pd.read_parquet(run_dir / OBSERVED_DIR / f"{name}.parquet")) for name in names}
        return spec.compute(tables, self.plan.spec.warmup_days)


def _figure(run_dir: Path, key: str) -> float:
    summary = json.loads((run_dir / SUMMARY_FILE).read_text(encoding="utf-8"))
    value = summary.get(key)
    return float(value) if value is not None else float("nan")


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
        held = held_record(self.out, HEADER, "calibration", resume, CalibrationStoreError)
        if held is not None:
            if held.get("calibration_sha256") == self.plan.digest():
                self.lock = acquire(self.out)
                return
            if held.get("simulation_sha256") != self.plan.simulation_digest():
                raise CalibrationStoreError(
                    f"{self.out}: holds a different calibration (its world, priors, seed or days changed since it "
                    "started, so its runs cannot be reused); choose another --out (nothing was overwritten)"
                )
            # Only settings changed (method, summaries, records, level...): finished runs of unchanged draws
            # are reused, generations made under the old settings are made again.
        self.out.mkdir(parents=True, exist_ok=True)
        self.lock = acquire(self.out)
        self._write_header(command)

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

    # -- the checkpoint (abm.calibration.abc.Checkpoint) -------------------------------------
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
