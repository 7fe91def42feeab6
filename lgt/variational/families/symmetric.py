"""Symmetric layers: per layer exp(−iθ h) over the model's own terms.

They commute with Gauss's law, so fits run on the physical subspace (``space="physical"``),
far smaller than the register; the same circuit on the register (``space="register"``) gives
identical states and is what a lab would run (and what is exported). Their native cost is that
of the native circuit export writes for the register form (:meth:`~lgt.variational.budget.Costing.of_export`),
or the summed compiled cost of each term exponential (:mod:`lgt.variational.native_cost`) when
that circuit is not built.
"""

from __future__ import annotations

from circuits.circuit import ParametrizedCircuit
from circuits.layers import build_layers, generator_layer_builder
from circuits.register import Space
from circuits.terms import LocalTerm as CircuitTerm
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian, local_terms, physical_terms, register_hamiltonian
from lgt.model import ModelParams
from lgt.variational.families import register_family
from lgt.variational.families.base import SPACES, LayerFamily, ModelAnsatz

#: One angle per term, or one per term type (diagonal kind / even hops / odd hops).
ANGLE_MODES = ("term", "type")


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
    kinds: list[str] = []
    keys = [kind if kind != "hopping" else group for kind, _, group in order]
    for key in keys:
        if key not in kinds:
            kinds.append(key)
    return [kinds.index(key) for key in keys]


def symmetric_register_circuit(p: ModelParams, layers: int, angles: str = "term") -> ParametrizedCircuit:
    """The register form of ``layers`` symmetric layers (local gates on the K link qudits; no
    d^K object is built)."""
    order = ordered_terms(p)
    by_key = {(t.kind, t.index): CircuitTerm(t.qudits, t.matrix) for t in local_terms(p)}
    reg = Space.qudits(p.n_links, p.levels)
    return build_layers(reg, layers, generator_layer_builder(reg, [by_key[(k, i)] for k, i, _ in order],
                                                             _groups(order, angles)))


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
        circuit = build_layers(sp_space, layers, generator_layer_builder(sp_space, terms, groups))
    else:
        circuit = symmetric_register_circuit(p, layers, angles)
        H = register_hamiltonian(p, physical_only=True, basis=basis)
    labels = [f"{k}{i}" for k, i, _ in order]
    return ModelAnsatz(SymmetricFamily.name, space, circuit, H, basis, layers, labels)


class SymmetricFamily(LayerFamily):
    """Exponentials of the model's own terms (Gauss's law kept exactly)."""

    name = "symmetric"
    summary = "exponentials of the model's own terms (keep Gauss's law; fitted on the physical subspace)"
    fit_space = "physical"

    def build(self, basis, layers, options, space=None):
        return symmetric_ansatz(basis, layers, options.angles, space or self.fit_space)

    def native_cost(self, ansatz, costing):
        """The exported native circuit of the register form (summed term exponentials of one
        layer, times D, when it is not built)."""
        return costing.of_export(ansatz, lambda: symmetric_register_circuit(ansatz.basis.params, 1),
                                 lambda: costing.of_terms(ansatz.labels, ansatz.layers))


register_family(SymmetricFamily())
