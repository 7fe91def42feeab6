"""Layer families; every family is the identity at zero parameters.

(i) Native brickwork on a register (:class:`NativeLayerSpec`): per layer, on each qudit
the configured two-level rotations ``R^{jk}(theta, phi)`` and optional diagonal
phases, then entanglers on bonds ``(q, q+1)`` -- even bonds first, then odd bonds:
Molmer-Sorensen-type ``exp(-i theta P(x)P)`` on a level pair, or a diagonal two-qudit
phase ``exp(-i theta table)``.  One fresh parameter per gate.

(ii) Generator layers: ``exp(-i theta_g term)`` for a caller-ordered list of terms,
one parameter per term or per caller-given group (register or subspace mode).

A circuit is ``n_layers`` layers concatenated; parameters are numbered layer by layer.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from .circuit import ParametrizedCircuit
from .gates import ControlledRotation, DiagonalGate, Gate, MSGate, TwoLevelRotation
from .native import NativeGateSet
from .register import Space
from .terms import Term, term_gates

__all__ = [
    "NativeLayerSpec",
    "layer_spec_for",
    "LayerBuilder",
    "native_layer_builder",
    "generator_layer_builder",
    "build_layers",
    "native_brickwork",
    "generator_circuit",
]

#: ``builder(circuit, first_param, layer) -> number of parameters added``
LayerBuilder = Callable[[ParametrizedCircuit, int, int], int]


@dataclass(frozen=True)
class NativeLayerSpec:
    """Configuration of a native brickwork layer.

    Attributes
    ----------
    rotations
        ``(j, k, phi)`` per single-qudit rotation, applied on every qudit in this order;
        ``None`` means ``R^{j,j+1}(., 0)`` and ``R^{j,j+1}(., pi/2)`` for every ``j``.
    phases
        Real diagonal tables ``h`` (length ``d``), each a gate ``exp(-i theta diag(h))``
        on every qudit after the rotations.
    entangler
        ``"ms"``, ``"diagonal"`` or ``"controlled_rotation"``.
    ms_levels, ms_phi
        Level pair and phase of the MS entangler (target pair of the controlled rotation).
    control_level
        Control level of the controlled-rotation entangler.
    diagonal_levels
        Levels ``(j, k)`` of the default diagonal entangler ``Z^{jk} (x) Z^{jk}`` (a light-shift phase).
    diagonal_table
        ``d x d`` real table of the diagonal entangler (default ``Z^{01} (x) Z^{01}``).
    """

    rotations: tuple[tuple[int, int, float], ...] | None = None
    phases: tuple[tuple[float, ...], ...] = ()
    entangler: str = "ms"
    ms_levels: tuple[int, int] = (0, 1)
    ms_phi: float = 0.0
    diagonal_table: tuple[tuple[float, ...], ...] | None = None
    control_level: int = 0
    diagonal_levels: tuple[int, int] = (0, 1)

    def resolved_rotations(self, d: int) -> tuple[tuple[int, int, float], ...]:
        """Rotation list with the default filled in for ``d`` levels."""
        if self.rotations is not None:
            return tuple(self.rotations)
        return tuple((j, j + 1, phi) for j in range(d - 1) for phi in (0.0, np.pi / 2))


def layer_spec_for(gs: NativeGateSet) -> NativeLayerSpec:
    """Brickwork layer whose entangler is the machine's own: its light-shift gate (``Z (x) Z`` on
    its levels), else its MS gate, else a controlled rotation on levels (0, 1)."""
    if gs.light_shift is not None:
        return NativeLayerSpec(entangler="diagonal", diagonal_levels=tuple(gs.light_shift))
    if gs.ms is not None:
        return NativeLayerSpec(entangler="ms", ms_levels=tuple(gs.ms))
    return NativeLayerSpec(entangler="controlled_rotation")


def _native_gates(space: Space, spec: NativeLayerSpec) -> tuple[list[Gate], list[Gate]]:
    """Single-qudit gates and bond entanglers of one layer (built once, reused)."""
    n, d = space.n_qudits, space.d
    singles: list[Gate] = []
    for q in range(n):
        singles += [TwoLevelRotation(q, j, k, d, phi) for j, k, phi in spec.resolved_rotations(d)]
        singles += [DiagonalGate((q,), np.asarray(h, dtype=float), d) for h in spec.phases]
    bonds = [(q, q + 1) for q in range(0, n - 1, 2)] + [(q, q + 1) for q in range(1, n - 1, 2)]
    if spec.entangler == "ms":
        j, k = spec.ms_levels
        ents: list[Gate] = [MSGate(b, j, k, d, spec.ms_phi) for b in bonds]
    elif spec.entangler == "diagonal":
        if spec.diagonal_table is None:
            z = np.zeros(d)
            z[spec.diagonal_levels[0]], z[spec.diagonal_levels[1]] = 1.0, -1.0
            table = np.outer(z, z)
        else:
            table = np.asarray(spec.diagonal_table, dtype=float)
        ents = [DiagonalGate(b, table, d) for b in bonds]
    elif spec.entangler == "controlled_rotation":
        j, k = spec.ms_levels
        ents = [ControlledRotation(b[0], b[1], spec.control_level, j, k, d, spec.ms_phi) for b in bonds]
    else:
        raise ValueError(f"unknown entangler {spec.entangler!r} (use 'ms', 'diagonal' or 'controlled_rotation')")
    return singles, ents


def _gates_builder(gates: Sequence[Gate], groups: Sequence[int]) -> LayerBuilder:
    n_groups = max(groups) + 1 if groups else 0

    def build(circuit: ParametrizedCircuit, first: int, layer: int) -> int:
        for gate, g in zip(gates, groups):
            circuit.append(gate, first + g, layer=layer)
        return n_groups

    return build


def native_layer_builder(space: Space, spec: NativeLayerSpec | None = None) -> LayerBuilder:
    """Builder of native brickwork layers (one parameter per gate)."""
    if not space.register:
        raise ValueError("native brickwork needs a register space")
    singles, ents = _native_gates(space, spec or NativeLayerSpec())
    gates = singles + ents
    return _gates_builder(gates, list(range(len(gates))))


def generator_layer_builder(
    space: Space, terms: Sequence[Term], groups: Sequence[int] | None = None
) -> LayerBuilder:
    """Builder of generator layers: ``terms`` in the given order.

    ``groups[i]`` is the parameter (within the layer) of term ``i``; default one per term.
    """
    gates = term_gates(terms, space)
    grp = list(range(len(gates))) if groups is None else [int(g) for g in groups]
    if len(grp) != len(gates):
        raise ValueError(f"{len(grp)} group labels for {len(gates)} terms")
    if grp and sorted(set(grp)) != list(range(max(grp) + 1)):
        raise ValueError("group labels must be 0..n_groups-1, each used")
    return _gates_builder(gates, grp)


def build_layers(space: Space, n_layers: int, builder: LayerBuilder) -> ParametrizedCircuit:
    """Concatenate ``n_layers`` layers; ``op.layer`` tags each gate with its layer."""
    circuit = ParametrizedCircuit(space)
    first = 0
    for layer in range(n_layers):
        first += builder(circuit, first, layer)
    circuit.reserve(first)
    return circuit


def native_brickwork(
    n_qudits: int, d: int, n_layers: int, spec: NativeLayerSpec | None = None
) -> ParametrizedCircuit:
    """``n_layers`` native brickwork layers on ``n_qudits`` qudits of ``d`` levels."""
    space = Space.qudits(n_qudits, d)
    return build_layers(space, n_layers, native_layer_builder(space, spec))


def generator_circuit(
    space: Space, terms: Sequence[Term], n_layers: int, groups: Sequence[int] | None = None
) -> ParametrizedCircuit:
    """``n_layers`` generator layers over ``terms`` (gates shared between layers)."""
    return build_layers(space, n_layers, generator_layer_builder(space, terms, groups))
