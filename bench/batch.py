"""Benchmark of batches: executors against each other, and what the store costs per run.

    .venv/bin/python bench/batch.py [--runs 200] [--days 30] [--workers 2]

The same batch (the demo world, two policies, common random numbers) runs as
``undertow batch`` commands, serially, in a local process pool and on a local
Dask cluster, each timed from launch to exit, as a user waits for it: its
imports, starting the pool or cluster, the runs with every estimator's summary
columns (the workers compute them as each run finishes), and the store's
tables. Each executor runs twice, in the order pool, serial, cluster, cluster,
serial, pool, so that a machine whose speed drifts during the sitting (a shared
virtual machine drifts by tens of per cent) weighs on all three alike; each is
reported as the mean of its two. Reported, as ratios measured in this one
sitting:

- processes vs serial: speed-up (target >= 1.8x with 2 workers);
- Dask vs processes: wall-time ratio (target within 15%);
- the store's overhead per run (target under 5% of run time): everything a
  serial batch does besides the runs themselves (building and parsing each
  task's world, the store's bookkeeping, the summary and failure tables,
  validating the experiment), per run, over the time of a run. This batch runs
  in this process, after the commands, so that each run (``run_to_directory``,
  which writes the run directory as a run without a store would, and the
  estimates a worker derives from it right after) is timed inside the same
  batch and drift cancels; in wall and in CPU time.

Timing commands, not ``run_batch`` in this process, matters for the speed-up:
a process that has imported the engine already runs a serial batch without
the imports a serial command pays, while a pool's server still imports it; and
the command line starts that server before its own imports, so both overlap.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parent.parent
DEMO_WORLD = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
UNDERTOW = Path(sys.executable).with_name("undertow")  # the command, installed beside this interpreter
ORDER = ("processes", "serial", "dask", "dask", "serial", "processes")  # symmetric: linear drift weighs alike


def write_experiment(folder: Path, runs: int, days: int) -> Path:
    """Two policies x runs/2 replications of the demo world (numbers illustrative)."""
    data = {
        "kind": "experiment",
        "name": "batch benchmark (illustrative)",
        "world": str(DEMO_WORLD),
        "days": days,
        "replications": runs // 2,
        "seed": 2024,
        "factors": [
            {
                "name": "policy",
                "baseline": "current",
                "levels": [
                    {"name": "current", "set": {}},
                    {"name": "double_imaging", "set": {"stations.gate_imaging.selection.fraction": 0.4}},
                ],
            }
        ],
    }
    path = folder / "experiment.yaml"
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def timed_batch(path: Path, out: Path, extensions=None) -> tuple[float, float]:
    """Wall time and this process's CPU time of one serial batch in this process, with the estimators' summary columns."""
    from abm.analysis.estimator_check.cache import cached_estimates
    from abm.experiment.batch import run_batch

    start, cpu = time.perf_counter(), time.process_time()
    result = run_batch(path, out, executor="serial", show_progress=False,
                       extensions=extensions or (cached_estimates,))  # fmt: skip
    elapsed = time.perf_counter() - start, time.process_time() - cpu
    assert result.failed == 0, result.failures
    return elapsed


def timed_command(path: Path, out: Path, executor: str, workers: int) -> float:
    """Wall time of one ``undertow batch`` command, from launch to exit."""
    command = [str(UNDERTOW), "batch", str(path), "--out", str(out), "--executor", executor]
    if executor != "serial":
        command += ["--workers", str(workers)]
    start = time.perf_counter()
    subprocess.run(command, check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - start


def timed_serial(path: Path, out: Path) -> tuple[float, float, float, float]:
    """A serial batch's wall and CPU time, and the wall and CPU time of its runs themselves.

    A run is its run directory and the estimates derived from it (a worker's whole job); the store
    reading those estimates back into its summary is the store's.
    """
    import abm.experiment.worker as worker
    from abm.analysis.estimator_check.cache import ESTIMATES_CACHE, cached_estimates

    real = worker.run_to_directory
    in_runs = [0.0, 0.0]

    def timed(function, counts=lambda *args: True):
        def wrapper(*args, **kwargs):
            counted = counts(*args)
            start, cpu = time.perf_counter(), time.process_time()
            try:
                return function(*args, **kwargs)
            finally:
                if counted:
                    in_runs[0] += time.perf_counter() - start
                    in_runs[1] += time.process_time() - cpu

        return wrapper

    worker.run_to_directory = timed(real)
    # estimating is the run's work when it computes (the worker, right after the run); a read of the cache is the store's
    estimates = timed(cached_estimates, lambda run_dir: not (Path(run_dir) / ESTIMATES_CACHE).is_file())
    try:
        wall, cpu = timed_batch(path, out, extensions=(estimates,))
    finally:
        worker.run_to_directory = real
    return wall, cpu, in_runs[0], in_runs[1]


def same_results(folder: Path, names: list[str]) -> bool:
    """Every executor's summary table is the same, byte for byte."""
    tables = {(folder / name / "summary.parquet").read_bytes() for name in names}
    return len(tables) == 1


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=200)
    parser.add_argument("--days", type=int, default=30)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()

    if not UNDERTOW.is_file():
        parser.exit(2, f"bench/batch.py: {UNDERTOW}: no undertow command beside this Python; run make install\n")

    folder = Path(tempfile.mkdtemp(prefix="undertow-bench-"))
    try:
        runs = 2 * (args.runs // 2)
        for name in ("whole", "warm"):
            (folder / name).mkdir()
        whole = write_experiment(folder / "whole", runs, args.days)
        # compiled code and file caches warm before anything is timed
        timed_batch(write_experiment(folder / "warm", 2, args.days), folder / "warm-out")
        times: dict[str, list[float]] = {"serial": [], "processes": [], "dask": []}
        outs = []
        for index, name in enumerate(ORDER):
            outs.append(f"{name}-{index}")
            times[name].append(timed_command(whole, folder / outs[-1], name, args.workers))
        serial, processes, dask = (sum(times[name]) / 2 for name in ("serial", "processes", "dask"))
        in_process, in_process_cpu, in_runs, in_runs_cpu = timed_serial(whole, folder / "in-process")
        same = same_results(folder, [*outs, "in-process"])
        overhead, overhead_cpu = (in_process - in_runs) / runs, (in_process_cpu - in_runs_cpu) / runs
        print(f"batch benchmark: {runs} runs of {args.days} days of the demo world, {args.workers} workers")
        print("  undertow batch commands, launch to exit (mean of two; first, second):")
        for name in ("serial", "processes", "dask"):
            first, second = times[name]
            print(f"    --executor {name:10s} {(first + second) / 2:8.1f} s   ({first:.1f} s, {second:.1f} s)")
        print(f"  processes vs serial      {serial / processes:8.2f}x speed-up   (target >= 1.8x)")
        print(f"  dask vs processes        {dask / processes:8.2f}x wall time  (target <= 1.15x)")
        print(f"  serial batch in this process {in_process:6.1f} s   {1000 * in_process / runs:7.1f} ms/run")
        print(f"    of which the runs      {in_runs:8.1f} s   {1000 * in_runs / runs:7.1f} ms/run")
        share = 100 * overhead / (in_runs / runs)
        print(f"  store overhead per run   {1000 * overhead:8.1f} ms = {share:.1f}% of run time   (target < 5%)")
        share_cpu = 100 * overhead_cpu / (in_runs_cpu / runs)
        print(f"    same in CPU time       {1000 * overhead_cpu:8.1f} ms = {share_cpu:.1f}% of run CPU time")
        print(f"  summary tables identical across executors: {same}")
        # Other work on the machine skews every ratio: say how busy it was.
        print(f"  load average at the end (1, 5, 15 min): {', '.join(f'{x:.2f}' for x in os.getloadavg())}")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
