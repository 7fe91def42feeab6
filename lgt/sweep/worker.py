"""One pool worker process: a pipe, one job at a time, and no life after its coordinator.

The worker (spawned, so it imports nothing of the coordinator's state) first pins BLAS to one
thread, ignores SIGINT and SIGHUP (a terminal sends those to the whole process group; the
coordinator decides what stops), and arranges to die with its coordinator:

* Linux: ``prctl(PR_SET_PDEATHSIG, SIGKILL)`` — the kernel kills the worker when the
  coordinator dies, even by SIGKILL;
* everywhere: a watchdog thread that exits the worker once its parent pid changes (the
  fallback where ``prctl`` is missing; it also closes the race of a parent dying before the
  ``prctl`` call). The watchdog is not counted in the runs' ``threads`` audit.

So a killed sweep leaves no orphans holding its stdout/stderr (``fluxline sweep … | tee log``
ends).
"""

from __future__ import annotations

import ctypes
import os
import signal
import threading
import time
from multiprocessing.connection import Connection, wait
from typing import Any, Iterable, Iterator

#: prctl option number (linux/prctl.h).
PR_SET_PDEATHSIG = 1
#: Seconds between the watchdog's parent checks.
WATCHDOG_PERIOD = 0.5
#: Name of the watchdog thread (excluded from the BLAS thread audit).
WATCHDOG_NAME = "fluxline-parent-watchdog"
#: Seconds a worker gets to exit after a polite stop before it is killed.
STOP_GRACE = 2.0


class WorkerProcess:
    """Coordinator-side handle of one worker process."""

    def __init__(self, context: Any) -> None:
        self.conn, child = context.Pipe(duplex=True)
        self.process = context.Process(target=worker_main, args=(child, os.getpid()), daemon=True)
        self.process.start()
        child.close()

    def alive(self) -> bool:
        """Whether the process still runs."""
        return self.process.is_alive()

    def send(self, message: Any) -> bool:
        """Send a job; False if the worker is gone."""
        try:
            self.conn.send(message)
            return True
        except (OSError, EOFError, BrokenPipeError):
            return False

    def death_reason(self) -> str:
        """Why the worker ended, e.g. ``worker 1234 was killed by SIGKILL (...)``."""
        self.process.join(timeout=5)
        code = self.process.exitcode
        pid = self.process.pid
        if code is None:
            return f"worker {pid} closed its pipe"
        if code < 0:
            name = signal.Signals(-code).name
            hint = (" (the kernel's out-of-memory killer sends SIGKILL; check the memory per "
                    "worker)" if -code == signal.SIGKILL else "")
            return f"worker {pid} was killed by {name}{hint}"
        return f"worker {pid} exited with status {code}"

    def kill(self) -> None:
        """SIGKILL the worker and reap it."""
        try:
            if self.process.is_alive():
                self.process.kill()
            self.process.join(timeout=5)
        except (OSError, ValueError, AssertionError):
            pass
        self.conn.close()

    def stop(self) -> None:
        """Ask the worker to exit; kill it if it has not after :data:`STOP_GRACE` seconds."""
        self.send(None)
        self.process.join(timeout=STOP_GRACE)
        self.kill()


def wait_for_workers(busy: Iterable[WorkerProcess]) -> Iterator[tuple[WorkerProcess, Any]]:
    """Block until some busy workers answer or die; yield ``(worker, (ok, value))`` for an
    answer and ``(worker, None)`` for a death."""
    busy = list(busy)
    if not busy:
        return
    handles = {}
    for w in busy:
        handles[w.conn] = w
        handles[w.process.sentinel] = w
    ready = wait(list(handles))
    seen = set()
    for handle in ready:
        worker = handles[handle]
        if worker in seen:
            continue
        seen.add(worker)
        message = None
        if worker.conn.poll():
            try:
                message = worker.conn.recv()
            except (EOFError, OSError):
                message = None
        yield worker, message


# ------------------------------------------------------------------------------ worker side
def worker_main(conn: Connection, parent_pid: int) -> None:
    """Serve ``(fn, args)`` jobs from ``conn`` until ``None`` or the pipe closes."""
    _prepare(parent_pid)
    while True:
        try:
            message = conn.recv()
        except (EOFError, OSError):
            return
        if message is None:
            return
        fn, args = message
        try:
            answer = (True, fn(*args))
        except BaseException as exc:  # sent back; the coordinator decides
            answer = (False, exc)
        try:
            conn.send(answer)
        except (EOFError, OSError):
            return
        except Exception as exc:  # unpicklable result or error
            conn.send((False, RuntimeError(f"cannot send the result back: {exc}")))


def _prepare(parent_pid: int) -> None:
    from lgt.sweep.pinning import pin_blas_threads

    pin_blas_threads()
    for s in (signal.SIGINT, signal.SIGHUP):
        signal.signal(s, signal.SIG_IGN)
    _set_parent_death_signal()
    threading.Thread(target=_watchdog, args=(parent_pid,), name=WATCHDOG_NAME, daemon=True).start()


def _set_parent_death_signal() -> bool:
    """Ask the Linux kernel to SIGKILL this process when its parent dies."""
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        return libc.prctl(PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def _watchdog(parent_pid: int) -> None:
    while True:
        if os.getppid() != parent_pid:
            os._exit(1)
        time.sleep(WATCHDOG_PERIOD)


def own_threads() -> int:
    """Threads of this process started by Fluxline's worker machinery (the watchdog)."""
    return sum(t.name == WATCHDOG_NAME for t in threading.enumerate())
