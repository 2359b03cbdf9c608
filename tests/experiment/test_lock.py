"""One writer per output folder: a second writer is refused, a lock whose owner is gone is taken over."""

from __future__ import annotations

import json
import os
import socket
import subprocess
import time
from collections.abc import Callable
from pathlib import Path

import pytest

from abm.cli import main
from abm.experiment.batch import run_batch
from abm.experiment.lock import LOCK_FILE

from .helpers import experiment, undertow_command


def _lock(folder: Path, pid: int) -> None:
    (folder / LOCK_FILE).write_text(json.dumps({"pid": pid, "host": socket.gethostname(), "since": time.time()}))


def test_a_live_owner_keeps_the_folder(tmp_path: Path, make_experiment: Callable[..., Path],
                                       capsys: pytest.CaptureFixture[str]) -> None:
    path = make_experiment(experiment(days=2, factors=[]))
    out = tmp_path / "out"
    run_batch(path, out, show_progress=False)
    assert not (out / LOCK_FILE).exists()  # released at the end
    owner = subprocess.Popen(["sleep", "60"])
    try:
        _lock(out, owner.pid)
        before = {p: p.stat().st_mtime_ns for p in out.rglob("*")}
        capsys.readouterr()
        assert main(["batch", str(path), "--out", str(out), "--resume"]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and f"another undertow command (process {owner.pid}" in err
        assert {p: p.stat().st_mtime_ns for p in out.rglob("*")} == before
    finally:
        owner.kill()
        owner.wait()


def test_a_stale_lock_is_taken_over(tmp_path: Path, make_experiment: Callable[..., Path]) -> None:
    path = make_experiment(experiment(days=2, factors=[]))
    out = tmp_path / "out"
    run_batch(path, out, show_progress=False)
    gone = subprocess.Popen(["true"])
    gone.wait()  # its process id now names no running process
    _lock(out, gone.pid)
    assert run_batch(path, out, resume=True, show_progress=False).ran == 0
    assert not (out / LOCK_FILE).exists()


def test_two_writers_at_once_one_is_refused(tmp_path: Path, make_experiment: Callable[..., Path]) -> None:
    path = make_experiment(experiment(days=120, replications=6, factors=[]))  # long enough to overlap
    out = tmp_path / "out"
    command = [*undertow_command(), "batch", str(path), "--out", str(out)]
    first = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while not (out / LOCK_FILE).exists() and first.poll() is None and time.monotonic() < deadline:
        time.sleep(0.05)
    second = subprocess.run([*command, "--resume"], capture_output=True, text=True, timeout=120, check=False)
    first.communicate(timeout=300)
    assert first.returncode == 0
    assert second.returncode == 2 and "another undertow command" in second.stderr, second.stderr
    assert not (out / LOCK_FILE).exists()
    again = run_batch(path, out, resume=True, show_progress=False)  # the folder is whole: nothing to redo
    assert again.ran == 0 and len(again.summary) == 6


def test_the_owner_is_this_process_while_it_writes(tmp_path: Path) -> None:
    from abm.experiment.lock import acquire, release

    path = acquire(tmp_path)
    assert json.loads(path.read_text())["pid"] == os.getpid()
    release(path)
    assert not path.exists()
