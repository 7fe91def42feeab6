"""Density-matrix simulation of a circuit with depolarizing noise after every gate (the
gate-error budget's check; the full register noise model is :mod:`circuits.noise_model`).

After each gate acting on qudits Q (dimension D = d^|Q|) the channel
ρ → (1 − p) ρ + p Tr_Q(ρ) ⊗ 1_Q / D is applied. Its entanglement (process) fidelity is
F_e = 1 − p (1 − 1/D²), so a gate of process fidelity F gets p = (1 − F) / (1 − 1/D²).
Register mode only; meant for small registers (ρ has d^{2K} entries). Runs on the simulator of
:mod:`circuits.density` (depolarizing on all levels of the gate's qudits).
"""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np

from .circuit import ParametrizedCircuit
from .density import _depolarize, _run
from .noise_program import DepolarizeEvent, GateEvent, NoisyProgram, depolarizing_from_fidelity

__all__ = ["depolarizing_probability", "depolarize", "noisy_density_matrix"]


def depolarizing_probability(process_fidelity: float, n_qudits: int, d: int) -> float:
    """p of the depolarizing channel on ``n_qudits`` qudits with the given process fidelity."""
    return depolarizing_from_fidelity(process_fidelity, d ** n_qudits)


def _full(qudits: Sequence[int], p: float, d: int) -> DepolarizeEvent:
    q = tuple(int(x) for x in qudits)
    return DepolarizeEvent(q, tuple(np.ones(d, dtype=bool) for _ in q), float(p))


def depolarize(rho: np.ndarray, qudits: Sequence[int], p: float, n_qudits: int, d: int) -> np.ndarray:
    """Apply the depolarizing channel with probability ``p`` on ``qudits`` to ρ (dim × dim)."""
    if p == 0.0:
        return rho
    r = np.array(rho, dtype=np.complex128).reshape((d,) * (2 * n_qudits))
    return _depolarize(r, _full(qudits, p, d), n_qudits).reshape(rho.shape)


def noisy_density_matrix(circuit: ParametrizedCircuit, params: np.ndarray | None, psi0: np.ndarray,
                         process_fidelity: Callable[[object], float]) -> np.ndarray:
    """ρ after the circuit from |ψ0⟩⟨ψ0| with depolarizing noise after each gate.

    ``process_fidelity(op)`` gives each gate's process fidelity (e.g. from a hardware profile).
    """
    space = circuit.space
    if not space.register:
        raise ValueError("density-matrix simulation needs a register circuit")
    K, d = space.n_qudits, space.d
    events: list = []
    for op, t in zip(circuit.ops, circuit.angles(params)):
        events.append(GateEvent(op.gate, float(t)))
        p = depolarizing_probability(process_fidelity(op), len(op.gate.qudits), d)
        if p > 0:
            events.append(_full(op.gate.qudits, p, d))
    program = NoisyProgram(K, d, events, np.zeros((d, d)), np.zeros(d), -np.ones(d, dtype=np.int64), np.eye(d),
                           "discard", 0.0)
    return _run(program, np.asarray(psi0, dtype=np.complex128)).rho
