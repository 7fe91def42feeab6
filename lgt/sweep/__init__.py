"""Batch sweeps: expand a ``[sweep]`` config into points, run them on an executor, store
each run in a resumable HDF5 file, and read the results back.

Submodules are imported lazily so that worker processes can pin BLAS threads
(:mod:`lgt.sweep.pinning`) before numpy is imported.
"""

from __future__ import annotations

import importlib
from typing import Any

_EXPORTS = {
    "expand_sweep": "lgt.sweep.plan",
    "SweepPlan": "lgt.sweep.plan",
    "SweepPoint": "lgt.sweep.plan",
    "run_sweep": "lgt.sweep.runner",
    "SweepSummary": "lgt.sweep.runner",
    "make_executor": "lgt.sweep.executors",
    "load_sweep": "lgt.sweep.reader",
    "list_runs": "lgt.sweep.reader",
    "to_xarray": "lgt.sweep.reader",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        return getattr(importlib.import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'lgt.sweep' has no attribute {name!r}")
