"""The one registry of runnable tasks, and the one table of which config sections each reads.

A task is ``validate(config) -> typed resolved config`` (:mod:`lgt.resolved`; raises
:class:`~lgt.errors.ConfigError` / :class:`~lgt.errors.ResourceError`, does no heavy work) and
``run(resolved, **options) -> RunResult``. Every command-line command that runs physics is a
thin face over one task (``fluxline spectrum`` → ``spectrum``, …), and ``[sweep] task`` may name
any of them.

:data:`TASKS` is the table: task name → module, validator, runner and the sections it reads.
Its modules are imported on first use (worker processes included), so no module registers
itself on import. **To add a task**: write its validator and runner, add one line to
:data:`TASKS`. (:func:`register_task` adds a task at run time, for tests and plug-ins.)

Section policy (checked by :meth:`Task.validate` before the task's own validator):

* a section no task reads is refused as unknown (the closest known name is suggested);
* a section another task reads is refused, naming the tasks that read it, so a config never
  carries keys that silently do nothing;
* ``[sweep]`` is read by ``fluxline sweep`` only; there is no ``[output]`` section (give
  ``--output FILE`` on the command line) and no ``[hardware]`` section in a run config (a
  hardware profile is its own TOML file, named by ``[variational] hardware_profile``).
"""

from __future__ import annotations

import difflib
import importlib
import time
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping

from lgt.config import as_int, check_keys, table
from lgt.errors import ConfigError
from lgt.resolved import ResolvedConfig, SpectrumConfig
from lgt.results import RunResult


@dataclass(frozen=True)
class Task:
    """A registered task.

    Attributes
    ----------
    name : str
        Task name used in configs (``[sweep] task``) and stored in results.
    sections : tuple of str
        Config sections the task reads; any other section is refused.
    required : tuple of str
        Sections that must be present.
    module, validator, runner : str
        Where the functions live (imported on first use).
    """

    name: str
    sections: tuple[str, ...]
    required: tuple[str, ...] = ("model",)
    module: str = ""
    validator: str = ""
    runner: str = ""
    functions: tuple[Callable, Callable] | None = field(default=None, compare=False, repr=False)

    def _functions(self) -> tuple[Callable, Callable]:
        if self.functions is not None:
            return self.functions
        mod = importlib.import_module(self.module)
        return getattr(mod, self.validator), getattr(mod, self.runner)

    def validate(self, config: Mapping[str, Any]) -> ResolvedConfig:
        """Check the sections against :attr:`sections`, then run the task's validator (once).

        Each validator returns a resolved configuration of its own task as is; one of another
        task is refused by the section check.
        """
        check_sections(config, self)
        return self._functions()[0](config)

    def run(self, resolved: Mapping[str, Any], **options: Any) -> RunResult:
        """Run on a resolved configuration; a plain mapping (e.g. the stored form of a sweep
        point, in a worker process) is validated first."""
        if not isinstance(resolved, ResolvedConfig):
            resolved = self.validate(resolved)
        return self._functions()[1](resolved, **options)


_MODEL_RUN = ("model", "initial", "evolution", "variational")

#: The task table: name → where its validator and runner live and which sections it reads.
TASKS: dict[str, Task] = {t.name: t for t in (
    Task("spectrum", ("model", "spectrum"), ("model",), "lgt.tasks", "validate_spectrum", "run_spectrum"),
    Task("potential", ("model", "potential"), ("model",), "lgt.potential",
         "validate_potential", "run_potential"),
    Task("evolve", ("model", "initial", "evolution"), ("model", "evolution"), "lgt.evolution",
         "validate_evolution_config", "run_evolution"),
    Task("fit", _MODEL_RUN, ("model",), "lgt.variational.workflow", "validate_variational_config", "run_fit"),
    Task("size", _MODEL_RUN, ("model",), "lgt.variational.workflow", "validate_variational_config",
         "run_size"),
    Task("continuum", ("continuum",), ("continuum",), "lgt.continuum", "resolve_continuum", "run_continuum"),
)}

#: Sections that are not task input, with the reason they are refused in a run config.
NOT_TASK_SECTIONS = {
    "sweep": "is read by 'fluxline sweep' only",
    "output": "is not a config section; give --output FILE on the command line",
    "hardware": "belongs in a hardware profile file; name it with [variational] hardware_profile",
}

_EXTRA: dict[str, Task] = {}


def register_task(name: str, validate: Callable[[Mapping], Any], run: Callable[..., RunResult],
                  sections: tuple[str, ...] = ("model",)) -> Task:
    """Add (or replace) a run-time task ``name`` (tests, plug-ins) and return it."""
    task = Task(name, tuple(sections), (), functions=(validate, run))
    _EXTRA[name] = task
    return task


def task_names() -> tuple[str, ...]:
    """Every task name that can be requested."""
    return tuple(sorted(set(TASKS) | set(_EXTRA)))


def get_task(name: str, key: str = "task") -> Task:
    """The task ``name``; ConfigError naming ``key`` for an unknown name."""
    task = _EXTRA.get(name) or TASKS.get(name)
    if task is None:
        raise ConfigError(key, name, f"unknown task; known tasks are {', '.join(task_names())}")
    return task


def readers(section: str) -> tuple[str, ...]:
    """Names of the tasks that read ``section``."""
    return tuple(t.name for t in TASKS.values() if section in t.sections)


def known_sections() -> tuple[str, ...]:
    """Every section some task reads, in table order."""
    return tuple(dict.fromkeys(s for t in TASKS.values() for s in t.sections))


def check_sections(config: Mapping[str, Any], task: Task) -> None:
    """Refuse sections ``task`` does not read (naming who reads them) and missing required ones.

    Raises
    ------
    ConfigError
        Keyed by the section name.
    """
    if not isinstance(config, Mapping):
        raise ConfigError("config", config, "must be a table of sections")
    for name, value in config.items():
        if name in task.sections:
            if not isinstance(value, Mapping):
                raise ConfigError(name, value, "must be a table")
            continue
        if name in NOT_TASK_SECTIONS:
            reason = NOT_TASK_SECTIONS[name]
        elif readers(name):
            reason = (f"is not read by the {task.name} task (it reads "
                      f"{', '.join(f'[{s}]' for s in task.sections)}); [{name}] is read by "
                      f"{', '.join(readers(name))}")
        else:
            close = difflib.get_close_matches(str(name), known_sections() + tuple(NOT_TASK_SECTIONS), n=1)
            hint = f"did you mean [{close[0]}]? " if close else ""
            reason = f"unknown section; {hint}the {task.name} task reads " + \
                     ", ".join(f"[{s}]" for s in task.sections)
        raise ConfigError(name, _section_summary(value), reason)
    for name in task.required:
        if name not in config:
            raise ConfigError(name, None, f"section is required by the {task.name} task")


def _section_summary(value: Any) -> Any:
    """What an error shows of a refused section: its key names, not its whole content."""
    return f"[{', '.join(map(str, value))}]" if isinstance(value, Mapping) else value


# ------------------------------------------------------------------------ the spectrum task
SPECTRUM_KEYS = ("count", "method", "bond_dimension")  # method = "mps": lgt.mps.dmrg
#: Most levels a spectrum run may request (Lanczos on more is a dense problem anyway).
MAX_SPECTRUM_COUNT = 10_000


def validate_spectrum(config: Mapping[str, Any]) -> SpectrumConfig:
    """Resolve ``[model]`` and ``[spectrum]`` (``count`` in 1..10 000, default 6); size guard."""
    if isinstance(config, SpectrumConfig):
        return config
    from lgt.modelcheck import checked_model, guard_memory

    model = checked_model(config)
    section = table(config, "spectrum")
    check_keys(section, SPECTRUM_KEYS, "spectrum")
    count = as_int(section.get("count", 6), "spectrum.count", minimum=1, maximum=MAX_SPECTRUM_COUNT)
    from lgt.mps.dmrg import resolve_solver

    solver = resolve_solver(section, "spectrum")
    if not solver:  # exact diagonalization: the physical subspace must fit in memory
        guard_memory(model, "spectrum", stored_vectors=max(20, 2 * count + 1))
    return SpectrumConfig(model, count, solver)


def run_spectrum(resolved: SpectrumConfig, progress: bool = False) -> RunResult:
    """Lowest ``count`` energies of the physical-subspace Hamiltonian, and gaps E_k − E_0.

    Returns arrays ``energies`` and ``gaps`` (lattice energy) and the attributes ``dimension``
    (physical-subspace dimension) and ``levels_returned`` (``count`` capped at the dimension).
    With ``progress``, a Lanczos run (dimension above :data:`lgt.spectrum.DENSE_THRESHOLD`)
    prints a line on stderr when it starts and after each Lanczos round.
    """
    import sys

    import numpy as np

    from lgt.basis import PhysicalBasis
    from lgt.hamiltonian import build_hamiltonian
    from lgt.spectrum import DENSE_THRESHOLD, lowest_levels

    if resolved.solver.get("method") == "mps":  # DMRG on long chains
        from lgt.mps.dmrg import run_spectrum_task
        return run_spectrum_task(resolved)
    say = (lambda line: print(f"fluxline: {line}", file=sys.stderr, flush=True)) if progress else None
    t0 = time.perf_counter()
    basis = PhysicalBasis(resolved.model)
    hamiltonian = build_hamiltonian(basis)
    t1 = time.perf_counter()
    count = min(resolved.count, basis.dimension)
    if say and basis.dimension > DENSE_THRESHOLD:
        say(f"spectrum: Hamiltonian of {basis.dimension} physical states built in {t1 - t0:.1f} s "
            f"({hamiltonian.nnz} non-zeros); Lanczos for the {count} lowest levels ...")
    energies = np.sort(np.asarray(lowest_levels(hamiltonian, count, progress=say), dtype=np.float64))
    t2 = time.perf_counter()
    return RunResult(task="spectrum", parameters=resolved.to_dict(),
                     arrays={"energies": energies, "gaps": energies - energies[0]},
                     attributes={"dimension": int(basis.dimension), "levels_returned": count},
                     timings={"build": t1 - t0, "solve": t2 - t1})
