"""Registry of runnable tasks (``spectrum``, ``evolve``, ``fit``, ``size``, ...).

A task is a pair of functions: ``validate(config) -> resolved config`` (raises
:class:`~lgt.errors.ConfigError`, does no heavy work) and ``run(resolved) -> RunResult``.
Modules register their tasks with :func:`register_task` when imported; :data:`TASK_MODULES`
lists which module provides each task name so that :func:`get_task` imports it on demand
(worker processes included). To add a task, register it in its module and add one line here.
"""

from __future__ import annotations

import importlib
import time
from dataclasses import dataclass
from typing import Any, Callable, Mapping

from lgt.config import as_int, check_keys
from lgt.errors import ConfigError
from lgt.results import RunResult

#: Task name -> module that calls :func:`register_task` for it when imported.
TASK_MODULES: dict[str, str] = {
    "spectrum": "lgt.tasks",
    "evolve": "lgt.evolution",
    "fit": "lgt.variational.workflow",
    "size": "lgt.variational.workflow",
    "continuum": "lgt.continuum",
}


@dataclass(frozen=True)
class Task:
    """A registered task.

    Attributes
    ----------
    name : str
        Task name used in configs (``[sweep] task``) and stored in results.
    validate : callable
        ``validate(config) -> resolved config``; raises ConfigError before any work.
    run : callable
        ``run(resolved config) -> RunResult``.
    sections : tuple of str
        Config sections the task reads (a sweep axis elsewhere is rejected).
    """

    name: str
    validate: Callable[[dict], dict]
    run: Callable[[dict], RunResult]
    sections: tuple[str, ...]


_REGISTRY: dict[str, Task] = {}


def register_task(name: str, validate: Callable[[dict], dict], run: Callable[[dict], RunResult],
                  sections: tuple[str, ...] = ("model", "initial", "evolution", "variational",
                                               "spectrum", "hardware", "potential")) -> Task:
    """Register (or replace) the task ``name`` and return it."""
    task = Task(name, validate, run, tuple(sections))
    _REGISTRY[name] = task
    return task


def task_names() -> tuple[str, ...]:
    """Every task name that can be requested (registered or provided by a known module)."""
    return tuple(sorted(set(TASK_MODULES) | set(_REGISTRY)))


def get_task(name: str, key: str = "task") -> Task:
    """The task ``name``, importing its module on first use.

    Raises
    ------
    ConfigError
        For an unknown name, or when the providing module is not available yet.
    """
    if name not in _REGISTRY:
        module = TASK_MODULES.get(name)
        if module is None:
            raise ConfigError(key, name, f"unknown task; known tasks are {', '.join(task_names())}")
        try:
            importlib.import_module(module)
        except ModuleNotFoundError as exc:
            raise ConfigError(key, name, f"task module {module} is not available ({exc})") from None
        if name not in _REGISTRY:
            raise ConfigError(key, name, f"module {module} does not register this task")
    return _REGISTRY[name]


# ------------------------------------------------------------------------ the spectrum task
SPECTRUM_KEYS = ("count", "method", "bond_dimension")  # method = "mps": lgt.mps.dmrg


def validate_spectrum(config: Mapping[str, Any]) -> dict[str, Any]:
    """Resolve ``[model]`` and ``[spectrum]`` (``count`` ≥ 1, default 6) for the spectrum task."""
    from lgt.model import ModelParams

    if "model" not in config:
        raise ConfigError("model", None, "section is required by the spectrum task")
    model = ModelParams.from_dict(config["model"])
    section = config.get("spectrum", {})
    if not isinstance(section, Mapping):
        raise ConfigError("spectrum", section, "must be a table")
    check_keys(section, SPECTRUM_KEYS, "spectrum")
    count = as_int(section.get("count", 6), "spectrum.count", minimum=1)
    from lgt.mps.dmrg import resolve_solver
    return {"model": model.to_dict(), "spectrum": {"count": count, **resolve_solver(section, "spectrum")}}


def run_spectrum(resolved: Mapping[str, Any]) -> RunResult:
    """Lowest ``count`` energies of the physical-subspace Hamiltonian, and gaps E_k − E_0.

    Returns arrays ``energies`` and ``gaps`` (lattice energy) and the attribute ``dimension``
    (physical-subspace dimension); ``count`` is capped at the dimension.
    """
    import numpy as np

    from lgt.basis import PhysicalBasis
    from lgt.hamiltonian import build_hamiltonian
    from lgt.model import ModelParams
    from lgt.spectrum import lowest_levels

    if resolved["spectrum"].get("method") == "mps":  # DMRG on long chains
        from lgt.mps.dmrg import run_spectrum_task
        return run_spectrum_task(resolved)
    t0 = time.perf_counter()
    basis = PhysicalBasis(ModelParams.from_dict(resolved["model"]))
    hamiltonian = build_hamiltonian(basis)
    t1 = time.perf_counter()
    count = min(int(resolved["spectrum"]["count"]), basis.dimension)
    energies = np.sort(np.asarray(lowest_levels(hamiltonian, count), dtype=np.float64))
    t2 = time.perf_counter()
    return RunResult(task="spectrum", parameters=dict(resolved),
                     arrays={"energies": energies, "gaps": energies - energies[0]},
                     attributes={"dimension": int(basis.dimension), "levels_returned": count},
                     timings={"build": t1 - t0, "solve": t2 - t1})


register_task("spectrum", validate_spectrum, run_spectrum, sections=("model", "spectrum"))
