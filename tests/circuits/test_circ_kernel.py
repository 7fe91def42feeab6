"""The compiled kernel (circuits/kernel.py) in subspace mode: gates with diagonal and two-state
generators, checked against products of scipy.linalg.expm and central finite differences; a
generator with a larger coupled component keeps the numpy paths."""
from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp

import circuits.circuit as circuit_mod
from circuits.circuit import ParametrizedCircuit
from circuits.random_circuits import random_state
from circuits.register import Space
from circuits.sparse_gates import SparseGeneratorGate
from test_circ_gradient import finite_difference  # central differences, O(h^2)

pytestmark = pytest.mark.skipif(not circuit_mod.HAVE_NUMBA, reason="numba not installed")


def two_state_generator(rng, dim: int, pairs: int) -> sp.csr_matrix:
    """Random Hermitian generator whose couplings pair disjoint states (plus a diagonal)."""
    pairs = min(pairs, dim // 2)
    states = rng.permutation(dim)[: 2 * pairs].reshape(pairs, 2)
    g = np.diag(rng.normal(size=dim)).astype(complex)
    for a, b in states:
        g[a, b] = rng.normal() + 1j * rng.normal()
        g[b, a] = np.conj(g[a, b])
    return sp.csr_matrix(g)


def subspace_circuit(rng, dim: int) -> ParametrizedCircuit:
    c = ParametrizedCircuit(Space.subspace(dim))
    c.append(SparseGeneratorGate(two_state_generator(rng, dim, dim // 2)), 0)
    c.append(SparseGeneratorGate(sp.diags(rng.normal(size=dim))), 1, scale=-0.6)
    c.append(SparseGeneratorGate(two_state_generator(rng, dim, 2)), None, offset=0.7)
    c.append(SparseGeneratorGate(two_state_generator(rng, dim, dim // 3)), 2)
    c.append(SparseGeneratorGate(two_state_generator(rng, dim, 1)), 0, scale=1.5, offset=0.2)
    return c


def dense_product(c: ParametrizedCircuit, p: np.ndarray) -> np.ndarray:
    """Reference: product of scipy.linalg.expm(-i t G)."""
    u = np.eye(c.space.dim, dtype=complex)
    for op, t in zip(c.ops, c.angles(p)):
        u = sla.expm(-1j * t * op.gate.generator()) @ u
    return u


@pytest.mark.parametrize("batch", [False, True])
def test_subspace_kernel_matches_expm_and_finite_differences(batch):
    rng = np.random.default_rng(41)
    for dim in (2, 7, 20):
        c = subspace_circuit(rng, dim)
        assert c._kernel(dim * (3 if batch else 1)) is not None  # the kernel path runs
        p = rng.uniform(-np.pi, np.pi, size=c.n_params)
        psi = random_state(rng, dim) if not batch else np.stack([random_state(rng, dim) for _ in range(3)])
        phi = random_state(rng, dim) if not batch else np.stack([random_state(rng, dim) for _ in range(3)])
        ref = dense_product(c, p)
        np.testing.assert_allclose(c.apply(p, psi), psi @ ref.T, atol=1e-11)
        f, df = c.overlap_and_gradient(p, psi, phi)
        assert abs(f - np.vdot(phi, psi @ ref.T)) < 1e-11
        fd = finite_difference(lambda x: np.vdot(phi, c.apply(x, psi)), p)
        np.testing.assert_allclose(df, fd, atol=1e-6)


def test_larger_components_keep_the_numpy_path():
    # a three-state chain has no two-state form: no kernel, same results as before
    rng = np.random.default_rng(42)
    g = np.zeros((4, 4), dtype=complex)
    g[0, 1] = g[1, 0] = 1.0
    g[1, 2] = g[2, 1] = 0.5
    gate = SparseGeneratorGate(sp.csr_matrix(g))
    assert gate.two_state_form() is None
    c = ParametrizedCircuit(Space.subspace(4))
    c.append(gate, 0)
    assert c._kernel(4) is None
    psi = random_state(rng, 4)
    np.testing.assert_allclose(c.apply([0.3], psi), sla.expm(-0.3j * g) @ psi, atol=1e-12)
