"""Native gates against dense references (numpy kron + scipy expm, and qutip 5)."""
from __future__ import annotations

import numpy as np
import pytest
import qutip
import scipy.linalg as sla

from circuits.circuit import ParametrizedCircuit
from circuits.gates import DiagonalGate, GeneratorGate, MSGate, TwoLevelRotation, two_level_ops
from circuits.register import Space, embed_local, product_state

D, K = 3, 3


def kron_at(ops: dict[int, np.ndarray], n: int, d: int) -> np.ndarray:
    """Dense operator with the given single-qudit factors, identity elsewhere (numpy kron)."""
    out = np.eye(1, dtype=complex)
    for q in range(n):
        out = np.kron(out, ops.get(q, np.eye(d)))
    return out


def unit(d: int, a: int, b: int) -> np.ndarray:
    e = np.zeros((d, d), dtype=complex)
    e[a, b] = 1.0
    return e


def dense_generator(g: np.ndarray, qudits, n: int, d: int) -> np.ndarray:
    """Expand a local generator over matrix units |a><b| on each listed qudit (numpy kron)."""
    k = len(qudits)
    gt = g.reshape((d,) * (2 * k))
    full = np.zeros((d**n, d**n), dtype=complex)
    for idx in np.ndindex(*gt.shape):
        if gt[idx] != 0:
            full += gt[idx] * kron_at({q: unit(d, idx[i], idx[k + i]) for i, q in enumerate(qudits)}, n, d)
    return full


def qutip_generator(g: np.ndarray, qudits, n: int, d: int) -> np.ndarray:
    """Same expansion with qutip.tensor (reference library)."""
    k = len(qudits)
    gt = g.reshape((d,) * (2 * k))
    full = 0 * qutip.tensor([qutip.qeye(d)] * n)
    for idx in np.ndindex(*gt.shape):
        if gt[idx] != 0:
            facs = [qutip.qeye(d)] * n
            for i, q in enumerate(qudits):
                facs[q] = qutip.basis(d, idx[i]) * qutip.basis(d, idx[k + i]).dag()
            full = full + complex(gt[idx]) * qutip.tensor(facs)
    return full


def gate_unitary(gate, t: float) -> np.ndarray:
    c = ParametrizedCircuit(Space.qudits(K, D))
    c.append(gate, 0)
    return c.unitary([t])


RNG = np.random.default_rng(7)
_herm = RNG.normal(size=(9, 9)) + 1j * RNG.normal(size=(9, 9))
GATES = [
    TwoLevelRotation(1, 0, 2, D, phi=0.4),
    TwoLevelRotation(2, 1, 2, D, phi=-1.3),
    MSGate((0, 2), 0, 1, D, phi=0.0),
    MSGate((2, 1), 1, 2, D, phi=0.7),
    DiagonalGate((1,), [0.3, -1.1, 0.5], D),
    DiagonalGate((2, 0), RNG.normal(size=(3, 3)), D),
    GeneratorGate((2, 0), _herm + _herm.conj().T, D),
]


def reference_generator(gate) -> np.ndarray:
    """Generator built independently of the gate code from its definition."""
    x, y, _ = two_level_ops(gate.j, gate.k, D) if hasattr(gate, "j") else (None, None, None)
    if isinstance(gate, TwoLevelRotation):
        p = 0.5 * (np.cos(gate.phi) * x + np.sin(gate.phi) * y)
        return kron_at({gate.qudits[0]: p}, K, D)
    if isinstance(gate, MSGate):
        p = np.cos(gate.phi) * x + np.sin(gate.phi) * y
        return kron_at({gate.qudits[0]: p, gate.qudits[1]: p}, K, D)
    if isinstance(gate, DiagonalGate):
        levels = np.indices((D,) * K).reshape(K, -1)
        return np.diag(gate.h[tuple(levels[q] for q in gate.qudits)]).astype(complex)
    return dense_generator(gate.g, gate.qudits, K, D)


@pytest.mark.parametrize("gate", GATES, ids=lambda g: type(g).__name__)
@pytest.mark.parametrize("t", [0.0, 0.37, -2.1])
def test_gate_matches_kron_expm(gate, t):
    # reference: numpy kron embedding + scipy.linalg.expm
    ref = sla.expm(-1j * t * reference_generator(gate))
    got = gate_unitary(gate, t)
    np.testing.assert_allclose(got, ref, atol=1e-12)
    np.testing.assert_allclose(got.conj().T @ got, np.eye(D**K), atol=1e-12)


@pytest.mark.parametrize("gate", GATES, ids=lambda g: type(g).__name__)
def test_gate_matches_qutip(gate):
    # reference: qutip 5 tensor of Qobj matrix units, Qobj.expm()
    t = 0.83
    gen = qutip_generator(gate.generator(), gate.qudits, K, D)
    ref = (-1j * t * gen).expm().full()
    np.testing.assert_allclose(gate_unitary(gate, t), ref, atol=1e-12)


@pytest.mark.parametrize("gate", GATES, ids=lambda g: type(g).__name__)
def test_local_unitary_is_expm_of_local_generator(gate):
    # reference: scipy.linalg.expm of the local generator; embed_local vs numpy kron
    np.testing.assert_allclose(gate.unitary(0.6), sla.expm(-0.6j * gate.generator()), atol=1e-12)
    emb = embed_local(gate.generator(), gate.qudits, K, D)
    np.testing.assert_allclose(emb, reference_generator(gate), atol=1e-12)


@pytest.mark.parametrize("j,k", [(0, 1), (0, 2), (1, 2)])
def test_rotation_pi_maps_j_to_minus_i_k(j, k):
    # textbook identity: exp(-i pi/2 X) = -i X on the embedded two-level system
    d = 4
    c = ParametrizedCircuit(Space.qudits(1, d))
    c.append(TwoLevelRotation(0, j, k, d), 0)
    u = c.unitary([np.pi])
    np.testing.assert_allclose(u[:, j], -1j * np.eye(d)[k], atol=1e-14)
    for other in set(range(d)) - {j, k}:
        np.testing.assert_allclose(u[:, other], np.eye(d)[other], atol=1e-14)


@pytest.mark.parametrize("j,k,phi", [(0, 1, 0.0), (1, 2, 0.0), (0, 2, 0.9)])
def test_ms_quarter_pi_is_maximally_entangling(j, k, phi):
    # textbook identity: exp(-i pi/4 XX)|00> = (|00> - i|11>)/sqrt(2); entropy ln 2
    d = 3
    c = ParametrizedCircuit(Space.qudits(2, d))
    c.append(MSGate((0, 1), j, k, d, phi=phi), 0)
    out = c.apply([np.pi / 4], product_state([j, j], d))
    expect = (product_state([j, j], d) - 1j * np.exp(2j * phi) * product_state([k, k], d)) / np.sqrt(2)
    np.testing.assert_allclose(out, expect, atol=1e-14)
    # reference: qutip 5 ptrace + entropy_vn (natural log)
    ket = qutip.Qobj(out.reshape(-1, 1), dims=[[d, d], [1, 1]])
    assert qutip.entropy_vn(ket.ptrace(0)) == pytest.approx(np.log(2), abs=1e-12)


def test_batch_and_nonadjacent_consistency():
    # reference: dense matrix-vector product with the numpy kron construction
    rng = np.random.default_rng(3)
    c = ParametrizedCircuit(Space.qudits(4, 3))
    h = rng.normal(size=(27, 27)) + 1j * rng.normal(size=(27, 27))
    gate = GeneratorGate((3, 0, 2), h + h.conj().T, 3)
    c.append(gate, 0)
    psi = rng.normal(size=(5, 81)) + 1j * rng.normal(size=(5, 81))
    full = sla.expm(-0.4j * dense_generator(gate.g, gate.qudits, 4, 3))
    np.testing.assert_allclose(c.apply([0.4], psi), psi @ full.T, atol=1e-12)


def test_invalid_gates_rejected():
    with pytest.raises(ValueError):
        TwoLevelRotation(0, 2, 1, 3)
    with pytest.raises(ValueError):
        MSGate((1, 1), 0, 1, 3)
    with pytest.raises(ValueError):
        GeneratorGate((0,), np.array([[0, 1], [0, 0]]), 2)
    c = ParametrizedCircuit(Space.qudits(2, 3))
    with pytest.raises(ValueError):
        c.append(TwoLevelRotation(2, 0, 1, 3))
