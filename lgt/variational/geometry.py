"""State Jacobian and quantum geometric tensor of a parameterised circuit (small spaces).

For ψ(θ) = C(θ) ψ₀ the Jacobian J[:, k] = ∂ψ/∂θ_k is built in one forward sweep that carries
the tangent vectors along with the state: after each parameterised gate U(t) = e^{−itG} the
row −i s G ψ is added (s the gate's angle scale, G commutes with U), and every later gate acts
on all rows. Cost ≈ P/2 forward passes on a (P+1)-row batch, so it pays only where the state is
small (register or physical subspace of a few thousand amplitudes).

The quantum geometric tensor (Fubini–Study metric, real part) with the global phase projected
out is G = Re(J†J) − Re((J†ψ)(ψ†J)) (Stokes et al., Quantum 4, 269 (2020)); it is the
Gauss–Newton matrix of the fidelity fit and the metric of McLachlan's variational principle
(Yuan et al., Quantum 3, 191 (2019)).
"""

from __future__ import annotations

import weakref

import numpy as np
import scipy.sparse as sp

from fluxline_threads import single_threaded_blas
from circuits.circuit import ParametrizedCircuit
from circuits.register import apply_local

_GENERATORS: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()


def _generator_action(gate, row: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
    """G ψ for one flat state ``row`` (register gates: dense local generator; subspace gates:
    their sparse generator)."""
    gen = _GENERATORS.get(gate)
    if gen is None:
        sparse = getattr(gate, "g", None)
        if gate.qudits:
            gen = np.asarray(gate.generator(), dtype=np.complex128)
        elif sparse is not None and sp.issparse(sparse):
            gen = sp.csr_matrix(sparse)
        else:
            gen = sp.csr_matrix(gate.generator())
        _GENERATORS[gate] = gen
    if gate.qudits:
        return apply_local(row.reshape((1,) + shape), gen, gate.qudits).reshape(-1)
    return gen @ row


def state_and_jacobian(circuit: ParametrizedCircuit, params: np.ndarray,
                       psi0: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(ψ(θ), J) with J of shape (dim, n_params), J[:, k] = ∂ψ/∂θ_k (exact, no differences)."""
    space = circuit.space
    shape = tuple(space.shape)
    angles = circuit.angles(params)
    ops = circuit.ops
    bound = [i for i, op in enumerate(ops) if op.index is not None]
    X = np.empty((1 + len(bound), space.dim), dtype=np.complex128)
    X[0] = np.asarray(psi0, dtype=np.complex128).reshape(-1)
    m = 1
    for op, t in zip(ops, angles.tolist()):
        view = X[:m].reshape((m,) + shape)
        out = op.gate.apply(view, t)
        if out is not view:
            X[:m] = out.reshape(m, -1)
        if op.index is not None:
            X[m] = (-1j * op.scale) * _generator_action(op.gate, X[0], shape)
            m += 1
    J = np.zeros((space.dim, circuit.n_params), dtype=np.complex128)
    for row, i in enumerate(bound, start=1):
        J[:, ops[i].index] += X[row]
    return X[0].copy(), J


def geometric_tensor(psi: np.ndarray, J: np.ndarray) -> np.ndarray:
    """Real symmetric (P, P) metric Re(J†J) − Re((J†ψ)(ψ†J)) for a normalised ψ."""
    a = psi.conj() @ J
    return (J.conj().T @ J).real - np.outer(a, a.conj()).real


def mclachlan_velocity(circuit: ParametrizedCircuit, params: np.ndarray, psi0: np.ndarray, H,
                       rcond: float = 1e-6) -> np.ndarray:
    """θ̇ of McLachlan's variational principle, G θ̇ = Im(J†Hψ) − Im((J†ψ)⟨ψ|H|ψ⟩) (global phase
    projected out), solved with the pseudo-inverse of G (eigenvalues below ``rcond`` times the
    largest dropped). ``H`` acts on the circuit's space (lattice energy units; θ̇ per lattice time)."""
    with single_threaded_blas():  # small dense products and eigensolves (see fluxline_threads)
        psi, J = state_and_jacobian(circuit, params, psi0)
        h_psi = H @ psi
        a = J.conj().T @ psi
        force = (J.conj().T @ h_psi).imag - (a * np.vdot(psi, h_psi)).imag
        w, U = np.linalg.eigh(geometric_tensor(psi, J))
        keep = w > rcond * max(w.max(), 0.0)
        return U[:, keep] @ ((U[:, keep].T @ force) / w[keep])
