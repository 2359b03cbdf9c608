"""What a worker does with one run: the task message, and its small answer.

A task is small and self-contained: the design point's world as plain data,
the seed, the days and where to write. The worker writes the run directory
itself (atomically, through :func:`abm.experiment.single.run_to_directory`);
only the run's summary, or its error, travels back. A task may also carry the
batch's summary extensions: the worker calls them once the run is written, so
what they derive from the run (e.g. the estimates cache) is made in parallel
instead of by the coordinator afterwards.
"""

from __future__ import annotations

import json
import os
import threading
import time
import traceback
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..run_files import damage
from ..world import parse_world
from .single import run_to_directory

SUMMARY_FILE = "summary.json"


@dataclass(frozen=True)
class RunTask:
    """One run to do."""

    run_id: str
    point: int
    replication: int
    seed: int
    days: int
    warmup: int
    world: dict[str, Any]
    world_sha256: str
    out: str  # the run directory to create (absolute, so any worker can reach it)
    command: tuple[str, ...] = ()
    values: dict[str, Any] = field(default_factory=dict)  # factor label -> value, for the manifest
    # module-level functions of the run directory (they travel by name); see the module docstring
    extensions: tuple[Callable[[Path], Mapping[str, Any]], ...] = ()


PARENT_POLL_SECONDS = 1.0


def watch_parent(pid: int) -> None:
    """In a pool worker: exit within about a second of the command's process dying (killed, even by SIGKILL).

    A worker forked from the fork server is the server's child, so nothing tells it when the command is gone;
    without this it would finish its run and idle on, keeping the server and the resource tracker alive.
    """

    def watch() -> None:
        while True:
            time.sleep(PARENT_POLL_SECONDS)
            try:
                os.kill(pid, 0)
            except (ProcessLookupError, PermissionError):  # gone (or its number reused by another user's process)
                os._exit(0)

    threading.Thread(target=watch, name="watch-parent", daemon=True).start()


def is_complete(run_dir: Path, digests: bool = False) -> bool:
    """A run directory is complete once it exists (it appears by rename only after everything is written) and
    its recorded files are all there at their sizes (and, with ``digests``, their content)."""
    return (run_dir / SUMMARY_FILE).is_file() and damage(run_dir, digests=digests) is None


def failure(task: RunTask, error: str, trace: str) -> dict[str, Any]:
    """The answer for a run that could not be done."""
    return {"run_id": task.run_id, "ok": False, "error": error, "traceback": trace}


def execute_run(task: RunTask) -> dict[str, Any]:
    """Do one run; never raises for a fault of the run itself, so the batch goes on."""
    out = Path(task.out)
    try:
        world = parse_world(task.world, f"design point {task.point}")
        summary = run_to_directory(
            world,
            task.world_sha256,
            task.days,
            task.seed,
            out,
            command=list(task.command),
            warmup=task.warmup,
            manifest_extra={
                "experiment_run": {
                    "run_id": task.run_id,
                    "point": task.point,
                    "replication": task.replication,
                    "values": task.values,
                }
            },
        )
    except Exception as exc:  # noqa: BLE001 - any fault of one run is recorded, not fatal to the batch
        if is_complete(out):
            # A straggler from an interrupted batch finished this very run first; runs are deterministic.
            return {"run_id": task.run_id, "ok": True, "summary": json.loads((out / SUMMARY_FILE).read_text())}
        return failure(task, " ".join(f"{exc.__class__.__name__}: {exc}".split()), traceback.format_exc())
    for extension in task.extensions:
        try:
            extension(out)
        except Exception:  # noqa: BLE001 - the store calls it again when it builds the summary, and reports it there
            pass
    return {"run_id": task.run_id, "ok": True, "summary": summary}
