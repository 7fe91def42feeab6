"""Hardware layers: native brickwork on the K link qudits (two-level rotations on every qudit,
then the configured entangler on even bonds, then odd bonds; one angle per gate).

They know nothing of Gauss's law, so they run on the d^K register, where H acts as zero outside
the physical subspace, and leak out of it. Their native cost is that of the native circuit export
writes (the brickwork with any gate the profile lacks replaced by its exact block).
"""

from __future__ import annotations

from circuits.layers import NativeLayerSpec, build_layers, native_layer_builder
from circuits.register import Space
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import register_hamiltonian
from lgt.variational.families import register_family
from lgt.variational.families.base import LayerFamily, ModelAnsatz

#: Largest register (d^K amplitudes) on which hardware layers are fitted.
MAX_HARDWARE_REGISTER = 2_000_000


def hardware_ansatz(basis: PhysicalBasis, layers: int, spec: NativeLayerSpec | None = None) -> ModelAnsatz:
    """``layers`` native brickwork layers on the K link qudits (register space)."""
    p = basis.params
    if p.n_links < 2:
        raise ValueError("hardware layers need at least two link qudits")
    reg = Space.qudits(p.n_links, p.levels)
    circuit = build_layers(reg, layers, native_layer_builder(reg, spec))
    H = register_hamiltonian(p, physical_only=True, basis=basis)
    return ModelAnsatz(HardwareFamily.name, "register", circuit, H, basis, layers)


class HardwareFamily(LayerFamily):
    """Native brickwork layers on the link register."""

    name = "hardware"
    summary = "native brickwork on the link register (leaks out of the physical subspace)"
    fit_space = "register"

    def unavailable(self, params):
        if params.n_links < 2:
            return "hardware layers need at least two link qudits"
        if params.levels ** params.n_links > MAX_HARDWARE_REGISTER:
            return (f"hardware layers run on the full register, {params.levels}^{params.n_links} "
                    "amplitudes is too large; use family = \"symmetric\"")
        return None

    def build(self, basis, layers, options, space=None):
        if space not in (None, "register"):
            raise ValueError("hardware layers act on the register only")
        return hardware_ansatz(basis, layers, options.spec)

    def native_cost(self, ansatz, costing):
        """The exported native circuit (the brickwork's own gates when it is not built)."""
        from lgt.variational.budget import first_layer  # budget imports the registry

        return costing.of_export(ansatz, lambda: first_layer(ansatz.circuit),
                                 lambda: costing.of_circuit(ansatz.circuit))


register_family(HardwareFamily())
