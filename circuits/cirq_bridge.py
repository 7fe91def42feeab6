"""Circuits as ``cirq.Circuit`` objects on ``cirq.LineQid(i, dimension=d)`` and back (optional extra
``cirq``: ``pip install fluxline[cirq]``).

Native gates keep their parameters as cirq gates of their own (:class:`LevelRotation`,
:class:`LevelPairMS`, :class:`PhaseTable`), so the import recovers the same gate; any other gate is
exported as ``cirq.MatrixGate`` of its unitary at the resolved angle and imported back as a fixed
generator gate (G with U = exp(−iG), t = 1; diagonal unitaries as diagonal gates). Qudit i of the
register is ``cirq.LineQid(i, dimension=d)``; cirq orders basis states like the register (qudit 0
most significant), so state vectors agree index by index.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

try:
    import cirq
except ImportError as exc:  # pragma: no cover - exercised only without the extra
    raise ImportError("circuits.cirq_bridge needs cirq: pip install cirq-core (extra 'cirq')") from exc

from .circuit import ParametrizedCircuit
from .gates import DiagonalGate, Gate, GeneratorGate, MSGate, TwoLevelRotation
from .register import Space

__all__ = ["LevelRotation", "LevelPairMS", "PhaseTable", "to_cirq", "from_cirq"]


class _FluxlineGate(cirq.Gate):
    """A cirq gate wrapping one of our gates at a fixed angle."""

    def __init__(self, gate: Gate, angle: float) -> None:
        self.gate, self.angle = gate, float(angle)

    def _qid_shape_(self) -> tuple[int, ...]:
        return (self.gate.d,) * self.gate.locality

    def _unitary_(self) -> np.ndarray:
        return self.gate.unitary(self.angle)

    def _has_unitary_(self) -> bool:
        return True

    def _value_equality_values_(self):  # pragma: no cover - cirq internals
        return (type(self).__name__, self.angle)


class LevelRotation(_FluxlineGate):
    """R^{jk}(θ, φ) on one qudit."""

    def _circuit_diagram_info_(self, args):
        g = self.gate
        return f"R{g.j}{g.k}({self.angle:.3g},{g.phi:.3g})"


class LevelPairMS(_FluxlineGate):
    """Mølmer–Sørensen-type exp(−iθ P⊗P) on levels (j, k) of two qudits."""

    def _circuit_diagram_info_(self, args):
        g = self.gate
        return (f"MS{g.j}{g.k}({self.angle:.3g})",) * 2


class PhaseTable(_FluxlineGate):
    """exp(−iθ diag(h)) on k qudits."""

    def _circuit_diagram_info_(self, args):
        return ("Phase",) * self.gate.locality


def _cirq_gate(gate: Gate, angle: float) -> cirq.Gate:
    if isinstance(gate, TwoLevelRotation):
        return LevelRotation(gate, angle)
    if isinstance(gate, MSGate):
        return LevelPairMS(gate, angle)
    if isinstance(gate, DiagonalGate):
        return PhaseTable(gate, angle)
    return cirq.MatrixGate(gate.unitary(angle), qid_shape=(gate.d,) * gate.locality)


def to_cirq(circuit: ParametrizedCircuit, params: Sequence[float] | None = None) -> cirq.Circuit:
    """The register circuit at ``params`` as a cirq circuit (one moment per gate, in order)."""
    space = circuit.space
    if not space.register:
        raise ValueError("only register circuits can be exported to cirq")
    qids = cirq.LineQid.range(space.n_qudits, dimension=space.d)
    ops = [_cirq_gate(op.gate, t).on(*(qids[q] for q in op.gate.qudits))
           for op, t in zip(circuit.ops, circuit.angles(params))]
    return cirq.Circuit(ops, strategy=cirq.InsertStrategy.NEW)


def _imported(gate: cirq.Gate, qudits: list[int], d: int) -> tuple[Gate, float]:
    if isinstance(gate, _FluxlineGate):
        g = gate.gate
        if isinstance(g, TwoLevelRotation):
            return TwoLevelRotation(qudits[0], g.j, g.k, d, g.phi), gate.angle
        if isinstance(g, MSGate):
            return MSGate(qudits, g.j, g.k, d, g.phi), gate.angle
        if isinstance(g, DiagonalGate):
            return DiagonalGate(qudits, g.h, d), gate.angle
    u = cirq.unitary(gate)
    if np.allclose(u, np.diag(np.diagonal(u))):
        return DiagonalGate(qudits, -np.angle(np.diagonal(u)), d), 1.0
    from scipy.linalg import schur

    t, z = schur(u, output="complex")  # U normal: T diagonal, Z unitary
    g = (z * -np.angle(np.diagonal(t))) @ z.conj().T
    return GeneratorGate(qudits, 0.5 * (g + g.conj().T), d), 1.0


def from_cirq(circuit: cirq.Circuit) -> ParametrizedCircuit:
    """A circuit of fixed gates from a cirq circuit on ``LineQid``s of one dimension."""
    qids = sorted(circuit.all_qubits())
    dims = {q.dimension for q in qids}
    if len(dims) != 1 or not all(isinstance(q, cirq.LineQid) for q in qids):
        raise ValueError("need cirq.LineQid qudits of one dimension")
    d = dims.pop()
    K = max(q.x for q in qids) + 1
    out = ParametrizedCircuit(Space.qudits(K, d))
    for op in circuit.all_operations():
        gate, angle = _imported(op.gate, [q.x for q in op.qubits], d)
        out.append(gate, None, offset=angle)
    return out
