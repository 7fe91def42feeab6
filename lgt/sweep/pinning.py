"""Pin BLAS/OpenMP thread pools to one thread per worker (imports nothing heavy)."""

from __future__ import annotations

import os

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
