"""What a worker does with one run: the task message, and its small answer.

A task is small and self-contained: the design point's world as plain data,
the seed, the days and where to write. A run goes one of three ways:

- written: the worker writes the run directory itself, atomically (through
  :func:`abm.experiment.single.write_run`); only the run's summary, or its
  error, travels back. Workers must then see the output folder at the same
  path: local pools do, a cluster does only with a shared file system.
- shipped (``ship``): the worker writes the run directory in a private
  temporary folder and sends its files back; :func:`settle` writes them on the
  coordinator, so the workers need not see the output folder at all.
- lean (no ``out``): nothing is written; the run's summary, and what the
  task's ``reduce`` computes from its records in memory, travel back
  (calibration and policy-search candidates, which need a few numbers each).

Either way :func:`settle` runs on the coordinator: a run reported written is
checked there, and one it cannot read back is a failure, never a success.

A task may also carry the batch's summary extensions: the worker calls them
once the run is written, so what they derive from the run (e.g. the estimates
cache) is made in parallel instead of by the coordinator afterwards.
"""

from __future__ import annotations

import json
import os
import pickle
import tempfile
import threading
import time
import traceback
from collections import OrderedDict
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..atomic import staged_folder
from ..model import PortModel
from ..records import RecordBook
from ..run_files import damage
from ..world import parse_world
from ..world.schema import World
from .single import refuse_existing, simulate, summarise, write_run

SUMMARY_FILE = "summary.json"

# Computes what a lean task wants from a finished run: its records in memory and its summary. It travels with the
# task (pickled), so it is a module-level function or an instance of a module-level class.
Reducer = Callable[[RecordBook, Mapping[str, Any]], Any]


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
    out: str = ""  # the run directory to create (absolute, so any worker can reach it); "" writes none (lean)
    command: tuple[str, ...] = ()
    values: dict[str, Any] = field(default_factory=dict)  # factor label -> value, for the manifest
    # module-level functions of the run directory (they travel by name); see the module docstring
    extensions: tuple[Callable[[Path], Mapping[str, Any]], ...] = ()
    reduce: Reducer | None = None  # its result travels back as the answer's "reduced"
    ship: bool = False  # write the run directory in a private folder and send its files back


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
    out = Path(task.out) if task.out else None
    try:
        world = _world(task)
        if out is not None and not task.ship:
            refuse_existing(out)  # before the work: a straggler of an interrupted batch may have written it
        model = simulate(world, task.warmup + task.days, task.seed)
        if out is None:
            summary = summarise(model.records, task.days, task.warmup)
            files = None
        elif task.ship:
            summary, files = _written_elsewhere(task, world, model)
        else:
            summary, files = write_run(model, world, **_run_arguments(task, out)), None
            _extend(task, out)
        answer: dict[str, Any] = {"run_id": task.run_id, "ok": True, "summary": summary}
        if files is not None:
            answer["files"] = files
        if task.reduce is not None:
            answer["reduced"] = task.reduce(model.records, summary)
    except Exception as exc:  # noqa: BLE001 - any fault of one run is recorded, not fatal to the batch
        if out is not None and not task.ship and task.reduce is None and is_complete(out):
            # A straggler from an interrupted batch finished this very run first; runs are deterministic.
            return {"run_id": task.run_id, "ok": True, "summary": json.loads((out / SUMMARY_FILE).read_text())}
        return failure(task, " ".join(f"{exc.__class__.__name__}: {exc}".split()), traceback.format_exc())
    return answer


_WORLDS: OrderedDict[bytes, World] = OrderedDict()  # the last few worlds this worker validated, by content
WORLDS_KEPT = 8


def _world(task: RunTask) -> World:
    """A task's world, validated once per worker: the replications of a design point, or a policy-search candidate's
    seeds, share one world, and validating it again costs more than pickling it (nothing changes a World)."""
    key = pickle.dumps(task.world, protocol=pickle.HIGHEST_PROTOCOL)
    world = _WORLDS.get(key)
    if world is None:
        world = _WORLDS[key] = parse_world(task.world, f"design point {task.point}")
        if len(_WORLDS) > WORLDS_KEPT:
            _WORLDS.popitem(last=False)  # the least recently used
    else:
        _WORLDS.move_to_end(key)
    return world


def _run_arguments(task: RunTask, out: Path) -> dict[str, Any]:
    return {
        "world_hash": task.world_sha256,
        "days": task.days,
        "seed": task.seed,
        "out": out,
        "command": list(task.command),
        "warmup": task.warmup,
        "manifest_extra": {
            "experiment_run": {
                "run_id": task.run_id,
                "point": task.point,
                "replication": task.replication,
                "values": task.values,
            }
        },
    }


def _extend(task: RunTask, run_dir: Path) -> None:
    for extension in task.extensions:
        try:
            extension(run_dir)
        except Exception:  # noqa: BLE001 - the store calls it again when it builds the summary, and reports it there
            pass


def _written_elsewhere(task: RunTask, world: World, model: PortModel) -> tuple[dict[str, Any], dict[str, bytes]]:
    """Write the run directory in a private temporary folder, as it would be written in place; return its files."""
    with tempfile.TemporaryDirectory(prefix="undertow-run-") as private:
        run_dir = Path(private) / Path(task.out).name
        summary = write_run(model, world, **_run_arguments(task, run_dir))
        _extend(task, run_dir)
        files = {path.relative_to(run_dir).as_posix(): path.read_bytes()
                 for path in sorted(run_dir.rglob("*")) if path.is_file()}
    return summary, files


def settle(task: RunTask, answer: dict[str, Any]) -> dict[str, Any]:
    """On the coordinator: write a shipped run's files into place, and check a run said written can be read back.

    A run the coordinator cannot read back whole is returned as a failure: a worker that wrote it where this
    machine cannot see it has not finished it for anyone here.
    """
    if not answer.get("ok") or not task.out:
        return answer
    out = Path(task.out)
    files = answer.pop("files", None)
    if files is not None and not is_complete(out):
        try:
            _land(files, out)
        except OSError as exc:
            return failure(task, f"{out}: the run's files, sent back by its worker, could not be written here ({exc})",
                           "")
    if is_complete(out):
        return answer
    where = ("the worker sent its files back, but they did not make a whole run here" if files is not None else
             "the worker reported it written, but this machine cannot read it back whole: do the workers see the "
             "output folder at this path? (with --shared-output they must; without it, a cluster's workers send "
             "their runs back)")
    return failure(task, f"{out}: {where}", "")


def _land(files: Mapping[str, bytes], out: Path) -> None:
    """Write a run directory's files under a staging name of this call's own, then rename it into place."""
    with staged_folder(out) as staging:
        for name, content in files.items():
            path = staging / name
            path.parent.mkdir(parents=True, exist_ok=True)
            path.write_bytes(content)
