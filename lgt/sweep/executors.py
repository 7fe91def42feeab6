"""Executors that run sweep points: serial, a local process pool, or dask.distributed.

All expose :meth:`Executor.run`, yielding ``(job index, return value)`` as jobs finish, and
:meth:`Executor.shutdown`. Workers start with BLAS pinned to one thread.
"""

from __future__ import annotations

import multiprocessing
from abc import ABC, abstractmethod
from collections import deque
from dataclasses import dataclass
from typing import Any, Callable, Iterator, Sequence

from lgt.errors import ConfigError
from lgt.signals import on_abort
from lgt.sweep.pinning import pin_blas_threads, pinned, single_thread_environ
from lgt.sweep.worker import WorkerProcess, wait_for_workers

Job = tuple[Any, ...]
#: Attempts per run when its worker process dies (the first try plus two retries).
MAX_ATTEMPTS = 3


@dataclass
class WorkerLost:
    """Yielded instead of a result when a run's worker died on every attempt."""

    reason: str
    attempts: int

    def message(self) -> str:
        """One line for the failure record."""
        return f"worker lost {self.attempts} times: {self.reason}"


class Executor(ABC):
    """Runs ``fn(*job)`` for each job; the coordinating process consumes the results."""

    name = "executor"

    @abstractmethod
    def run(self, fn: Callable[..., Any], jobs: Sequence[Job]) -> Iterator[tuple[int, Any]]:
        """Yield ``(index, fn(*jobs[index]))`` in completion order."""

    def shutdown(self, cancel: bool = False) -> None:
        """Release workers; ``cancel`` drops jobs not started yet."""

    def describe(self) -> str:
        """One-line description for progress messages."""
        return self.name

    def __enter__(self) -> "Executor":
        return self

    def __exit__(self, exc_type: Any, *rest: Any) -> None:
        self.shutdown(cancel=exc_type is not None)


class SerialExecutor(Executor):
    """Runs every job in the calling process, in order."""

    name = "serial"

    def run(self, fn: Callable[..., Any], jobs: Sequence[Job]) -> Iterator[tuple[int, Any]]:
        with pinned():  # one BLAS thread, as in the pool workers: identical results
            for index, job in enumerate(jobs):
                yield index, fn(*job)


class ProcessPoolRunner(Executor):
    """A local pool of ``workers`` processes (spawn start method, one BLAS thread each).

    Each worker holds one job at a time, so the coordinator knows which run a dead worker
    (OOM killer, ``kill -9``) was computing: that run is retried on a fresh worker, at most
    :data:`MAX_ATTEMPTS` times in all, then reported as :class:`WorkerLost`. Workers ignore
    SIGINT/SIGHUP (the coordinator decides), and die with their coordinator
    (:mod:`lgt.sweep.worker`).
    """

    name = "process pool"

    def __init__(self, workers: int, max_attempts: int = MAX_ATTEMPTS) -> None:
        self.workers = workers
        self.max_attempts = max_attempts
        self._context = multiprocessing.get_context("spawn")
        self._procs: list[WorkerProcess] = []

    def _spawn(self) -> "WorkerProcess":
        worker = WorkerProcess(self._context)
        self._procs.append(worker)
        return worker

    def run(self, fn: Callable[..., Any], jobs: Sequence[Job]) -> Iterator[tuple[int, Any]]:
        queue = deque(range(len(jobs)))
        attempts = [0] * len(jobs)
        idle = [w for w in self._procs if w.alive()]
        busy: dict[WorkerProcess, int] = {}

        def lost(index: int, reason: str) -> list[tuple[int, Any]]:
            """Retry the job, or report it lost after ``max_attempts``."""
            if attempts[index] < self.max_attempts:
                queue.appendleft(index)
                return []
            return [(index, WorkerLost(reason, attempts[index]))]

        def dispatch() -> list[tuple[int, Any]]:
            given_up = []
            while queue and (idle or len(busy) < self.workers):
                worker = idle.pop() if idle else self._spawn()
                index = queue.popleft()
                attempts[index] += 1
                if worker.send((fn, jobs[index])):
                    busy[worker] = index
                else:  # died before taking the job
                    self._discard(worker)
                    given_up += lost(index, "worker process ended before taking the run")
            return given_up

        with on_abort(self.kill_all):
            while queue or busy:
                ready = dispatch()
                for worker, message in wait_for_workers(busy):
                    index = busy.pop(worker)
                    if message is None:
                        reason = worker.death_reason()
                        self._discard(worker)
                        ready += lost(index, reason)
                        continue
                    ok, value = message
                    idle.append(worker)
                    if not ok:
                        raise value
                    ready.append((index, value))
                ready += dispatch()  # workers compute while the coordinator stores results
                yield from ready

    def _discard(self, worker: "WorkerProcess") -> None:
        worker.kill()
        if worker in self._procs:
            self._procs.remove(worker)

    def kill_all(self) -> None:
        """SIGKILL and reap every worker now (second signal, or cancellation)."""
        for worker in self._procs:
            worker.kill()
        self._procs = []

    def shutdown(self, cancel: bool = False) -> None:
        if cancel:
            self.kill_all()
            return
        for worker in self._procs:
            worker.stop()
        self._procs = []

    def describe(self) -> str:
        return f"process pool ({self.workers} workers)"


class DaskRunner(Executor):
    """dask.distributed: a scheduler address, a new LocalCluster, or an existing client."""

    name = "dask"

    def __init__(self, scheduler: str | None = None, local_workers: int | None = None,
                 client: Any = None) -> None:
        try:
            import dask
            from distributed import Client, LocalCluster
        except ImportError:
            raise ConfigError("--scheduler" if scheduler else "--dask-local",
                              scheduler or local_workers,
                              "needs dask.distributed: pip install 'fluxline[cluster]'") from None
        self._cluster = None
        self._own_client = client is None
        if client is not None:
            self.client = client
        elif scheduler is not None:
            try:
                self.client = Client(scheduler)
            except (OSError, ValueError) as exc:  # unreachable or malformed address: one line, exit 2
                raise ConfigError("--scheduler", scheduler, f"cannot connect ({exc})") from None
        else:
            key = "distributed.nanny.pre-spawn-environ"
            environ = {**dask.config.get(key, default={}), **single_thread_environ()}
            with dask.config.set({key: environ,
                                  "distributed.scheduler.allowed-failures": MAX_ATTEMPTS - 1}):
                self._cluster = LocalCluster(n_workers=local_workers, threads_per_worker=1,
                                             processes=True, dashboard_address=None)
            self.client = Client(self._cluster)
        self.client.run(pin_blas_threads)
        self._futures: list[Any] = []

    def run(self, fn: Callable[..., Any], jobs: Sequence[Job]) -> Iterator[tuple[int, Any]]:
        """Yield results as they finish; a run whose workers died more often than the
        scheduler's ``allowed-failures`` (set to ``MAX_ATTEMPTS - 1`` for a LocalCluster we
        start) comes back as :class:`WorkerLost`."""
        from distributed import as_completed
        from distributed.scheduler import KilledWorker

        self._futures = [self.client.submit(fn, *job, pure=False) for job in jobs]
        index_of = {future.key: i for i, future in enumerate(self._futures)}
        for future in as_completed(self._futures):
            index = index_of[future.key]
            try:
                value = future.result()
            except KilledWorker as exc:
                value = WorkerLost(f"dask worker died while running it ({exc})", MAX_ATTEMPTS)
            yield index, value
            future.release()

    def shutdown(self, cancel: bool = False) -> None:
        if cancel and self._futures:
            self.client.cancel(self._futures)
        self._futures = []
        if self._own_client:
            self.client.close()
        if self._cluster is not None:
            self._cluster.close()

    def describe(self) -> str:
        workers = len(self.client.scheduler_info().get("workers", {}))
        return f"dask ({workers} workers at {self.client.scheduler.address})"


def make_executor(workers: int | None = None, scheduler: str | None = None,
                  dask_local: int | None = None) -> Executor:
    """Pick the executor from the command-line choices (at most one may be given)."""
    given = [(k, v) for k, v in (("--workers", workers), ("--scheduler", scheduler),
                                 ("--dask-local", dask_local)) if v is not None]
    if len(given) > 1:
        raise ConfigError(given[1][0], given[1][1], f"cannot be combined with {given[0][0]}")
    for key, value in (("--workers", workers), ("--dask-local", dask_local)):
        if value is not None and (not isinstance(value, int) or value < 1):
            raise ConfigError(key, value, "must be a positive integer")
    if scheduler is not None:
        return DaskRunner(scheduler=scheduler)
    if dask_local is not None:
        return DaskRunner(local_workers=dask_local)
    if workers is not None and workers > 1:
        return ProcessPoolRunner(workers)
    return SerialExecutor()
