"""What a layer family is: the circuit it builds for the model, the space it runs on, its native
cost and its export. Concrete families live in sibling modules and register themselves."""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, ClassVar

import numpy as np
import scipy.sparse as sp

from circuits.circuit import ParametrizedCircuit
from circuits.layers import NativeLayerSpec
from lgt.basis import PhysicalBasis
from lgt.model import ModelParams

if TYPE_CHECKING:  # imported for annotations only (budget imports the registry at run time)
    from lgt.variational.budget import CircuitCost, Costing

#: Spaces a family's circuit can act on: the Gauss-law (physical) subspace or the d^K link register.
SPACES = ("physical", "register")


@dataclass
class ModelAnsatz:
    """A parameterised circuit for the model together with the space it acts on.

    Attributes
    ----------
    family : name of the registered layer family that built it
    space : {"physical", "register"}
    circuit : ParametrizedCircuit
    hamiltonian : sparse matrix of H in the circuit's space (zero off the physical subspace
        on the register).
    basis : PhysicalBasis
    layers : number of layers D
    labels : per-gate label within a layer (``"hopping3"``, ``"mass1"`` …; empty if unnamed)
    """

    family: str
    space: str
    circuit: ParametrizedCircuit
    hamiltonian: sp.csr_matrix
    basis: PhysicalBasis
    layers: int
    labels: list[str] = field(default_factory=list)

    @property
    def n_params(self) -> int:
        return self.circuit.n_params

    def embed(self, physical_vector: np.ndarray) -> np.ndarray:
        """A physical-subspace vector as a vector of the circuit's space."""
        v = np.asarray(physical_vector, dtype=np.complex128)
        return v if self.space == "physical" else self.basis.to_register(v)

    def to_physical(self, vector: np.ndarray) -> tuple[np.ndarray, float]:
        """(physical components, leaked weight) of a vector of the circuit's space."""
        if self.space == "physical":
            return np.asarray(vector), 0.0
        return self.basis.from_register(vector)


@dataclass(frozen=True)
class LayerOptions:
    """What a family may read when it builds layers (from ``[variational]``).

    angles : ``"term"`` (one angle per gate) or ``"type"`` (one per term type), for families
        that share angles; spec : the native brickwork layer of the hardware profile.
    """

    angles: str = "term"
    spec: NativeLayerSpec = field(default_factory=NativeLayerSpec)

    @classmethod
    def from_settings(cls, settings) -> "LayerOptions":
        """Options of a :class:`~lgt.variational.settings.VariationalSettings`."""
        return cls(settings.angles, settings.native_spec())


class LayerFamily(ABC):
    """A layer family: D layers of gates that are the identity at zero parameters.

    Class attributes: ``name`` (the ``[variational] family`` value), ``summary`` (one line for
    messages and docs) and ``fit_space`` (where fits run by default: ``"physical"`` for layers
    that keep Gauss's law, ``"register"`` otherwise).
    """

    name: ClassVar[str]
    summary: ClassVar[str]
    fit_space: ClassVar[str]

    def unavailable(self, params: ModelParams) -> str | None:
        """Why this family cannot be fitted for ``params`` (None when it can)."""
        return None

    @abstractmethod
    def build(self, basis: PhysicalBasis, layers: int, options: LayerOptions,
              space: str | None = None) -> ModelAnsatz:
        """``layers`` layers on ``space`` (default :attr:`fit_space`)."""

    @abstractmethod
    def native_cost(self, ansatz: ModelAnsatz, costing: "Costing") -> "CircuitCost":
        """Native gate counts, predicted fidelity and duration of the whole D-layer circuit."""

    def export(self, basis: PhysicalBasis, layers: int, options: LayerOptions,
               parameters: np.ndarray, profile: Any, form: str = "native") -> list[dict[str, Any]]:
        """One circuit document (docs/circuits.md format) per row of ``parameters``, in register
        form (what a lab runs): ``form="native"`` the profile's native gates only (exact blocks of
        :mod:`circuits.native_export`), ``form="generator"`` the circuit's own gates."""
        from circuits.export import to_dict
        from circuits.native_export import native_circuit, native_document

        ansatz = self.build(basis, layers, options, space="register")
        rows = np.atleast_2d(parameters)
        if form == "generator":
            return [to_dict(ansatz.circuit, row) for row in rows]
        gate_set, blocks = profile.gate_set(basis.params.levels), {}
        return [native_document(native_circuit(ansatz.circuit, row, gate_set, blocks), profile) for row in rows]

    def deepen(self, params: np.ndarray, shallow: ModelAnsatz, deep: ModelAnsatz) -> np.ndarray:
        """Parameters of ``deep`` giving the same state as ``params`` on ``shallow``: the extra
        layers at zero angles (the identity), appended after the shallow ones."""
        out = np.zeros(deep.n_params)
        out[:shallow.n_params] = params
        return out
