"""The function every executor runs for one sweep point (in a worker process or thread)."""

from __future__ import annotations

import os
import socket
import time
import traceback
from dataclasses import dataclass, field
from typing import Any

from lgt.results import RunResult


@dataclass
class Outcome:
    """What a worker sends back: the result or the error text, and where/when it ran."""

    result: RunResult | None
    error: str | None
    info: dict[str, Any] = field(default_factory=dict)


def execute_point(task_name: str, resolved: dict[str, Any]) -> Outcome:
    """Run the task ``task_name`` on a resolved point config; never raises ``Exception``.

    ``info`` holds ``started_at`` / ``finished_at`` (Unix seconds), ``wall_seconds``,
    ``cpu_seconds``,
    ``worker`` (``host:pid``) and ``threads`` (OS threads of the worker after the run).
    """
    from lgt.tasks import get_task

    started = time.time()
    t0, c0 = time.perf_counter(), time.process_time()
    try:
        result, error = get_task(task_name).run(resolved), None
    except Exception as exc:  # reported as a failed run, the sweep goes on
        result = None
        error = f"{type(exc).__name__}: {exc}\n{traceback.format_exc(limit=8)}"
    info = {"started_at": started, "finished_at": time.time(),
            "wall_seconds": time.perf_counter() - t0, "cpu_seconds": time.process_time() - c0,
            "worker": f"{socket.gethostname()}:{os.getpid()}", "threads": _thread_count()}
    return Outcome(result, error, info)


def _thread_count() -> int:
    """OS threads of this process after the run, less the worker's own parent watchdog
    (Linux; -1 elsewhere), to audit BLAS pinning."""
    from lgt.sweep.worker import own_threads

    try:
        return len(os.listdir("/proc/self/task")) - own_threads()
    except OSError:
        return -1
