"""A run's result does not depend on where it ran: serial, local processes and Dask agree byte for byte."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from abm.analysis.estimator_check.cache import ESTIMATES_CACHE, cached_estimates
from abm.cli import BATCH_EXTENSION_MODULES
from abm.experiment.batch import run_batch
from abm.experiment.fork_server import start_method
from abm.experiment.store import FAILURES_TABLE, SUMMARY_TABLE
from abm.experiment.worker import RunTask, execute_run
from abm.world import load_world

from .helpers import DEMO_WORLD, POLICY_FACTOR, experiment, undertow_command, write_yaml


def _files(run_dir: Path) -> dict[str, bytes]:
    return {str(p.relative_to(run_dir)): p.read_bytes() for p in sorted(run_dir.rglob("*")) if p.is_file()}


@pytest.fixture(scope="module")
def batches(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    """The same four-run experiment through each executor (two workers where there are workers).

    With the estimators' summary columns, as the command line adds them: workers compute them.
    """
    folder = tmp_path_factory.mktemp("executors")
    data = experiment(factors=[{**POLICY_FACTOR, "levels": POLICY_FACTOR["levels"][:2]}])
    path = write_yaml(folder / "experiment.yaml", data)
    outs = {}
    for name in ("serial", "processes", "dask"):
        out = folder / name
        result = run_batch(path, out, executor=name, workers=None if name == "serial" else 2, show_progress=False,
                           extensions=(cached_estimates,))  # fmt: skip
        assert result.failed == 0 and len(result.summary) == 4
        outs[name] = out
    return outs


@pytest.mark.parametrize("executor", ["processes", "dask"])
def test_summary_tables_are_byte_identical(batches: dict[str, Path], executor: str) -> None:
    serial, other = batches["serial"], batches[executor]
    assert (serial / SUMMARY_TABLE).read_bytes() == (other / SUMMARY_TABLE).read_bytes()
    assert (serial / FAILURES_TABLE).read_bytes() == (other / FAILURES_TABLE).read_bytes()
    assert pd.read_parquet(serial / SUMMARY_TABLE).equals(pd.read_parquet(other / SUMMARY_TABLE))


@pytest.mark.parametrize("executor", ["processes", "dask"])
def test_run_records_are_byte_identical(batches: dict[str, Path], executor: str) -> None:
    serial = _files(batches["serial"] / "runs" / "p001-r01")
    other = _files(batches[executor] / "runs" / "p001-r01")
    assert serial.keys() == other.keys()
    assert {"summary.json", "daily.parquet", "truth/attempts.parquet", "observed/encounters.parquet"} <= serial.keys()
    for name in serial:
        if name != "manifest.json":
            assert serial[name] == other[name], name
    # a manifest records the command that started the batch; these batches were started alike
    assert json.loads(serial["manifest.json"]) == json.loads(other["manifest.json"])


def test_summary_rows_carry_point_values_and_seeds(batches: dict[str, Path]) -> None:
    summary = pd.read_parquet(batches["serial"] / SUMMARY_TABLE)
    assert list(summary.columns[:5]) == ["run_id", "point", "replication", "policy", "seed"]
    assert list(summary["run_id"]) == ["p000-r00", "p000-r01", "p001-r00", "p001-r01"]
    assert list(summary["policy"]) == ["current", "current", "double_imaging", "double_imaging"]
    # common random numbers: replication r has the same seed at every point, as each run recorded it
    assert summary.groupby("replication")["seed"].nunique().eq(1).all()
    manifest = json.loads((batches["serial"] / "runs" / "p001-r00" / "manifest.json").read_text())
    assert manifest["seed"] == summary.loc[2, "seed"]
    run = {"run_id": "p001-r00", "point": 1, "replication": 0, "values": {"policy": "double_imaging"}}
    assert manifest["experiment_run"] == run
    figures = {"detections", "crossings", "displaced_out", "time_in_port_p95_min", "missed_departure_share"}
    assert figures <= set(summary.columns)


def test_summary_tables_carry_the_estimates_the_workers_cached(batches: dict[str, Path]) -> None:
    summary = pd.read_parquet(batches["processes"] / SUMMARY_TABLE)
    assert any(column.startswith("est_") for column in summary.columns)
    for run_id in summary["run_id"]:
        assert (batches["processes"] / "runs" / run_id / ESTIMATES_CACHE).is_file()


def test_a_worker_runs_the_extensions_once_the_run_is_written_and_survives_a_failing_one(tmp_path: Path) -> None:
    def broken(run_dir: Path) -> dict[str, float]:
        raise RuntimeError("an extension fault is reported by the store's rebuild, not by the run")

    world = load_world(DEMO_WORLD)
    task = RunTask(run_id="p000-r00", point=0, replication=0, seed=3, days=4, warmup=1,
                   world=world.model_dump(mode="json"), world_sha256="test", out=str(tmp_path / "run"),
                   extensions=(broken, cached_estimates))  # fmt: skip
    answer = execute_run(task)
    assert answer["ok"]
    assert json.loads((tmp_path / "run" / ESTIMATES_CACHE).read_text())["window"] == [1, 4]


# How each executor is made with the batch's extension module to preload, and how a worker is asked a question.
WORKER_PROBES = {
    "processes": ("ProcessExecutor(1, preload=[cached_estimates.__module__])", "ex._pool.submit(eval, {!r}).result()"),
    "dask": (
        "DaskExecutor(1, preload=[cached_estimates.__module__])",
        "ex._client.submit(eval, {!r}, pure=False).result()",
    ),
}


@pytest.mark.skipif(start_method() != "forkserver", reason="workers come from a fork server only where there is one")
@pytest.mark.parametrize("executor", sorted(WORKER_PROBES))
def test_workers_fork_from_the_server_with_the_engine_and_the_extensions_modules_loaded(executor: str) -> None:
    # In a fresh interpreter: this one's fork server may already run with what an earlier test preloaded.
    # eval is pickled by name, so sending it imports nothing in the worker: what it sees was preloaded. A
    # worker forked from the server is the server's child, not this process's (as a spawned worker would be).
    make, ask = WORKER_PROBES[executor]
    modules = ("abm.experiment.worker", "abm.analysis.estimator_check.cache")
    loaded = f"[name in __import__('sys').modules for name in {modules!r}]"
    code = f"""
import os
from abm.analysis.estimator_check.cache import cached_estimates
from abm.experiment.executors import {make.split("(")[0]}
if __name__ == "__main__":
    with {make} as ex:
        print({ask.format(loaded)}, {ask.format("__import__('os').getppid()")} != os.getpid())
"""
    shown = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert shown.stdout.strip() == "[True, True] True"


def test_quieted_local_dask_workers_keep_teardown_errors_off_the_terminal() -> None:
    # A worker's error goes to the terminal until the worker is quieted, as a local cluster's are before closing.
    code = """
import logging
from abm.experiment.executors import DaskExecutor, quiet_dask_logs
def shout(text):
    logging.getLogger("distributed.worker").error(text)
if __name__ == "__main__":
    with DaskExecutor(1) as cluster:
        cluster._client.run(shout, "heard before quieting")
        cluster._client.run(quiet_dask_logs)
        cluster._client.run(shout, "heard after quieting")
"""
    shown = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert "heard before quieting" in shown.stderr
    assert "heard after quieting" not in shown.stderr


def test_the_command_line_preloads_the_module_of_its_batch_extension() -> None:
    assert cached_estimates.__module__ in BATCH_EXTENSION_MODULES


def test_a_worker_and_its_estimates_do_not_import_scipy_stats() -> None:
    # scipy.stats takes about 0.45 s to import, paid by every worker process; scipy.special has the quantiles.
    code = "import sys, abm.experiment.worker, abm.analysis.estimator_check.cache; print('scipy.stats' in sys.modules)"
    shown = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert shown.stdout.strip() == "False"


def test_a_batch_in_a_log_writes_progress_lines(tmp_path: Path) -> None:
    # Not a terminal (pytest captures stderr): lines at every tenth, with elapsed and remaining time.
    path = write_yaml(tmp_path / "experiment.yaml", experiment(replications=4, days=2, warmup_days=0))
    result = subprocess.run([*undertow_command(), "batch", str(path), "--out", str(tmp_path / "out")],
                            capture_output=True, text=True, check=False)
    assert result.returncode == 0, result.stderr
    lines = [line for line in result.stderr.splitlines() if line.startswith("batch: ")]
    assert lines[-1].startswith("batch: 12/12 runs, ") and "elapsed" in lines[-1]
    assert len(lines) >= 10 and "left" in lines[0]


def test_an_unreachable_scheduler_leaves_nothing_that_blocks_a_retry(tmp_path: Path) -> None:
    path = write_yaml(tmp_path / "experiment.yaml", experiment(replications=1, days=1, warmup_days=0))
    out = tmp_path / "out"
    command = [*undertow_command(), "batch", str(path), "--out", str(out)]
    # nothing listens on port 9 here: the client gives up after its 20 s connect timeout
    result = subprocess.run([*command, "--scheduler", "tcp://127.0.0.1:9"], capture_output=True, text=True,
                            timeout=120, check=False)
    assert result.returncode == 2 and result.stderr.count("\n") == 1, result.stderr
    assert "cannot connect to a Dask scheduler" in result.stderr and not out.exists()
    retry = subprocess.run(command, capture_output=True, text=True, timeout=120, check=False)  # no --resume needed
    assert retry.returncode == 0, retry.stderr


def _descendants(pid: int) -> list[int]:
    """Every process below ``pid`` (Linux /proc)."""
    parents: dict[int, list[int]] = {}
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            parents.setdefault(int(fields[1]), []).append(int(entry.name))
    found, todo = [], [pid]
    while todo:
        for child in parents.get(todo.pop(), []):
            found.append(child)
            todo.append(child)
    return found


def _running(pid: int) -> bool:
    try:
        return (Path("/proc") / str(pid) / "stat").read_text().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="reads the process tree from Linux /proc")
def test_a_killed_batch_leaves_no_worker_behind(tmp_path: Path) -> None:
    import signal
    import time

    path = write_yaml(tmp_path / "experiment.yaml", experiment(days=200))
    command = [*undertow_command(), "batch", str(path), "--out", str(tmp_path / "out"), "--executor", "processes",
               "--workers", "2"]
    main = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    for _ in range(300):  # the fork server, the resource tracker and two workers
        if len(_descendants(main.pid)) >= 4:
            break
        time.sleep(0.2)
    below = _descendants(main.pid)
    assert len(below) >= 4
    main.send_signal(signal.SIGKILL)
    main.wait()
    for _ in range(50):  # workers watch their command every second (abm.experiment.worker.watch_parent)
        if not any(_running(pid) for pid in below):
            break
        time.sleep(0.2)
    assert not [pid for pid in below if _running(pid)]
