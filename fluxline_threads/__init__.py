"""Thread limits shared by ``lgt`` and ``circuits`` (neither owns them): run OpenBLAS on one
thread inside a block (per calling thread; restored afterwards).

Small dense products, eigensolves and the L-BFGS-B updates of circuit fits are far slower with
OpenBLAS threading than without, above all on a busy machine (measured: a 244 × 244 Hermitian
eigensolve 6 ms vs 40–600 ms; a K = 7 symmetric-layer fit step 0.37 s vs 0.92 s, on 2 shared
cores). Only OpenBLAS builds exposing ``openblas_set_num_threads_local`` are affected; elsewhere
this does nothing.
"""

from __future__ import annotations

import ctypes
from contextlib import contextmanager
from functools import lru_cache
from typing import Iterator

__all__ = ["single_threaded_blas"]


@lru_cache(maxsize=1)
def _openblas_libraries() -> tuple:
    """OpenBLAS copies loaded in this process that offer per-thread thread counts (Linux only)."""
    libs = []
    try:
        with open("/proc/self/maps") as fh:
            paths = {line.split()[-1] for line in fh if "openblas" in line.lower() and ".so" in line}
    except OSError:
        return ()
    for path in sorted(paths):
        try:
            lib = ctypes.CDLL(path)
            fn = lib.openblas_set_num_threads_local
        except (OSError, AttributeError):
            continue
        fn.argtypes, fn.restype = [ctypes.c_int], ctypes.c_int
        libs.append(fn)
    return tuple(libs)


@contextmanager
def single_threaded_blas() -> Iterator[None]:
    """Run BLAS/LAPACK on one thread in this thread (restored afterwards).

    See the module docstring for why.
    """
    setters = _openblas_libraries()
    previous = [fn(1) for fn in setters]
    try:
        yield
    finally:
        for fn, n in zip(setters, previous):
            fn(n)
