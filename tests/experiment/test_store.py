"""The batch store: interrupted batches resume to the same tables, failures are kept, nothing is overwritten."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import time
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest

from abm.cli import main
from abm.analysis.estimator_check.cache import cached_estimates
from abm.experiment.batch import run_batch
from abm.experiment.single import run_to_directory
from abm.experiment.store import EXPERIMENT_FILE, FAILURES_TABLE, SUMMARY_TABLE
from abm.world import load_world

from .helpers import DEMO_WORLD, experiment, undertow_command, write_yaml

# 3 points x 4 replications of 8 days: long enough to interrupt part-way, short enough for the suite.
RESUMABLE = experiment(days=8, replications=4)


def _complete(out: Path) -> list[str]:
    runs = out / "runs"
    return sorted(d.name for d in runs.iterdir() if not d.name.startswith(".")) if runs.is_dir() else []


@pytest.fixture(scope="module")
def resumable(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Path]:
    """The experiment file and an uninterrupted serial batch of it."""
    folder = tmp_path_factory.mktemp("resumable")
    path = write_yaml(folder / "experiment.yaml", RESUMABLE)
    # the command line adds every estimator's columns; so does this reference
    reference = run_batch(path, folder / "reference", show_progress=False, extensions=(cached_estimates,))
    assert reference.failed == 0
    return path, folder / "reference"


def _children(pid: int) -> list[int]:
    """Processes whose parent is ``pid`` (Linux /proc)."""
    found = []
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue  # the process ended while we looked
        if int(fields[1]) == pid:
            found.append(int(stat.parent.name))
    return found


def _start_batch(path: Path, out: Path, *options: str) -> subprocess.Popen[bytes]:
    return subprocess.Popen(
        [*undertow_command(), "batch", str(path), "--out", str(out), *options],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        start_new_session=True,
    )


def _wait_for_runs(process: subprocess.Popen[bytes], out: Path, count: int) -> None:
    deadline = time.monotonic() + 120
    while len(_complete(out)) < count and process.poll() is None and time.monotonic() < deadline:
        time.sleep(0.01)
    assert process.poll() is None, "the batch ended before it could be interrupted"


def test_killed_coordinator_resumes_to_the_uninterrupted_summary(
    tmp_path: Path, resumable: tuple[Path, Path], capsys: pytest.CaptureFixture[str]
) -> None:
    path, reference = resumable
    out = tmp_path / "interrupted"
    process = _start_batch(path, out)
    try:
        _wait_for_runs(process, out, 3)
        os.killpg(process.pid, signal.SIGKILL)  # the coordinator and anything it started, without warning
    finally:
        process.wait(timeout=30)
    done_before = _complete(out)
    assert 3 <= len(done_before) < 12
    assert not (out / SUMMARY_TABLE).exists()

    assert main(["batch", str(path), "--out", str(out), "--resume"]) == 0
    printed = capsys.readouterr().out
    assert f"12 of 12 runs complete ({12 - len(done_before)} run now)" in printed
    assert (out / SUMMARY_TABLE).read_bytes() == (reference / SUMMARY_TABLE).read_bytes()
    summary = pd.read_parquet(out / SUMMARY_TABLE)
    assert summary["run_id"].is_unique and len(summary) == 12
    assert not [d for d in (out / "runs").iterdir() if d.name.startswith(".")]  # no partial run left or counted
    for run_id in done_before:  # complete runs were kept, not redone
        assert (out / "runs" / run_id / "summary.json").is_file()


@pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="finds worker processes through /proc")
@pytest.mark.parametrize("executor", ["processes", "dask"])
def test_killed_worker_process_is_replaced_and_no_run_is_lost(
    tmp_path: Path, resumable: tuple[Path, Path], executor: str
) -> None:
    path, reference = resumable
    out = tmp_path / "out"
    process = _start_batch(path, out, "--executor", executor, "--workers", "2")
    try:
        _wait_for_runs(process, out, 2)
        # workers (a pool's, or a local Dask cluster's) are the children of the fork server, itself a
        # child of the coordinator
        workers = [w for child in _children(process.pid) for w in _children(child)]
        assert workers, "found no worker process"
        os.kill(workers[0], signal.SIGKILL)
        assert process.wait(timeout=120) == 0
    finally:
        if process.poll() is None:
            os.killpg(process.pid, signal.SIGKILL)
    assert (out / SUMMARY_TABLE).read_bytes() == (reference / SUMMARY_TABLE).read_bytes()
    assert pd.read_parquet(out / FAILURES_TABLE).empty


def test_resume_of_a_finished_batch_runs_nothing(tmp_path: Path, make_experiment: Callable[..., Path]) -> None:
    path = make_experiment(experiment(days=2, factors=[]))
    first = run_batch(path, tmp_path / "out", show_progress=False)
    again = run_batch(path, tmp_path / "out", resume=True, show_progress=False)
    assert first.ran == 2 and again.ran == 0
    assert first.summary.equals(again.summary)


def test_a_folder_holding_a_batch_is_not_overwritten(
    tmp_path: Path, make_experiment: Callable[..., Path], capsys: pytest.CaptureFixture[str]
) -> None:
    path = make_experiment(experiment(days=2, factors=[]))
    out = tmp_path / "out"
    assert main(["batch", str(path), "--out", str(out)]) == 0
    before = {p: p.stat().st_mtime_ns for p in out.rglob("*")}
    capsys.readouterr()
    assert main(["batch", str(path), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "already holds a batch" in err and "--resume" in err
    assert {p: p.stat().st_mtime_ns for p in out.rglob("*")} == before

    changed = make_experiment(experiment(days=3, factors=[]), "changed.yaml")
    assert main(["batch", str(changed), "--out", str(out), "--resume"]) == 2
    assert "different experiment" in capsys.readouterr().err
    assert {p: p.stat().st_mtime_ns for p in out.rglob("*")} == before


def test_a_run_that_raises_is_recorded_and_the_batch_goes_on(
    tmp_path: Path, make_experiment: Callable[..., Path], capsys: pytest.CaptureFixture[str],
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # A fault inside the runs of one design point (a world the engine cannot run is now refused before any run,
    # so the fault is injected): the serial executor runs in this process, where the patch holds.
    import abm.experiment.worker as worker

    real = worker.write_run

    def faulty(model, world, *args, **kwargs):  # type: ignore[no-untyped-def]
        if kwargs["manifest_extra"]["experiment_run"]["point"] == 1:
            raise RuntimeError("station 'gate_imaging' could not check a vehicle (injected)")
        return real(model, world, *args, **kwargs)

    monkeypatch.setattr(worker, "write_run", faulty)
    other = {"name": "double_imaging", "set": {"stations.gate_imaging.selection.fraction": 0.4}}
    factor = {"name": "policy", "baseline": "current", "levels": [{"name": "current", "set": {}}, other]}
    path = make_experiment(experiment(days=2, factors=[factor]))
    out = tmp_path / "out"
    assert main(["batch", str(path), "--out", str(out)]) == 1
    captured = capsys.readouterr()
    errors = [line for line in captured.err.splitlines() if line.startswith("undertow batch:")]
    assert errors == [f"undertow batch: 2 of 4 runs failed; errors in {out / FAILURES_TABLE}"]
    failures = pd.read_parquet(out / FAILURES_TABLE)
    assert list(failures.columns) == ["run_id", "point", "replication", "seed", "error", "traceback"]
    assert list(failures["run_id"]) == ["p001-r00", "p001-r01"]
    assert failures["error"].str.startswith("RuntimeError: station 'gate_imaging'").all()
    assert failures["traceback"].str.contains("Traceback").all()
    summary = pd.read_parquet(out / SUMMARY_TABLE)
    assert list(summary["run_id"]) == ["p000-r00", "p000-r01"]
    assert list(failures["seed"]) == list(summary["seed"])  # the failed runs' seeds are recorded too


def test_experiment_record_names_experiment_world_and_design(
    tmp_path: Path, make_experiment: Callable[..., Path]
) -> None:
    path = make_experiment(experiment(days=2))
    run_batch(path, tmp_path / "out", command=["undertow", "batch", "x"], show_progress=False)
    record = json.loads((tmp_path / "out" / EXPERIMENT_FILE).read_text())
    assert record["experiment"]["name"] == "test experiment (illustrative)"
    assert len(record["experiment_sha256"]) == 64 and len(record["world_sha256"]) == 64
    assert [p["compare_to"] for p in record["design"]] == [None, 0, 0]
    assert record["command"] == ["undertow", "batch", "x"] and "numpy" in record["packages"]


def test_warm_up_days_are_simulated_but_left_out_of_the_summary(tmp_path: Path) -> None:
    world = load_world(DEMO_WORLD)
    summary = run_to_directory(world, "hash", days=3, seed=5, out=tmp_path / "run", warmup=2)
    daily = pd.read_parquet(tmp_path / "run" / "daily.parquet")
    attempts = pd.read_parquet(tmp_path / "run" / "truth" / "attempts.parquet")
    assert list(daily["day"]) == [0, 1, 2, 3, 4]  # the records keep every day
    later = daily[daily["day"] >= 2]
    assert summary["days"] == 3 and summary["warmup_days"] == 2
    assert summary["vehicles"] == later["vehicles"].sum() and summary["checks"] == later["checks"].sum()
    assert summary["detections"] == later["detections"].sum()
    assert summary["attempts"] == attempts.loc[attempts["day"] >= 2, "persons"].sum()
    # with no warm-up the summary is the whole run, as before
    whole = run_to_directory(world, "hash", days=5, seed=5, out=tmp_path / "whole")
    assert whole["vehicles"] == daily["vehicles"].sum() and "warmup_days" not in whole
