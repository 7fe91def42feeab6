"""Layer families for the model: symmetric layers (exponentials of the model's own terms)
and hardware layers (native brickwork on the link register).

Symmetric layers commute with Gauss's law, so they run on the physical subspace
(``space="physical"``), far smaller than the register; the same circuit on the register
(``space="register"``) gives identical states and is what a lab would run (and export).
Hardware layers run on the d^K register, where H acts as zero outside the physical subspace.
Every family is the identity at zero parameters.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import scipy.sparse as sp

from circuits.circuit import ParametrizedCircuit
from circuits.layers import NativeLayerSpec, build_layers, generator_layer_builder, native_layer_builder
from circuits.register import Space
from circuits.terms import LocalTerm as CircuitTerm
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian, local_terms, physical_terms, register_hamiltonian
from lgt.model import ModelParams

FAMILIES = ("symmetric", "hardware")
ANGLE_MODES = ("term", "type")
SPACES = ("physical", "register")


@dataclass
class ModelAnsatz:
    """A parameterised circuit for the model together with the space it acts on.

    Attributes
    ----------
    family : {"symmetric", "hardware"}
    space : {"physical", "register"}
    circuit : ParametrizedCircuit
    hamiltonian : sparse matrix of H in the circuit's space (zero off the physical subspace
        on the register).
    basis : PhysicalBasis
    labels : per-gate label within a layer (``"hop3"``, ``"mass1"``, ``"ms(2,3)"`` …)
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


def ordered_terms(p: ModelParams) -> list[tuple[str, int, str]]:
    """Term order inside one symmetric layer: diagonal terms, hopping on even links, on odd links.

    Returns ``(kind, index, group)`` with group ``"diagonal"``, ``"hop-even"`` or ``"hop-odd"``;
    terms whose operator vanishes (m = 0, J = 0, w = 0) are left out.
    """
    out: list[tuple[str, int, str]] = []
    if p.mass != 0:
        out += [("mass", n, "diagonal") for n in range(p.sites)]
    if p.coupling != 0:
        out += [("electric", n, "diagonal") for n in range(p.n_links)]
    if p.hopping != 0:
        out += [("hopping", n, "hop-even") for n in range(0, p.n_links, 2)]
        out += [("hopping", n, "hop-odd") for n in range(1, p.n_links, 2)]
    return out


def _groups(order: list[tuple[str, int, str]], angles: str) -> list[int]:
    if angles == "term":
        return list(range(len(order)))
    kinds = []
    for kind, _, group in order:
        key = kind if kind != "hopping" else group
        if key not in kinds:
            kinds.append(key)
    return [kinds.index(kind if kind != "hopping" else group) for kind, _, group in order]


def symmetric_ansatz(basis: PhysicalBasis, layers: int, angles: str = "term",
                     space: str = "physical") -> ModelAnsatz:
    """``layers`` layers of exp(−iθ h) over the model's own terms (one angle per term or per type)."""
    if angles not in ANGLE_MODES:
        raise ValueError(f"angles must be one of {ANGLE_MODES}, got {angles!r}")
    if space not in SPACES:
        raise ValueError(f"space must be one of {SPACES}, got {space!r}")
    order = ordered_terms(basis.params)
    groups = _groups(order, angles)
    p = basis.params
    if space == "physical":
        by_key = {(t.kind, t.index): t.matrix for t in physical_terms(basis)}
        terms = [by_key[(k, i)] for k, i, _ in order]
        sp_space = Space.subspace(basis.dimension)
        H = build_hamiltonian(basis)
    else:
        by_key = {(t.kind, t.index): CircuitTerm(t.qudits, t.matrix) for t in local_terms(p)}
        terms = [by_key[(k, i)] for k, i, _ in order]
        sp_space = Space.qudits(p.n_links, p.levels)
        H = register_hamiltonian(p, physical_only=True, basis=basis)
    circuit = build_layers(sp_space, layers, generator_layer_builder(sp_space, terms, groups))
    labels = [f"{k}{i}" for k, i, _ in order]
    return ModelAnsatz("symmetric", space, circuit, H, basis, layers, labels)


def hardware_ansatz(basis: PhysicalBasis, layers: int, spec: NativeLayerSpec | None = None) -> ModelAnsatz:
    """``layers`` native brickwork layers on the K link qudits (register space)."""
    p = basis.params
    if p.n_links < 2:
        raise ValueError("hardware layers need at least two link qudits")
    reg = Space.qudits(p.n_links, p.levels)
    circuit = build_layers(reg, layers, native_layer_builder(reg, spec))
    H = register_hamiltonian(p, physical_only=True, basis=basis)
    return ModelAnsatz("hardware", "register", circuit, H, basis, layers)


def make_ansatz(basis: PhysicalBasis, family: str, layers: int, angles: str = "term",
                spec: NativeLayerSpec | None = None, space: str | None = None) -> ModelAnsatz:
    """Dispatch on ``family`` (symmetric layers default to the physical subspace)."""
    if family == "symmetric":
        return symmetric_ansatz(basis, layers, angles, space or "physical")
    if family == "hardware":
        return hardware_ansatz(basis, layers, spec)
    raise ValueError(f"family must be one of {FAMILIES}, got {family!r}")
