"""Where runs execute: in this process, in a local process pool, or on a Dask cluster.

Every executor takes the same :class:`~abm.experiment.worker.RunTask` messages
and yields the same small answers (in completion order), so a run's result
never depends on where it ran. Only a bounded window of tasks is in flight at
once: a batch of tens of thousands of runs does not sit in memory as messages.

Local workers write run directories themselves. The workers of a cluster
reached with a scheduler address need not see the output folder: they send
each run's files back and this process writes them (see
:mod:`abm.experiment.worker`), unless the folder is declared shared
(``--shared-output``), when they write in place as local workers do. Either
way every answer is settled here, so a run reported complete is one this
process has read back.
"""

from __future__ import annotations

import logging
import multiprocessing
import os
import threading
import traceback
import uuid
from collections import deque
from collections.abc import Iterable, Iterator, Sequence
from concurrent.futures import FIRST_COMPLETED, Future, ProcessPoolExecutor, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, replace
from types import TracebackType
from typing import Any, Protocol

from ..errors import InputError
from .fork_server import start_fork_server, start_method, start_server_for
from .worker import RunTask, execute_run, failure, settle, watch_parent

EXECUTORS = ("serial", "processes", "dask")
# A run in flight when its worker process dies is retried on a fresh pool up to this many attempts in all
# (the same allowance Dask gives a task whose worker dies).
MAX_ATTEMPTS = 3
TASKS_PER_WORKER = 2  # in flight per worker: enough to keep each busy while answers travel back
# A local cluster runs without a dashboard, so nobody reads what Dask's monitors collect for it; on a
# small machine they take CPU from the runs (the workers' statistical profiler samples the running task
# every 10 ms; the scheduler and nannies poll memory, disk and the event loop many times a second).
# Dask also starts workers with glibc's MALLOC_TRIM_THRESHOLD_ set low, to hand memory back to the system;
# a run allocates and frees many mid-sized arrays, and with it each run took about 40% more CPU
# (measured here), so local workers keep glibc's default. Workers and nannies take this config when
# they start; a cluster reached with --scheduler keeps its own.
QUIET_LOCAL_CLUSTER = {
    "distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None,  # None unsets it (Dask's rule)
    "distributed.worker.profile.enabled": False,
    "distributed.worker.memory.monitor-interval": "1s",
    "distributed.admin.system-monitor.interval": "5s",
    "distributed.admin.system-monitor.disk": False,
    "distributed.admin.tick.interval": "200ms",
}
# Local workers fork from the pool's fork server, which has imported the engine and Dask already, instead
# of each starting an interpreter and importing both (about 1.5 s of the 2-core reference machine each).
LOCAL_WORKERS_FORK = {"distributed.worker.multiprocessing-method": start_method()}


class Executor(Protocol):
    """Runs tasks and yields their answers as they complete."""

    name: str

    def __enter__(self) -> "Executor": ...

    def __exit__(
        self, kind: type[BaseException] | None, exc: BaseException | None, tb: TracebackType | None
    ) -> None: ...

    def imap(self, tasks: Iterable[RunTask]) -> Iterator[dict[str, Any]]: ...


def _crash(task: RunTask, exc: BaseException) -> dict[str, Any]:
    trace = "".join(traceback.format_exception(exc))
    return failure(task, " ".join(f"{exc.__class__.__name__}: {exc}".split()), trace)


class SerialExecutor:
    """Runs in this process, one after another."""

    name = "serial"

    def __enter__(self) -> "SerialExecutor":
        return self

    def __exit__(self, *exc: object) -> None:
        return None

    def imap(self, tasks: Iterable[RunTask]) -> Iterator[dict[str, Any]]:
        """Answers in task order."""
        for task in tasks:
            yield settle(task, execute_run(task))


class ProcessExecutor:
    """A local pool of worker processes (``concurrent.futures``, forkserver or spawn)."""

    name = "processes"

    def __init__(self, workers: int | None = None, preload: Sequence[str] = ()) -> None:
        """``preload``: modules the tasks will need beyond the engine (their summary extensions').

        The fork server starts here, not on entering, so it imports while the caller prepares the tasks.
        """
        self.workers = workers or os.cpu_count() or 1
        self.preload = tuple(preload)
        self._pool: ProcessPoolExecutor | None = None
        start_fork_server(self.preload)

    def _new_pool(self) -> ProcessPoolExecutor:
        start_fork_server(self.preload)  # again: after a worker died, the server may have gone too
        return ProcessPoolExecutor(
            max_workers=self.workers, mp_context=multiprocessing.get_context(start_method()),
            initializer=watch_parent, initargs=(os.getpid(),),
        )

    def __enter__(self) -> "ProcessExecutor":
        self._pool = self._new_pool()
        return self

    def __exit__(self, *exc: object) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=False, cancel_futures=True)
            self._pool = None

    def imap(self, tasks: Iterable[RunTask]) -> Iterator[dict[str, Any]]:
        """Answers in completion order; runs lost with a dead worker are retried, then reported as failed."""
        assert self._pool is not None, "use the executor as a context manager"
        source = iter(tasks)
        retry: deque[tuple[RunTask, int]] = deque()
        in_flight: dict[Future[dict[str, Any]], tuple[RunTask, int]] = {}
        window = TASKS_PER_WORKER * self.workers
        while True:
            while len(in_flight) < window:
                if retry:
                    task, attempt = retry.popleft()
                else:
                    task, attempt = next(source, None), 1  # type: ignore[assignment]
                    if task is None:
                        break
                in_flight[self._pool.submit(execute_run, task)] = (task, attempt)
            if not in_flight:
                return
            done, _ = wait(in_flight, return_when=FIRST_COMPLETED)
            lost: list[tuple[RunTask, int]] = []
            for future in done:
                task, attempt = in_flight.pop(future)
                try:
                    yield settle(task, future.result())
                except BrokenProcessPool:
                    lost.append((task, attempt))
                except Exception as exc:  # noqa: BLE001 - e.g. a task that cannot be sent; the batch goes on
                    yield _crash(task, exc)
            if lost:
                # A worker died (killed, out of memory): the pool is unusable and every run in it is lost.
                # Which run killed it is unknown, so each is retried a bounded number of times.
                for future in wait(in_flight).done:
                    task, attempt = in_flight.pop(future)
                    if future.exception() is None:
                        yield settle(task, future.result())
                    else:
                        lost.append((task, attempt))
                self._pool.shutdown(wait=True)
                self._pool = self._new_pool()
                for task, attempt in sorted(lost, key=lambda item: item[0].run_id):
                    if attempt >= MAX_ATTEMPTS:
                        yield failure(task, f"the worker process died during this run ({attempt} attempts)", "")
                    else:
                        retry.append((task, attempt + 1))


class DaskExecutor:
    """A Dask ``distributed`` cluster: an existing one at ``scheduler``, or a local one started here."""

    name = "dask"

    def __init__(
        self, workers: int | None = None, scheduler: str | None = None, preload: Sequence[str] = (),
        shared_output: bool = False,
    ) -> None:
        """``preload``: as for :class:`ProcessExecutor`, for the workers of a local cluster.

        The workers of a cluster at ``scheduler`` send their runs' files back, unless ``shared_output`` says they
        see the output folder at the same path as this process. A local cluster's workers fork from the same fork
        server as a process pool's, started here; starting one sets this process's Dask config to start local
        workers that way from then on.
        """
        self.workers = workers or os.cpu_count() or 1
        self.scheduler = scheduler
        self.ship = bool(scheduler) and not shared_output
        self._cluster: Any = None
        self._client: Any = None
        start_server_for(self.name, scheduler, preload)

    def __enter__(self) -> "DaskExecutor":
        from distributed import Client, LocalCluster

        if self.scheduler:
            try:
                self._client = Client(self.scheduler, timeout="20s", set_as_default=False)
            except (OSError, TimeoutError) as exc:
                raise InputError(f"--scheduler {self.scheduler}: cannot connect to a Dask scheduler ({exc})") from None
        else:
            import dask

            # Kept after the start, for the process: a nanny restarting a dead worker reads it again.
            dask.config.set(LOCAL_WORKERS_FORK)
            with dask.config.set(QUIET_LOCAL_CLUSTER):
                self._cluster = LocalCluster(
                    n_workers=self.workers,
                    threads_per_worker=1,  # the engine is single-threaded; one run per process
                    processes=True,
                    dashboard_address=None,
                    silence_logs=logging.ERROR,
                )
            self._client = Client(self._cluster, set_as_default=False)
        return self

    def __exit__(self, *exc: object) -> None:
        client, cluster = self._client, self._cluster
        self._client = self._cluster = None
        if cluster is None:
            if client is not None:
                client.close()  # a cluster reached with --scheduler stays up for others
            return
        # Every answer is in and every run directory written: the local cluster's teardown need not hold up
        # the batch's tables, just as the process pool lets its workers exit on their own. Not a daemon: the
        # program exits after it.
        threading.Thread(target=_close_local, args=(client, cluster), name="undertow-dask-close").start()

    def imap(self, tasks: Iterable[RunTask]) -> Iterator[dict[str, Any]]:
        """Answers in completion order; a run whose workers kept dying comes back as a failure."""
        from distributed import as_completed

        client = self._client
        assert client is not None, "use the executor as a context manager"
        source = iter(tasks)
        by_key: dict[str, RunTask] = {}
        pending = as_completed(loop=client.loop)

        def submit() -> None:
            task = next(source, None)
            if task is not None:
                if self.ship and task.out:
                    task = replace(task, ship=True)
                # A fresh key per submission: a long-lived cluster must never hand back another batch's result.
                future = client.submit(execute_run, task, key=f"undertow-{task.run_id}-{uuid.uuid4().hex}", pure=False)
                by_key[future.key] = task
                pending.add(future)

        threads = sum(client.nthreads().values()) or self.workers
        for _ in range(TASKS_PER_WORKER * threads):
            submit()
        try:
            for future in pending:
                task = by_key.pop(future.key)
                try:
                    answer = settle(task, future.result())
                except Exception as exc:  # noqa: BLE001 - e.g. KilledWorker: recorded, the batch goes on
                    answer = _crash(task, exc)
                future.release()
                submit()
                yield answer
        finally:
            if by_key:
                client.cancel(list(pending.futures))


def _close_local(client: Any, cluster: Any) -> None:
    # A worker stops its heartbeat and then closes its connections, and a heartbeat already under way then
    # fails, logging a traceback at ERROR (dask/distributed issue 7105): noise of a teardown that follows
    # the last answer, so the workers' Dask logs are quieted first.
    client.run(quiet_dask_logs, on_error="ignore")
    client.close()
    cluster.close()


def quiet_dask_logs() -> None:
    """Let this process's Dask (and its Tornado loop) log only critical messages from now on."""
    for name in ("distributed", "tornado.application"):
        logging.getLogger(name).setLevel(logging.CRITICAL)


@dataclass(frozen=True)
class Placement:
    """Where a command's runs execute, as its options say: ``--executor``, ``--workers``, ``--scheduler`` and
    ``--shared-output``."""

    executor: str | None = None
    workers: int | None = None
    scheduler: str | None = None
    shared_output: bool = False

    def name(self) -> str:
        """The executor these options choose (refusing options that contradict each other)."""
        return choose_executor(self.executor, self.workers, self.scheduler, self.shared_output)

    def make(self, preload: Sequence[str] = ()) -> Executor:
        """The executor, not yet entered; ``preload`` as for :class:`ProcessExecutor`."""
        return make_executor(self.name(), self.workers, self.scheduler, preload, self.shared_output)


def choose_executor(
    executor: str | None, workers: int | None, scheduler: str | None, shared_output: bool = False
) -> str:
    """The executor the command-line options ask for (serial by default, Dask when a scheduler is given)."""
    chosen = executor or ("dask" if scheduler else "serial")
    if shared_output and not scheduler:
        raise InputError("--shared-output: applies to a cluster reached with --scheduler (local workers share this "
                         "machine's disk already)")
    if scheduler and chosen != "dask":
        raise InputError(f"--scheduler: connects to a Dask cluster; it needs --executor dask, not {chosen}")
    if workers and chosen == "serial":
        raise InputError("--workers: applies to --executor processes or dask")
    return chosen


def make_executor(
    name: str, workers: int | None = None, scheduler: str | None = None, preload: Sequence[str] = (),
    shared_output: bool = False,
) -> Executor:
    """The executor called ``name`` (one of :data:`EXECUTORS`); ``preload`` as for :class:`ProcessExecutor`,
    ``shared_output`` as for :class:`DaskExecutor`."""
    if name == "serial":
        return SerialExecutor()
    if name == "processes":
        return ProcessExecutor(workers, preload)
    if name == "dask":
        return DaskExecutor(workers, scheduler, preload, shared_output)
    raise InputError(f"unknown executor '{name}'; expected one of {', '.join(EXECUTORS)}")
