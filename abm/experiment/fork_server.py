"""The server process a local pool or Dask cluster forks its workers from, and starting it early.

A pool forks each worker from one server process that has already imported
what a run needs (the engine, and the modules of a batch's summary
extensions), so a worker starts in milliseconds instead of importing it all
again. A local Dask cluster's nannies fork their workers from the same server,
which then imports Dask too. The server's own imports take about 1.5 s on the
2-core reference machine; a command that will use the pool or a local cluster
starts the server first, so it imports on the other core while the command
imports and reads its input.

This module uses only the standard library, so calling it first costs nothing.
"""

from __future__ import annotations

import multiprocessing
import multiprocessing.forkserver
from collections.abc import Iterable

WORKER_MODULE = "abm.experiment.worker"
DASK_WORKER_MODULE = "distributed"  # a local Dask cluster's workers are Dask workers too


def start_method() -> str:
    """``forkserver`` where the platform has it, else ``spawn``.

    Never plain ``fork``: the commands' processes hold threads (numpy's BLAS, tqdm) and forking
    a process with threads can deadlock the child.
    """
    return "forkserver" if "forkserver" in multiprocessing.get_all_start_methods() else "spawn"


def start_fork_server(extension_modules: Iterable[str] = ()) -> None:
    """Start the fork server now (if the platform has one and it is not running), preloading a worker's modules.

    Returns at once: the server imports in the background, and the first worker asked of it waits
    for that. A server already running keeps what it preloaded; workers import anything else themselves.
    """
    if start_method() != "forkserver":
        return
    modules = dict.fromkeys([WORKER_MODULE, *extension_modules])  # ordered, without repeats
    multiprocessing.get_context("forkserver").set_forkserver_preload(list(modules))
    multiprocessing.forkserver.ensure_running()


def start_server_for(executor: str | None, scheduler: str | None, extension_modules: Iterable[str] = ()) -> None:
    """Start the fork server if ``executor``'s workers fork from it: a local pool's, or a local Dask cluster's.

    A Dask cluster's workers also preload Dask; a cluster reached at ``scheduler`` has workers of its own.
    """
    if executor == "processes":
        start_fork_server(extension_modules)
    elif executor == "dask" and not scheduler:
        start_fork_server((*extension_modules, DASK_WORKER_MODULE))
