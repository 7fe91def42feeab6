"""Job functions for process-pool fault tests (importable by spawned workers)."""

from __future__ import annotations

import os
import signal
from pathlib import Path


def square_or_die(x: int, die_on: int) -> int:
    """``x**2``, but the worker kills itself (SIGKILL, like the OOM killer) when ``x == die_on``."""
    if x == die_on:
        os.kill(os.getpid(), signal.SIGKILL)
    return x * x


def die_once(x: int, marker: str) -> int:
    """Kill the worker the first time it is called (``marker`` file records the attempt)."""
    path = Path(marker)
    if not path.exists():
        path.write_text(str(os.getpid()))
        os.kill(os.getpid(), signal.SIGKILL)
    return x + 100


def worker_pid(x: int) -> int:
    """The pid of the worker that ran the job."""
    return os.getpid()
