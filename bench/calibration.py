"""Calibration benchmark: candidate simulations per second through ``undertow calibrate``, against bare runs.

Measured in one run, on the same machine, one after another (all on the demo world's shipped calibration,
``worlds/kestrel_quay/calibration.yaml``: 56 days after a 14-day warm-up per candidate):

(a) ``undertow calibrate`` with the shipped calibration cut to ``--draws`` prior draws, no predictive runs and no
    self-check, as a command timed from launch to exit with ``--executor processes --workers W``: its imports,
    the pool, the candidates, the rejection step, its tables and figures.
(b) The same number of bare candidate runs as a command timed the same way: this script started again with
    ``--bare``, which imports the engine, starts the same kind of pool (forkserver, the same workers), and for
    the same prior draws and seeds calls ``simulate()`` and computes the run's summary and the calibration's
    summary statistics in the worker, and nothing else: no journal, no ABC, no tables, no figures.

The two run in the order (b), (a), (a), (b), each reported as the mean of its two, so a steady drift of the
machine's speed falls on both alike. The ratio (simulations per second of (a) over (b)) has the target >= 0.9.

(c) Disk per candidate: the calibration folder of (a) without its figures, over its simulations; and the same for
    a short calibration with ``--keep-runs`` (every candidate's run directory kept), for contrast.
(d) Seconds for the shipped example as it is (1,500 draws, predictive runs and the self-check), through the
    same command. ``--skip-example`` leaves it out (it takes some minutes).

Run: ``.venv/bin/python bench/calibration.py [--draws 300] [--workers 2] [--skip-example]``.
"""

from __future__ import annotations

import argparse
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "abm" / "worlds" / "kestrel_quay"
TARGET_RATIO = 0.9
KEEP_RUNS_DRAWS = 40


def calibration_file(folder: Path, draws: int | None, name: str) -> Path:
    """The shipped calibration with absolute paths; with ``draws``, cut to that many draws and nothing after them."""
    data = yaml.safe_load((EXAMPLE / "calibration.yaml").read_text(encoding="utf-8"))
    data["world"] = str((EXAMPLE / data["world"]).resolve())
    data["observed"]["path"] = str((EXAMPLE / data["observed"]["path"]).resolve())
    if draws is not None:
        data["method"]["draws"] = draws
        data["method"]["accept"] = max(data["method"].get("accept", 0.2), 0.5 if draws < 100 else 0.2)
        data["predictive_runs"] = 0
        data["self_check"] = 0
    path = folder / name
    path.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return path


def timed_command(argv: list[str]) -> float:
    """Seconds from launch to exit of a command (its output discarded; a failure stops the benchmark)."""
    start = time.perf_counter()
    result = subprocess.run(argv, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    if result.returncode != 0:
        sys.exit(f"{' '.join(argv)} failed:\n{result.stderr}")
    return time.perf_counter() - start


def calibrate(path: Path, out: Path, workers: int, *extra: str) -> float:
    undertow = str(Path(sys.executable).with_name("undertow"))  # the console script, as a user starts it
    return timed_command([undertow, "calibrate", str(path), "--out", str(out), "--executor", "processes",
                          "--workers", str(workers), *extra])


def disk_per_candidate(out: Path) -> tuple[float, int]:
    """Bytes of a calibration folder (figures left out) per candidate simulation, and the simulations."""
    import pandas as pd

    stages = [folder for folder in out.iterdir() if folder.is_dir() and folder.name != "figures"]
    size = sum(p.stat().st_size for p in out.rglob("*") if p.is_file() and "figures" not in p.parts)
    simulations = sum(len(pd.read_parquet(folder / "simulations.parquet")) for folder in stages)
    return size / simulations, simulations


# -- (b) the bare runs, in a process of their own -------------------------------------------------
def bare_candidate(task: tuple) -> list[float]:
    """One candidate in a worker: simulate, summarise, and the calibration's summary statistics."""
    from abm.calibration.simulator import candidate_summaries
    from abm.experiment.single import simulate, summarise
    from abm.world import parse_world

    world_data, seed, days, warmup, spec = task
    model = simulate(parse_world(world_data, "bare"), warmup + days, seed)
    summary = summarise(model.records, days, warmup)
    observed = model.records.observed_tables()
    return [*candidate_summaries(spec, observed.__getitem__, warmup), float(summary["crossings"])]


def run_bare(path: Path, workers: int) -> None:
    """The bare runs of (b): the calibration's own prior draws and seeds, through a forkserver pool."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    from abm.calibration import load_calibration
    from abm.calibration.abc.seeds import simulation_seeds, stage_rng
    from abm.experiment.fork_server import start_fork_server, start_method

    start_fork_server()
    plan = load_calibration(path)
    draws = plan.setting("draws")
    theta = plan.priors.sample(stage_rng(plan.spec.seed, 0), draws)
    seeds = simulation_seeds(plan.spec.seed, 0, 0, draws)
    tasks = [(plan.world_for(row), int(seed), plan.spec.days, plan.spec.warmup_days, plan.summary_spec)
             for row, seed in zip(theta, seeds, strict=True)]
    context = multiprocessing.get_context(start_method())
    with ProcessPoolExecutor(workers, mp_context=context) as pool:
        results = list(pool.map(bare_candidate, tasks, chunksize=1))
    assert len(results) == draws


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--draws", type=int, default=300, help="candidates in (a) and (b) (default 300)")
    parser.add_argument("--workers", type=int, default=2, help="worker processes (default 2)")
    parser.add_argument("--skip-example", action="store_true", help="leave out (d), the shipped example as it is")
    parser.add_argument("--bare", metavar="CALIBRATION", help=argparse.SUPPRESS)  # (b), started by this script
    args = parser.parse_args(argv)
    if args.bare:
        run_bare(Path(args.bare), args.workers)
        return 0

    load_before = os.getloadavg()
    with tempfile.TemporaryDirectory(prefix="undertow-bench-") as tmp:
        folder = Path(tmp)
        path = calibration_file(folder, args.draws, "cut.yaml")
        bare_argv = [sys.executable, str(Path(__file__).resolve()), "--bare", str(path), "--workers", str(args.workers)]
        bare, through = [], []
        for order, what in enumerate(("bare", "calibrate", "calibrate", "bare")):
            if what == "bare":
                bare.append(timed_command(bare_argv))
            else:
                through.append(calibrate(path, folder / f"out-{order}", args.workers))
        lean_bytes, simulations = disk_per_candidate(folder / "out-1")
        kept_path = calibration_file(folder, KEEP_RUNS_DRAWS, "kept.yaml")
        calibrate(kept_path, folder / "kept", args.workers, "--keep-runs")
        kept_bytes, _ = disk_per_candidate(folder / "kept")
        example = None
        if not args.skip_example:
            example = calibrate(calibration_file(folder, None, "example.yaml"), folder / "example", args.workers)
    load_after = os.getloadavg()

    t_bare, t_through = statistics.mean(bare), statistics.mean(through)
    ratio = t_bare / t_through  # = (draws / t_through) / (draws / t_bare)
    print(f"Undertow calibration benchmark: Kestrel Quay's shipped calibration, {args.draws} candidates, "
          f"{args.workers} workers (processes)")
    print(f"load average before/after (other work on the machine skews timings): {load_before[0]:.2f} / "
          f"{load_after[0]:.2f} on {os.cpu_count()} cores")
    print()
    print(f"{'':46s}{'wall s (each)':>22s}{'simulations/s':>15s}")
    print(f"{'(a) undertow calibrate':46s}{' '.join(f'{t:.1f}' for t in through):>22s}{args.draws / t_through:15.2f}")
    print(f"{'(b) bare simulate() + summaries, same pool':46s}{' '.join(f'{t:.1f}' for t in bare):>22s}"
          f"{args.draws / t_bare:15.2f}")
    print()
    print(f"(c) disk per candidate: {lean_bytes:,.0f} bytes by default ({simulations} simulations); "
          f"{kept_bytes:,.0f} bytes with --keep-runs ({KEEP_RUNS_DRAWS} simulations)")
    if example is not None:
        print(f"(d) the shipped example as it is (undertow calibrate {EXAMPLE.relative_to(ROOT)}/calibration.yaml): "
              f"{example:.0f} s")
    print()
    print("targets (from the issue):")
    verdict = "met" if ratio >= TARGET_RATIO else "MISSED"
    print(f"  calibrate / bare simulations per second = {ratio:.2f}x   target >= {TARGET_RATIO}x   {verdict}")
    verdict = "met" if lean_bytes <= 5 * 1024 else "MISSED"
    print(f"  disk per candidate = {lean_bytes / 1024:.1f} KB   target <= 5 KB   {verdict}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
