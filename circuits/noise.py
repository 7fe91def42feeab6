"""Density-matrix simulation of a circuit with depolarizing noise after every gate.

After each gate acting on qudits Q (dimension D = d^|Q|) the channel
ρ → (1 − p) ρ + p Tr_Q(ρ) ⊗ 1_Q / D is applied. Its entanglement (process) fidelity is
F_e = 1 − p (1 − 1/D²), so a gate of process fidelity F gets p = (1 − F) / (1 − 1/D²).
Register mode only; meant for small registers (ρ has d^{2K} entries).
"""

from __future__ import annotations

from typing import Callable, Sequence

import numpy as np

from .circuit import ParametrizedCircuit
from .register import to_view

__all__ = ["depolarizing_probability", "depolarize", "noisy_density_matrix"]


def depolarizing_probability(process_fidelity: float, n_qudits: int, d: int) -> float:
    """p of the depolarizing channel on ``n_qudits`` qudits with the given process fidelity."""
    D2 = float(d) ** (2 * n_qudits)
    return (1.0 - process_fidelity) / (1.0 - 1.0 / D2)


def depolarize(rho: np.ndarray, qudits: Sequence[int], p: float, n_qudits: int, d: int) -> np.ndarray:
    """Apply the depolarizing channel with probability ``p`` on ``qudits`` to ρ (dim × dim)."""
    if p == 0.0:
        return rho
    K = n_qudits
    q = sorted(int(x) for x in qudits)
    rest = [i for i in range(K) if i not in q]
    letters = "abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ"
    rows, cols = letters[:K], letters[K:2 * K]
    # Tr_Q ρ: contract the row and column index of every qudit in Q
    traced_in = rows + "".join(rows[i] if i in q else cols[i] for i in range(K))
    kept = "".join(rows[i] for i in rest) + "".join(cols[i] for i in rest)
    t = rho.reshape((d,) * (2 * K))
    reduced = np.einsum(f"{traced_in}->{kept}", t)
    # Tr_Q ρ ⊗ 1_Q / D, back in the original qudit order
    eyes = [np.eye(d)] * len(q)
    subs = [kept] + [rows[i] + cols[i] for i in q]
    full = np.einsum(",".join(subs) + "->" + rows + cols, reduced, *eyes) / d ** len(q)
    return ((1.0 - p) * t + p * full).reshape(rho.shape)


def noisy_density_matrix(circuit: ParametrizedCircuit, params: np.ndarray | None, psi0: np.ndarray,
                         process_fidelity: Callable[[object], float]) -> np.ndarray:
    """ρ after the circuit from |ψ0⟩⟨ψ0| with depolarizing noise after each gate.

    ``process_fidelity(op)`` gives each gate's process fidelity (e.g. from a hardware profile).
    """
    space = circuit.space
    if not space.register:
        raise ValueError("density-matrix simulation needs a register circuit")
    K, d = space.n_qudits, space.d
    psi0 = np.asarray(psi0, dtype=np.complex128)
    rho = np.outer(psi0, psi0.conj())
    angles = circuit.angles(params)
    for op, t in zip(circuit.ops, angles):
        # U ρ U†: apply U to the columns of ρ, then to the columns of (Uρ)†
        view, _ = to_view(rho.T.copy(), space)  # rows of ρ.T are columns of ρ
        rho = op.gate.apply(view, t).reshape(rho.shape).T
        view, _ = to_view(rho.conj().copy(), space)  # rows of ρ'* are the columns of ρ'†
        rho = op.gate.apply(view, t).reshape(rho.shape).conj()  # (U ρ'†)† = ρ' U†
        p = depolarizing_probability(process_fidelity(op), len(op.gate.qudits), d)
        rho = depolarize(rho, op.gate.qudits, p, K, d)
    return rho
