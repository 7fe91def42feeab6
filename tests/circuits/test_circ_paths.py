"""The evaluation paths (compiled kernel, block-fused, per-gate flat, strided slices; the last with all,
some or none of the forward pass kept for the adjoint gradient) agree with dense
references: products of scipy.linalg.expm and central finite differences."""
from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla

import circuits.circuit as circuit_mod
from circuits.circuit import ParametrizedCircuit
from circuits.gates import GeneratorGate, TwoLevelRotation
from circuits.layers import native_brickwork
from circuits.random_circuits import random_circuit, random_hermitian, random_state
from circuits.register import Space, embed_local
from test_circ_gradient import finite_difference  # central differences, O(h^2)

PATHS = ["kernel", "fused", "flat", "slices", "slices-capped", "slices-unkept"]


@pytest.fixture(params=PATHS)
def path(request, monkeypatch):
    if request.param == "kernel":
        if not circuit_mod.HAVE_NUMBA:
            pytest.skip("numba not installed")
        return request.param
    monkeypatch.setattr(circuit_mod, "USE_KERNEL", False)
    if request.param != "fused":
        monkeypatch.setattr(circuit_mod, "FUSE_REGISTER", False)
    if request.param.startswith("slices"):
        monkeypatch.setattr(circuit_mod, "SMALL_STATE", 0)
    if request.param == "slices-capped":
        # room for a few gates' slices only: the backward pass switches mid-circuit
        monkeypatch.setattr(circuit_mod, "MAX_KEPT_BYTES", 3000)
    if request.param == "slices-unkept":
        monkeypatch.setattr(circuit_mod, "MAX_KEPT_BYTES", 0)
    return request.param


def dense_circuit(c: ParametrizedCircuit, p: np.ndarray) -> np.ndarray:
    """Reference: product of scipy.linalg.expm(-i t G) of the embedded generators
    (embed_local is checked against numpy kron in test_circ_gates)."""
    n, d = c.space.n_qudits, c.space.d
    u = np.eye(c.space.dim, dtype=complex)
    for op, t in zip(c.ops, c.angles(p)):
        g = embed_local(op.gate.generator(), op.gate.qudits, n, d)
        u = sla.expm(-1j * t * g) @ u
    return u


def circuits_under_test(rng):
    wide = ParametrizedCircuit(Space.qudits(4, 2), 3)
    wide.append(TwoLevelRotation(0, 0, 1, 2, 0.3), 0)
    wide.append(GeneratorGate((3, 0, 2), random_hermitian(rng, 8), 2), 1, scale=-0.7)
    wide.append(TwoLevelRotation(1, 0, 1, 2, 1.1), None, offset=0.4)
    wide.append(GeneratorGate((1, 2), random_hermitian(rng, 4), 2), 2)
    wide.append(TwoLevelRotation(3, 0, 1, 2), 0, scale=2.0)
    single = ParametrizedCircuit(Space.qudits(1, 4), 2)
    single.append(TwoLevelRotation(0, 1, 3, 4, 0.2), 1)
    single.append(TwoLevelRotation(0, 0, 2, 4), 0)
    return [
        random_circuit(rng, 3, 3, 24, 7),
        random_circuit(rng, 4, 2, 20, 5),
        native_brickwork(3, 3, 2),
        wide,
        single,
    ]


def test_paths_match_dense_product(path):
    rng = np.random.default_rng(31)
    for c in circuits_under_test(rng):
        p = rng.uniform(-np.pi, np.pi, size=c.n_params)
        np.testing.assert_allclose(c.unitary(p), dense_circuit(c, p), atol=1e-11)


@pytest.mark.parametrize("batch", [None, 3])
def test_paths_gradient_matches_finite_differences(path, batch):
    rng = np.random.default_rng(32)
    for c in circuits_under_test(rng):
        shape = (c.space.dim,) if batch is None else (batch, c.space.dim)
        psi, phi = random_state(rng, shape), random_state(rng, shape)
        p = rng.uniform(-np.pi, np.pi, size=c.n_params)
        f, df = c.overlap_and_gradient(p, psi, phi)
        # reference overlap: dense product of expm factors
        ref = np.vdot(phi, psi @ dense_circuit(c, p).T)
        assert abs(f - ref) < 1e-11
        fd = finite_difference(lambda x: np.vdot(phi, c.apply(x, psi)), p)
        np.testing.assert_allclose(df, fd, atol=1e-6)


def test_fixed_only_and_edited_circuits(path):
    # gradient of a circuit without free parameters is empty; editing ops is picked up
    rng = np.random.default_rng(33)
    c = ParametrizedCircuit(Space.qudits(2, 3))
    c.append(TwoLevelRotation(0, 0, 1, 3), None, offset=0.5)
    psi = random_state(rng, 9)
    f, df = c.overlap_and_gradient(None, psi, psi)
    assert df.shape == (0,)
    c.append(TwoLevelRotation(1, 1, 2, 3), 0)
    p = np.array([0.8])
    np.testing.assert_allclose(c.unitary(p), dense_circuit(c, p), atol=1e-12)
    c.ops[0] = c.ops[1]
    np.testing.assert_allclose(c.unitary(p), dense_circuit(c, p), atol=1e-12)


def test_kept_gradient_repeat_calls_and_cap_switch(monkeypatch):
    # the kept-slice buffer is reused between calls and resized; every cap gives the
    # same gradient, checked against central finite differences (O(h^2))
    monkeypatch.setattr(circuit_mod, "SMALL_STATE", 0)
    rng = np.random.default_rng(34)
    c = random_circuit(rng, 4, 3, 30, 9)
    psi, phi = random_state(rng, 81), random_state(rng, 81)
    p = rng.uniform(-np.pi, np.pi, size=c.n_params)
    fd = finite_difference(lambda x: np.vdot(phi, c.apply(x, psi)), p)
    for cap in (0, 2000, 10**4, 10**9, 10**9):
        monkeypatch.setattr(circuit_mod, "MAX_KEPT_BYTES", cap)
        _, df = c.overlap_and_gradient(p, psi, phi)
        np.testing.assert_allclose(df, fd, atol=1e-6)
