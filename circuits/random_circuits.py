"""Random circuits and generators for tests and benchmarks."""
from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from .circuit import ParametrizedCircuit
from .gates import DiagonalGate, Gate, GeneratorGate, MSGate, TwoLevelRotation
from .register import Space

__all__ = ["random_state", "random_hermitian", "random_gate", "random_circuit", "random_sparse_generator"]


def random_state(rng: np.random.Generator, shape: int | tuple[int, ...]) -> np.ndarray:
    """Gaussian complex vector (or batch) normalised as a whole."""
    v = rng.normal(size=shape) + 1j * rng.normal(size=shape)
    return v / np.linalg.norm(v)


def random_hermitian(rng: np.random.Generator, n: int) -> np.ndarray:
    """``A + A^dag`` with Gaussian complex ``A`` (``n x n``)."""
    a = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    return a + a.conj().T


def random_gate(rng: np.random.Generator, n_qudits: int, d: int) -> Gate:
    """One gate of a random kind on random qudits (two-qudit kinds need ``n_qudits >= 2``)."""
    kinds = 5 if n_qudits >= 2 else 2
    kind = int(rng.integers(kinds))
    q = rng.choice(n_qudits, size=min(2, n_qudits), replace=False)
    j, k = np.sort(rng.choice(d, size=2, replace=False))
    phi = rng.uniform(0, 2 * np.pi)
    if kind == 0:
        return TwoLevelRotation(q[0], j, k, d, phi)
    if kind == 1:
        return DiagonalGate(q[:1], rng.normal(size=d), d)
    if kind == 2:
        return MSGate(q, j, k, d, phi)
    if kind == 3:
        return DiagonalGate(q, rng.normal(size=(d, d)), d)
    return GeneratorGate(q, random_hermitian(rng, d * d), d)


def random_circuit(
    rng: np.random.Generator, n_qudits: int, d: int, n_gates: int, n_params: int, p_fixed: float = 0.15
) -> ParametrizedCircuit:
    """Random register circuit with shared parameters, random scales and offsets."""
    c = ParametrizedCircuit(Space.qudits(n_qudits, d), n_params)
    for _ in range(n_gates):
        idx = None if rng.random() < p_fixed else int(rng.integers(n_params))
        c.append(random_gate(rng, n_qudits, d), idx, scale=rng.uniform(-2, 2), offset=rng.uniform(-1, 1))
    return c


def random_sparse_generator(
    rng: np.random.Generator, dim: int, n_pairs: int, n_diag: int, big: int = 0
) -> sp.csr_matrix:
    """Block-diagonal Hermitian: ``n_pairs`` coupled pairs, ``n_diag`` diagonal entries,
    and one chain-coupled block of ``big`` states (all on disjoint random states)."""
    perm = rng.permutation(dim)
    a, b = perm[:n_pairs], perm[n_pairs : 2 * n_pairs]
    v = rng.normal(size=n_pairs) + 1j * rng.normal(size=n_pairs)
    rows, cols, vals = [a, b], [b, a], [v, v.conj()]
    diag = perm[2 * n_pairs : 2 * n_pairs + n_diag]
    rows.append(diag), cols.append(diag), vals.append(rng.normal(size=diag.size) + 0j)
    if big:
        m = perm[dim - big :]
        w = rng.normal(size=big - 1) + 0j
        rows += [m[:-1], m[1:]]
        cols += [m[1:], m[:-1]]
        vals += [w, w]
    return sp.csr_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(dim, dim)
    )
