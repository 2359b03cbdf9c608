"""A real Dask cluster whose workers cannot see the output folder: batches and calibrations still land whole.

A scheduler and two workers run as separate processes on 127.0.0.1, as on a
cluster. Each worker starts in a mount namespace of its own (``unshare -m``)
with an empty tmpfs mounted over the folder that holds every input and output
of the test, so it sees that path empty, as a cloud worker sees a folder only
the client's machine has; each works in a temporary directory of its own.
Through ``--scheduler`` the workers send each run back and the command writes
it; the results must equal serial runs' byte for byte. With ``--shared-output``
(the workers claim to see the folder, and do not) no run may be reported
complete. Skipped where the machine cannot make mount namespaces (not root, or
no ``unshare``).
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import pandas as pd
import pytest

from abm.cli import main

from abm.experiment.single import run_to_directory
from abm.world import file_hash, load_world

from .helpers import ROOT, experiment, write_yaml

WORKERS = 2


def hiding_unavailable(folder: Path) -> str | None:
    """Why an empty tmpfs cannot be mounted over ``folder`` in a private mount namespace here (None: it can)."""
    if shutil.which("unshare") is None:
        return "no unshare command on this machine"
    probe = subprocess.run(["unshare", "-m", "--propagation", "private", "mount", "-t", "tmpfs", "tmpfs", str(folder)],
                           capture_output=True, text=True)
    if probe.returncode != 0:
        return f"cannot mount a private tmpfs (needs root or user namespaces): {probe.stderr.strip()}"
    return None


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def stop(process: subprocess.Popen[bytes]) -> None:
    """Stop a process and every process it started (its own session), politely first."""
    for sig, wait in ((signal.SIGTERM, 10), (signal.SIGKILL, 10)):
        if process.poll() is not None:
            break
        try:
            os.killpg(process.pid, sig)
        except ProcessLookupError:
            break
        try:
            process.wait(wait)
        except subprocess.TimeoutExpired:
            continue
    try:
        os.killpg(process.pid, signal.SIGKILL)  # a worker's nanny's child, should it outlive the nanny
    except ProcessLookupError:
        pass


@pytest.fixture(scope="module")
def hidden(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The folder every input and output lives in; the workers see it as an empty tmpfs."""
    folder = tmp_path_factory.mktemp("client-only")
    reason = hiding_unavailable(folder)
    if reason is not None:
        pytest.skip(reason)
    return folder


@pytest.fixture(scope="module")
def scheduler(hidden: Path, tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """The address of a running scheduler with two workers that cannot see ``hidden``; all stopped afterwards."""
    from distributed import Client

    address = f"tcp://127.0.0.1:{free_port()}"
    started: list[subprocess.Popen[bytes]] = []
    log = tmp_path_factory.mktemp("cluster-logs")
    try:
        started.append(subprocess.Popen(
            [sys.executable, "-m", "dask", "scheduler", "--host", "127.0.0.1", "--port", address.rsplit(":", 1)[1],
             "--no-dashboard"],
            stdout=subprocess.DEVNULL, stderr=open(log / "scheduler.log", "wb"), start_new_session=True,
        ))
        for i in range(WORKERS):
            workdir = tmp_path_factory.mktemp(f"worker{i}")
            # Mount the empty tmpfs, then become the worker: it and its nanny's child live in the namespace.
            script = 'mount -t tmpfs tmpfs "$1" && cd "$2" && exec "$3" -m dask worker "$4" --nthreads 1 ' \
                     '--nworkers 1 --no-dashboard --local-directory "$2" --name "$5"'
            started.append(subprocess.Popen(
                ["unshare", "-m", "--propagation", "private", "sh", "-c", script, "sh", str(hidden), str(workdir),
                 sys.executable, address, f"hidden-{i}"],
                stdout=subprocess.DEVNULL, stderr=open(log / f"worker{i}.log", "wb"), start_new_session=True,
            ))
        with Client(address, timeout="30s") as client:
            client.wait_for_workers(WORKERS, timeout=120)
            # The workers do not see the client's folder: the test's premise, checked on them.
            assert client.run(lambda: os.listdir(hidden)) == {w: [] for w in client.scheduler_info()["workers"]}
        yield address
    finally:
        for process in reversed(started):
            stop(process)


def tree(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` by relative path; a record of the command line (which names the folder and
    the executor) left out, as is files.json's line for the manifest that holds it."""
    files = {}
    for path in sorted(p for p in folder.rglob("*") if p.is_file()):
        name = path.relative_to(folder).as_posix()
        content = path.read_bytes()
        if path.name in ("manifest.json", "experiment.json", "calibration.json"):
            record = json.loads(content)
            record.pop("command", None)
            content = json.dumps(record, sort_keys=True).encode()
        elif path.name == "files.json":
            record = json.loads(content)
            record.pop("manifest.json", None)
            content = json.dumps(record, sort_keys=True).encode()
        files[name] = content
    return files


def test_a_batch_through_a_scheduler_lands_whole_and_equals_a_serial_batch(
    hidden: Path, scheduler: str, capsys: pytest.CaptureFixture[str]
) -> None:
    path = write_yaml(hidden / "experiment.yaml", experiment(days=3, warmup_days=1))
    assert main(["batch", str(path), "--out", str(hidden / "serial")]) == 0
    capsys.readouterr()
    assert main(["batch", str(path), "--out", str(hidden / "cluster"), "--scheduler", scheduler]) == 0
    assert "6 of 6 runs complete" in capsys.readouterr().out
    serial, cluster = tree(hidden / "serial"), tree(hidden / "cluster")
    assert sorted(serial) == sorted(cluster) and len(pd.read_parquet(hidden / "cluster" / "summary.parquet")) == 6
    assert [name for name in serial if serial[name] != cluster[name]] == []


def test_workers_that_do_not_share_the_folder_never_make_a_run_complete(
    hidden: Path, scheduler: str, capsys: pytest.CaptureFixture[str]
) -> None:
    path = write_yaml(hidden / "experiment-shared.yaml", experiment(days=2, warmup_days=0))
    out = hidden / "claimed-shared"
    code = main(["batch", str(path), "--out", str(out), "--scheduler", scheduler, "--shared-output"])
    captured = capsys.readouterr()
    assert code == 1 and "0 of 6 runs complete" in captured.out
    assert "6 of 6 runs failed" in captured.err
    failures = pd.read_parquet(out / "failures.parquet")
    assert failures["error"].str.contains("cannot read it back").all()
    assert len(pd.read_parquet(out / "summary.parquet")) == 0 and list((out / "runs").iterdir()) == []


def test_a_calibration_through_a_scheduler_equals_a_serial_one(
    hidden: Path, scheduler: str, capsys: pytest.CaptureFixture[str]
) -> None:
    world = ROOT / "worlds" / "reference" / "small_inflow" / "world.yaml"
    target = hidden / "target"
    run_to_directory(load_world(world), file_hash(world), 21, 31, target, warmup=7)
    data = {
        "kind": "calibration", "name": "small inflow (test)", "world": str(world),
        "observed": {"path": str(target), "first_day": 7}, "days": 21, "warmup_days": 7, "seed": 5,
        "priors": [{"path": "adversary.arrivals_per_day", "dist": "uniform", "low": 1, "high": 20}],
        "summaries": ["detections_by_station", "repeat_frequencies"],
        "method": {"name": "rejection", "draws": 24, "accept": 0.5}, "predictive_runs": 2, "self_check": 0,
    }
    path = write_yaml(hidden / "calibration.yaml", data)
    for out, where in (("calibration-serial", []), ("calibration-cluster", ["--scheduler", scheduler]),
                       ("calibration-kept", ["--scheduler", scheduler, "--keep-runs"])):
        assert main(["calibrate", str(path), "--out", str(hidden / out), *where]) == 0
    capsys.readouterr()
    serial, cluster = tree(hidden / "calibration-serial"), tree(hidden / "calibration-cluster")
    assert sorted(serial) == sorted(cluster)
    assert [name for name in serial if serial[name] != cluster[name]] == []
    # With --keep-runs the candidates' run directories came back too, whole, and the tables are the same.
    kept = tree(hidden / "calibration-kept")
    assert any(name.startswith("gen-0/p000000/") for name in kept)
    assert all(kept[name] == serial[name] for name in serial if name.endswith(".parquet"))
