"""Benchmark of batches: executors against each other, and what the store costs per run.

    .venv/bin/python bench/batch.py [--runs 200] [--days 30] [--workers 2]

The same batch (the demo world, two policies, common random numbers) runs
in a local process pool and on a local Dask cluster; serially it runs in
rounds that alternate with doing the same runs directly with
``run_to_directory`` in a loop, without the store. The pool and the cluster
run the whole batch twice each, in the order pool, cluster, (serial rounds),
cluster, pool, so that a machine whose speed drifts during the sitting (a
shared virtual machine drifts by tens of per cent) weighs on all three alike;
each is reported as the mean of its two. Reported, as ratios measured in this one sitting:

- processes vs serial: speed-up (target >= 1.8x with 2 workers);
- Dask vs processes: wall-time ratio (target within 15%);
- the store's overhead per run: batch time per run over the direct loop's,
  both serial (target under 5% of run time), in wall time and in CPU time
  (the second is little moved by other work on the machine).

Wall times include starting the pool or cluster, as a user waits for them.
"""

from __future__ import annotations

import argparse
import os
import shutil
import tempfile
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parent.parent
DEMO_WORLD = ROOT / "worlds" / "kestrel_quay" / "world.yaml"
ROUNDS = 20  # the serial runs come in this many alternating rounds of the direct loop and the batch (short
# rounds: a shared machine drifts in speed within seconds, and alternation only cancels drift slower than a round)


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


def timed_batch(path: Path, out: Path, executor: str, workers: int | None) -> tuple[float, float]:
    """Wall time and this process's CPU time of one batch."""
    from abm.experiment.batch import run_batch

    start, cpu = time.perf_counter(), time.process_time()
    result = run_batch(path, out, executor=executor, workers=workers, show_progress=False)
    elapsed = time.perf_counter() - start, time.process_time() - cpu
    assert result.failed == 0, result.failures
    return elapsed


def timed_direct(path: Path, out: Path) -> tuple[float, float]:
    """The same runs without the store (each point's world built once), in wall and CPU time."""
    from abm.experiment.design import load_plan
    from abm.experiment.single import run_to_directory
    from abm.world import parse_world

    plan = load_plan(path)
    worlds = {p.index: parse_world(plan.world_for(p.index)) for p in plan.points}
    out.mkdir(parents=True)
    start, cpu = time.perf_counter(), time.process_time()
    for spec in plan.runs():
        run_to_directory(worlds[spec.point], plan.world_sha256, plan.spec.days, spec.seed, out / spec.run_id)
    return time.perf_counter() - start, time.process_time() - cpu


def same_results(folder: Path, per_round: int) -> bool:
    """Processes and Dask agree byte for byte; a serial round agrees with their rows of the same seeds."""
    import pandas as pd

    tables = {name: folder / name / "summary.parquet" for name in ("processes", "dask", "serial0")}
    if tables["processes"].read_bytes() != tables["dask"].read_bytes():
        return False
    # replication seeds are a prefix property of the root seed: the round's r-th replication is the whole's r-th
    whole = pd.read_parquet(tables["processes"])
    serial = pd.read_parquet(tables["serial0"])
    rows = whole[whole["replication"] < per_round // 2].reset_index(drop=True)
    return rows.equals(serial)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=200)
    parser.add_argument("--days", type=int, default=30)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()

    folder = Path(tempfile.mkdtemp(prefix="undertow-bench-"))
    try:
        runs = 2 * ROUNDS * (args.runs // (2 * ROUNDS))
        for name in ("whole", "round", "warm"):
            (folder / name).mkdir()
        whole = write_experiment(folder / "whole", runs, args.days)
        part = write_experiment(folder / "round", runs // ROUNDS, args.days)
        # compiled code and file caches warm before anything is timed
        timed_direct(write_experiment(folder / "warm", 2, args.days), folder / "warm-out")
        pooled = {"processes": [], "dask": []}
        for name in ("processes", "dask"):
            pooled[name].append(timed_batch(whole, folder / f"{name}-a", name, args.workers)[0])
        # Direct loop and serial batch alternate, round by round, so drifting load on the machine falls on both.
        direct = direct_cpu = serial = serial_cpu = 0.0
        for r in range(ROUNDS):
            for kind in ("direct", "serial") if r % 2 == 0 else ("serial", "direct"):
                if kind == "direct":
                    wall, cpu = timed_direct(part, folder / f"direct{r}")
                    direct, direct_cpu = direct + wall, direct_cpu + cpu
                else:
                    wall, cpu = timed_batch(part, folder / f"serial{r}", "serial", None)
                    serial, serial_cpu = serial + wall, serial_cpu + cpu
        for name in ("dask", "processes"):
            pooled[name].append(timed_batch(whole, folder / name, name, args.workers)[0])
        processes, dask = (sum(pooled[name]) / 2 for name in ("processes", "dask"))
        same = same_results(folder, runs // ROUNDS)
        overhead = (serial - direct) / runs
        # Serial work all happens in this process, so its CPU time is a measure other load barely moves.
        overhead_cpu = (serial_cpu - direct_cpu) / runs
        print(f"batch benchmark: {runs} runs of {args.days} days of the demo world, {args.workers} workers")
        print(f"  direct loop (no store)   {direct:8.1f} s   {1000 * direct / runs:7.1f} ms/run")
        print(f"  serial batch             {serial:8.1f} s   {1000 * serial / runs:7.1f} ms/run")
        for name, label in (("processes", "processes batch"), ("dask", "dask local batch")):
            first, second = pooled[name]
            print(f"  {label:24s} {(first + second) / 2:8.1f} s   (first {first:.1f} s, second {second:.1f} s)")
        print(f"  processes vs serial      {serial / processes:8.2f}x speed-up   (target >= 1.8x)")
        print(f"  dask vs processes        {dask / processes:8.2f}x wall time  (target <= 1.15x)")
        share = 100 * overhead / (direct / runs)
        print(f"  store overhead per run   {1000 * overhead:8.1f} ms = {share:.1f}% of run time   (target < 5%)")
        share_cpu = 100 * overhead_cpu / (direct_cpu / runs)
        print(f"    same in CPU time       {1000 * overhead_cpu:8.1f} ms = {share_cpu:.1f}% of run CPU time")
        print(f"  summary tables identical across executors: {same}")
        # Other work on the machine skews every ratio: say how busy it was.
        print(f"  load average at the end (1, 5, 15 min): {', '.join(f'{x:.2f}' for x in os.getloadavg())}")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
