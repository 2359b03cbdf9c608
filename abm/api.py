"""Undertow from Python: the few calls a notebook needs, each the same work as a command.

Every figure here is a model estimate from a fictional world, not a count of
real people; tables keep truth (the simulated ground truth an agency never
sees) apart from observed records. The shipped example worlds are found with
:func:`example_world`.

>>> import abm
>>> world = abm.load_world(abm.example_world("stonechat_rail"))
>>> world.departures.service
'train'
>>> run = abm.simulate(world, days=3, seed=1)
>>> sorted(run.observed)
['checks', 'encounters', 'false_alarms', 'stations']
>>> run.summary["vehicles"] == int(run.daily["vehicles"].sum())
True
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    import pandas as pd

    from .calibration.run import CalibrationResult
    from .estimate.results import EstimateResult
    from .experiment.batch import BatchResult
    from .port.load import LoadReport
    from .world.schema import World

__all__ = [
    "Estimates", "RunTables", "brief", "calibrate", "estimate_flow", "example_world", "load_report", "load_world",
    "read_run", "run_batch", "simulate", "write_run",
]


def example_world(name: str = "kestrel_quay") -> Path:
    """The world file of a shipped example: kestrel_quay (ferry), stonechat_rail (rail), corran_ridge (border).

    >>> example_world("corran_ridge").name
    'world.yaml'
    """
    from .starter import EXAMPLES, shipped_worlds

    if name not in EXAMPLES:
        raise ValueError(f"no example world '{name}'; the examples are {', '.join(EXAMPLES)}")
    with shipped_worlds() as worlds:  # a real folder for an installed package (not a zip)
        return worlds / name / "world.yaml"


def load_world(path: str | Path) -> World:
    """Read and validate a world file; a bad file raises ``WorldFileError`` naming the file and key.

    >>> load_world(example_world()).name
    'Kestrel Quay freight terminal (fictional)'
    """
    from .world import load_world as load

    return load(Path(path))


def load_report(world: World) -> LoadReport:
    """Whether the world's stations and departures can carry its traffic (``undertow check``'s report).

    >>> load_report(load_world(example_world("stonechat_rail"))).overloaded
    False
    """
    from .port.load import load_report as report

    return report(world)


@dataclass(frozen=True)
class RunTables:
    """One run's tables: ``truth`` and ``observed`` by name, the daily figures and the headline summary."""

    truth: dict[str, pd.DataFrame]
    observed: dict[str, pd.DataFrame]
    daily: pd.DataFrame
    summary: dict[str, Any]
    manifest: dict[str, Any] = field(default_factory=dict)


def simulate(world: World, days: int, seed: int = 0, warmup: int = 0) -> RunTables:
    """Simulate ``warmup`` + ``days`` days in memory (nothing is written); the summary covers the last ``days``.

    >>> run = simulate(load_world(example_world("corran_ridge")), days=2, seed=3)
    >>> run.summary["missed_departure_share"] is None  # a land border has no departures to miss
    True
    """
    from .experiment.single import simulate as run_model
    from .experiment.single import summarise

    book = run_model(world, warmup + days, seed).records
    return RunTables(truth=book.truth_tables(), observed=book.observed_tables(), daily=book.daily_table(),
                     summary=summarise(book, days, warmup), manifest={"seed": seed, "days": days, "warmup": warmup})


def write_run(world: str | Path, out: str | Path, days: int, seed: int = 0, warmup: int = 0) -> Path:
    """Simulate a world file into a new run directory ``out`` (as ``undertow run``); returns ``out``.

    >>> import tempfile
    >>> folder = write_run(example_world("corran_ridge"), Path(tempfile.mkdtemp()) / "run", days=2)
    >>> (folder / "files.json").is_file()
    True
    """
    from .experiment.single import run_to_directory
    from .world import file_hash

    path = Path(world)
    run_to_directory(load_world(path), file_hash(path), days, seed, Path(out), command=["abm.api.write_run"],
                     warmup=warmup)
    return Path(out)


def read_run(run_dir: str | Path) -> RunTables:
    """The tables of a run directory; a damaged run raises an error naming the file.

    >>> import tempfile
    >>> run = read_run(write_run(example_world("corran_ridge"), Path(tempfile.mkdtemp()) / "r", days=2))
    >>> sorted(run.truth)
    ['arrivals', 'attempts', 'exits']
    """
    import json

    import pandas as pd

    from .observed import read_observed
    from .records import read_truth
    from .run_files import require_whole

    folder = Path(run_dir)
    require_whole(folder)
    return RunTables(
        truth=read_truth(folder), observed=read_observed(folder), daily=pd.read_parquet(folder / "daily.parquet"),
        summary=json.loads((folder / "summary.json").read_text(encoding="utf-8")),
        manifest=json.loads((folder / "manifest.json").read_text(encoding="utf-8")),
    )


@dataclass(frozen=True)
class Estimates:
    """The closed-form estimators' results on observed records, and why the others could not run."""

    results: list[EstimateResult]
    cannot_run: list[tuple[str, str]]

    def to_frame(self) -> pd.DataFrame:
        """One row per estimate: method, what it estimates, point, standard error, interval, records used."""
        from .estimate.report import results_frame

        return results_frame(self.results)


def estimate_flow(records: str | Path | RunTables, window: tuple[int, int] | None = None, level: float = 0.9,
                  sensitivities: Mapping[str, tuple[float, float]] | None = None) -> Estimates:
    """Estimate the unobserved flow from observed records alone: a run directory, an agency's folder of
    observed tables (docs/observed_records.md), or a run in memory (its observed tables only). As
    ``undertow estimate``; named apart from the package :mod:`abm.estimate`, whose name it would share.

    >>> found = estimate_flow(simulate(load_world(example_world()), days=14, seed=2))
    >>> "Chao (1987) lower bound" in set(found.to_frame()["method"])
    True
    """
    from .estimate.report import run_all
    from .observed import conform, read_records

    if isinstance(records, RunTables):
        observed = {name: conform(name, table) for name, table in records.observed.items()}
    else:
        observed = read_records(records)
    results, failures = run_all(observed, window, level, dict(sensitivities) if sensitivities else None, isolate=True)
    return Estimates(results, failures)


def run_batch(experiment: str | Path, out: str | Path, executor: str = "serial", workers: int | None = None,
              scheduler: str | None = None, resume: bool = False, shared_output: bool = False) -> BatchResult:
    """Run every run of an experiment file into a batch folder (as ``undertow batch``; ``shared_output`` as its
    ``--shared-output``)."""
    from .experiment.batch import run_batch as run

    return run(experiment, out, "dask" if scheduler else executor, workers, scheduler, resume, ["abm.api.run_batch"], show_progress=False,
               shared_output=shared_output)


def calibrate(calibration: str | Path, out: str | Path, executor: str = "serial", workers: int | None = None,
              resume: bool = False, scheduler: str | None = None, shared_output: bool = False,
              keep_runs: bool = False) -> CalibrationResult:
    """Fit a calibration file's unknowns to its observed records (as ``undertow calibrate``; ``shared_output`` and
    ``keep_runs`` as its ``--shared-output`` and ``--keep-runs``)."""
    from .calibration.config import load_calibration
    from .calibration.run import run_calibration
    from .experiment.executors import make_executor

    plan = load_calibration(calibration, out=Path(out))
    with make_executor("dask" if scheduler else executor, workers, scheduler, shared_output=shared_output) as pool:
        return run_calibration(plan, out, pool, resume, ["abm.api.calibrate"], keep_runs=keep_runs)


def brief(folder: str | Path, formats: Sequence[str] = ("html", "md")) -> dict[str, Path]:
    """Write the briefing of a batch folder, or the report of one run directory; returns the files written."""
    from .experiment.store import EXPERIMENT_FILE

    if (Path(folder) / EXPERIMENT_FILE).is_file():
        from .report.briefing import brief as brief_batch

        return brief_batch(folder, formats=formats, argv=["abm.api.brief"])[1]
    from .report.run_report import brief_run

    return brief_run(folder, formats, ["abm.api.brief"])[1]
