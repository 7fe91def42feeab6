"""Pin BLAS/OpenMP thread pools to one thread per worker (imports nothing heavy)."""

from __future__ import annotations

import importlib
import os
from contextlib import contextmanager
from typing import Iterator

#: Environment variables read by the common BLAS / OpenMP runtimes when they load.
THREAD_VARIABLES = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS",
                    "BLIS_NUM_THREADS", "VECLIB_MAXIMUM_THREADS", "NUMEXPR_NUM_THREADS")


def single_thread_environ() -> dict[str, str]:
    """The environment settings that request one BLAS thread."""
    return {name: "1" for name in THREAD_VARIABLES}


def pin_blas_threads() -> None:
    """Request one BLAS thread in this process.

    Effective for BLAS libraries loaded afterwards (the usual case in a fresh worker, where this
    runs before numpy is imported); when ``threadpoolctl`` is installed, already-loaded
    libraries are limited as well.
    """
    os.environ.update(single_thread_environ())
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return
    threadpool_limits(1)


@contextmanager
def pinned() -> Iterator[None]:
    """Limit already-loaded BLAS/OpenMP libraries to one thread inside the block (restored
    afterwards), so that a serial sweep computes exactly like a pinned pool worker: multi-
    threaded BLAS sums in a different order (results differ in the last digits)."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        yield
        return
    for module in ("numpy", "scipy.linalg"):  # load their BLAS copies so the limit reaches them
        try:
            importlib.import_module(module)
        except ImportError:
            pass
    with threadpool_limits(1):
        yield
