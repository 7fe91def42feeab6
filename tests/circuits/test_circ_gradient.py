"""Adjoint gradients against central finite differences (register and subspace modes)."""
from __future__ import annotations

import numpy as np
import scipy.linalg as sla
import scipy.sparse as sp

from circuits.circuit import ParametrizedCircuit
from circuits.random_circuits import random_circuit, random_sparse_generator, random_state
from circuits.register import Space
from circuits.sparse_gates import SparseGeneratorGate


def finite_difference(fun, p, h=1e-5):
    """Central differences, error O(h^2) (standard numerical analysis)."""
    out = []
    for i in range(p.size):
        e = np.zeros_like(p)
        e[i] = h
        out.append((fun(p + e) - fun(p - e)) / (2 * h))
    return np.array(out)


def check_gradients(c, rng, batch=None):
    shape = (c.space.dim,) if batch is None else (batch, c.space.dim)
    psi, phi = random_state(rng, shape), random_state(rng, shape)
    p = rng.uniform(-np.pi, np.pi, size=c.n_params)
    f, df = c.overlap_and_gradient(p, psi, phi)
    # reference: direct forward evaluation of the overlap
    assert abs(f - np.vdot(phi, c.apply(p, psi))) < 1e-12
    fd = finite_difference(lambda x: np.vdot(phi, c.apply(x, psi)), p)
    np.testing.assert_allclose(df, fd, atol=1e-6)
    fid, dfid = c.fidelity_and_gradient(p, psi, phi)
    fd_fid = finite_difference(lambda x: abs(np.vdot(phi, c.apply(x, psi))) ** 2, p)
    assert abs(fid - abs(f) ** 2) < 1e-14
    np.testing.assert_allclose(dfid, fd_fid, atol=1e-6)


def test_register_gradients_shared_parameters():
    rng = np.random.default_rng(11)
    for n, d in [(3, 3), (4, 2), (3, 4)]:
        check_gradients(random_circuit(rng, n, d, 25, 6), rng)


def test_register_gradients_batch():
    rng = np.random.default_rng(12)
    check_gradients(random_circuit(rng, 3, 3, 15, 5), rng, batch=4)


def test_sparse_gate_matches_expm():
    # reference: scipy.linalg.expm of the dense generator
    rng = np.random.default_rng(5)
    g = random_sparse_generator(rng, 60, 12, 10, big=9)
    psi = random_state(rng, (2, 60))
    for dense_below in (0, None):  # block route (with expm_multiply fallback), dense route
        gate = SparseGeneratorGate(g, max_block=4, dense_below=dense_below)
        if dense_below == 0:
            assert gate.large and gate.groups
        else:
            assert gate.dense is not None
        c = ParametrizedCircuit(Space.subspace(60))
        c.append(gate, 0)
        np.testing.assert_allclose(c.apply([0.9], psi), psi @ sla.expm(-0.9j * g.toarray()).T, atol=1e-10)
    diag = SparseGeneratorGate(sp.diags(rng.normal(size=60)))
    assert diag.is_diagonal


def test_subspace_gradients_shared_parameters():
    rng = np.random.default_rng(21)
    dim = 50
    c = ParametrizedCircuit(Space.subspace(dim), 4)
    gates = [
        SparseGeneratorGate(random_sparse_generator(rng, dim, 10, 8), dense_below=0),
        SparseGeneratorGate(random_sparse_generator(rng, dim, 3, 0, big=12), max_block=6, dense_below=0),
        SparseGeneratorGate(random_sparse_generator(rng, dim, 10, 8)),
        SparseGeneratorGate(sp.diags(rng.normal(size=dim))),
    ]
    for i in range(12):
        c.append(gates[i % len(gates)], int(rng.integers(4)), scale=rng.uniform(-1.5, 1.5))
    check_gradients(c, rng)


def test_subspace_runs_of_diagonal_gates():
    # consecutive diagonal subspace gates are merged into one phase step; reference: product
    # of scipy.linalg.expm of the dense generators, and central finite differences
    rng = np.random.default_rng(8)
    dim = 40
    diags = [SparseGeneratorGate(sp.diags(rng.normal(size=dim))) for _ in range(4)]
    hop = SparseGeneratorGate(random_sparse_generator(rng, dim, 10, 8))
    c = ParametrizedCircuit(Space.subspace(dim), 3)
    c.append(diags[0], None, offset=0.3)  # a fixed gate opening a run before the first parameter
    c.append(diags[1], 0)
    c.append(diags[2], 1, scale=-0.5)
    c.append(hop, 2)
    c.append(diags[3], 0, scale=2.0)  # shared parameter
    c.append(diags[0], None, offset=-0.7)  # fixed gate inside a run
    c.append(diags[1], 2)
    p = rng.uniform(-np.pi, np.pi, size=3)
    psi = random_state(rng, (dim,))
    u = np.eye(dim, dtype=complex)
    for op, t in zip(c.ops, c.angles(p)):
        u = sla.expm(-1j * t * op.gate.generator()) @ u
    np.testing.assert_allclose(c.apply(p, psi), u @ psi, atol=1e-12)
    check_gradients(c, rng)
    check_gradients(c, rng, batch=3)
