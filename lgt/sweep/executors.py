"""Executors that run sweep points: serial, a local process pool, or dask.distributed.

All expose :meth:`Executor.run`, yielding ``(job index, return value)`` as jobs finish, and
:meth:`Executor.shutdown`. Workers start with BLAS pinned to one thread.
"""

from __future__ import annotations

import multiprocessing
from abc import ABC, abstractmethod
from concurrent.futures import FIRST_COMPLETED, ProcessPoolExecutor, wait
from typing import Any, Callable, Iterator, Sequence

from lgt.errors import ConfigError
from lgt.sweep.pinning import pin_blas_threads, single_thread_environ

Job = tuple[Any, ...]


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
        for index, job in enumerate(jobs):
            yield index, fn(*job)


class ProcessPoolRunner(Executor):
    """A local pool of ``workers`` processes (spawn start method, one BLAS thread each)."""

    name = "process pool"

    def __init__(self, workers: int) -> None:
        self.workers = workers
        self._pool = ProcessPoolExecutor(max_workers=workers,
                                         mp_context=multiprocessing.get_context("spawn"),
                                         initializer=pin_blas_threads)

    def run(self, fn: Callable[..., Any], jobs: Sequence[Job]) -> Iterator[tuple[int, Any]]:
        # Keep at most 2 jobs per worker queued so that Ctrl-C has little to cancel.
        pending: dict[Any, int] = {}
        queue = iter(enumerate(jobs))
        for index, job in queue:
            pending[self._pool.submit(fn, *job)] = index
            if len(pending) >= 2 * self.workers:
                break
        while pending:
            done, _ = wait(pending, return_when=FIRST_COMPLETED)
            for future in done:
                index = pending.pop(future)
                yield index, future.result()
                nxt = next(queue, None)
                if nxt is not None:
                    pending[self._pool.submit(fn, *nxt[1])] = nxt[0]

    def shutdown(self, cancel: bool = False) -> None:
        self._pool.shutdown(wait=not cancel, cancel_futures=cancel)

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
            with dask.config.set({key: environ}):
                self._cluster = LocalCluster(n_workers=local_workers, threads_per_worker=1,
                                             processes=True, dashboard_address=None)
            self.client = Client(self._cluster)
        self.client.run(pin_blas_threads)
        self._futures: list[Any] = []

    def run(self, fn: Callable[..., Any], jobs: Sequence[Job]) -> Iterator[tuple[int, Any]]:
        from distributed import as_completed

        self._futures = [self.client.submit(fn, *job, pure=False) for job in jobs]
        index_of = {future.key: i for i, future in enumerate(self._futures)}
        for future in as_completed(self._futures):
            yield index_of[future.key], future.result()
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
