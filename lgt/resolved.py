"""Typed, validated configurations: what each task's validator returns and its runner takes.

A resolved configuration is built once, by the task's validator (:mod:`lgt.tasks`), and then
passed on as is. It is frozen; :meth:`ResolvedConfig.to_dict` gives the plain TOML/JSON form
that result files and sweep run identities store, and validating that form again gives an equal
object (the round trip is tested). For code written against the plain form, a resolved
configuration is also a read-only mapping of its sections (``resolved["model"]``).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from typing import Any, Iterator

from lgt.model import ModelParams


class ResolvedConfig(Mapping):
    """Base of the typed configurations; a read-only mapping view of :meth:`to_dict`."""

    def to_dict(self) -> dict[str, Any]:  # pragma: no cover - every subclass defines it
        raise NotImplementedError

    def __getitem__(self, section: str) -> Any:
        return self.to_dict()[section]

    def __iter__(self) -> Iterator[str]:
        return iter(self.to_dict())

    def __len__(self) -> int:
        return len(self.to_dict())


@dataclass(frozen=True, eq=True)
class SpectrumConfig(ResolvedConfig):
    """Task ``spectrum``: the model, how many levels (``count`` ≥ 1) and the solver (empty: exact
    diagonalization; ``{"method": "mps", "bond_dimension": χ}``: DMRG, :mod:`lgt.mps.dmrg`)."""

    model: ModelParams
    count: int = 6
    solver: Mapping[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"model": self.model.to_dict(), "spectrum": {"count": self.count, **self.solver}}


@dataclass(frozen=True, eq=True)
class PotentialConfig(ResolvedConfig):
    """Task ``potential``: odd charge separations r (sorted, distinct), meson masses wanted and
    the solver (as for :class:`SpectrumConfig`)."""

    model: ModelParams
    distances: tuple[int, ...]
    masses: int = 3
    solver: Mapping[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        return {"model": self.model.to_dict(),
                "potential": {"distances": list(self.distances), "masses": self.masses, **self.solver}}


@dataclass(frozen=True, eq=True)
class EvolutionConfig(ResolvedConfig):
    """Task ``evolve``: model, canonical ``[initial]`` (see :func:`lgt.states.resolve_initial`),
    stored times (lattice units), entanglement cut, observables, drift tolerance, propagator,
    the memory limit given (GiB, or None for the memory available) and the entropies' stride
    (``"auto"`` or a number of stored times); ``mps``: the tensor-network settings of
    ``method = "mps"`` (:func:`lgt.mps.evolve.resolve_mps_evolution`), else None."""

    model: ModelParams
    initial: Mapping[str, Any]
    times: tuple[float, ...]
    cut: int
    observables: tuple[str, ...]
    drift_tolerance: float
    method: str
    memory_limit_gb: float | None = None
    entropy_stride: int | str = "auto"
    mps: Mapping[str, Any] | None = None

    def with_observables(self, names: tuple[str, ...] | list[str]) -> "EvolutionConfig":
        """A copy that also measures ``names`` (known observable names; order kept, no repeats)."""
        from lgt.observables import OBSERVABLES

        unknown = [n for n in names if n not in OBSERVABLES]
        if unknown:
            raise ValueError(f"unknown observables {unknown}")
        return replace(self, observables=tuple(dict.fromkeys((*self.observables, *names))))

    def to_dict(self) -> dict[str, Any]:
        ev: dict[str, Any] = {"times": list(self.times), "cut": self.cut,
                              "observables": list(self.observables),
                              "drift_tolerance": self.drift_tolerance, "method": self.method,
                              "entropy_stride": self.entropy_stride, **(self.mps or {})}
        if self.memory_limit_gb is not None:
            ev["memory_limit_gb"] = self.memory_limit_gb
        return {"model": self.model.to_dict(), "initial": _plain(self.initial), "evolution": ev}


@dataclass(frozen=True, eq=True)
class VariationalConfig(ResolvedConfig):
    """Tasks ``fit`` and ``size``: model, canonical ``[initial]``, the
    :class:`~lgt.variational.settings.VariationalSettings` (``hardware_profile`` resolved to an
    absolute path) and the hardware profile loaded from it (not part of the plain form)."""

    model: ModelParams
    initial: Mapping[str, Any]
    settings: Any
    profile: Any = field(default=None, compare=False, repr=False)

    def to_dict(self) -> dict[str, Any]:
        return {"model": self.model.to_dict(), "initial": _plain(self.initial),
                "variational": self.settings.to_dict()}


def _plain(value: Any) -> Any:
    """A deep copy of nested mappings / sequences as dicts and lists (no shared state)."""
    if isinstance(value, Mapping):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value
