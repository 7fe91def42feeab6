"""Layer families, Trotter circuits and fits."""
from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
from scipy.stats import unitary_group

from circuits.fitting import compile_unitary, fit_to_target
from circuits.layers import NativeLayerSpec, generator_circuit, native_brickwork
from circuits.random_circuits import random_hermitian, random_state
from circuits.register import Space, embed_local, product_state
from circuits.terms import LocalTerm
from circuits.trotter import trotter_circuit, trotter_schedule


def local_terms(rng, n_qudits, d):
    """Random 1- and 2-local Hermitian terms (one diagonal), on a chain."""
    terms = [LocalTerm((q, q + 1), random_hermitian(rng, d * d)) for q in range(n_qudits - 1)]
    terms.append(LocalTerm((0,), np.diag(rng.normal(size=d))))
    terms.append(LocalTerm((n_qudits - 1,), random_hermitian(rng, d)))
    return terms


def finite_difference(fun, p, h=1e-5):
    """Central differences (standard numerical analysis, error O(h^2))."""
    return np.array([(fun(p + h * e) - fun(p - h * e)) / (2 * h) for e in np.eye(p.size)])


@pytest.mark.parametrize(
    "spec",
    [
        NativeLayerSpec(),
        NativeLayerSpec(rotations=((0, 1, 0.0), (1, 2, np.pi / 2)), phases=((0.0, 1.0, -1.0),)),
        NativeLayerSpec(entangler="diagonal"),
        NativeLayerSpec(ms_levels=(1, 2), ms_phi=0.3),
    ],
)
def test_native_brickwork_identity_and_gradient(spec):
    rng = np.random.default_rng(1)
    c = native_brickwork(4, 3, 2, spec)
    psi, phi = random_state(rng, 81), random_state(rng, 81)
    np.testing.assert_allclose(c.apply(np.zeros(c.n_params), psi), psi, atol=1e-14)
    p = rng.uniform(-np.pi, np.pi, c.n_params)
    _, df = c.overlap_and_gradient(p, psi, phi)
    fd = finite_difference(lambda x: np.vdot(phi, c.apply(x, psi)), p)
    np.testing.assert_allclose(df, fd, atol=1e-6)


def test_native_layer_structure():
    c = native_brickwork(5, 3, 1)
    # default rotations: (0,1),(1,2) x phases 0, pi/2 -> 4 per qudit; bonds 0-1,2-3 then 1-2,3-4
    assert c.n_params == 5 * 4 + 4
    ents = [op.gate.qudits for op in c.ops if op.gate.kind == "two"]
    assert ents == [(0, 1), (2, 3), (1, 2), (3, 4)]


def test_generator_layers_groups_and_modes_agree():
    rng = np.random.default_rng(2)
    n, d = 3, 3
    terms = local_terms(rng, n, d)
    groups = [0, 1, 0, 2]
    reg = generator_circuit(Space.qudits(n, d), terms, 2, groups)
    sparse_terms = [sp.csr_matrix(embed_local(t.matrix, t.qudits, n, d)) for t in terms]
    sub = generator_circuit(Space.subspace(d**n), sparse_terms, 2, groups)
    assert reg.n_params == sub.n_params == 6
    psi, phi = random_state(rng, 27), random_state(rng, 27)
    np.testing.assert_allclose(reg.apply(np.zeros(6), psi), psi, atol=1e-14)
    p = rng.normal(size=6)
    np.testing.assert_allclose(reg.apply(p, psi), sub.apply(p, psi), atol=1e-12)
    f_r, g_r = reg.overlap_and_gradient(p, psi, phi)
    f_s, g_s = sub.overlap_and_gradient(p, psi, phi)
    np.testing.assert_allclose([f_r, *g_r], [f_s, *g_s], atol=1e-12)
    fd = finite_difference(lambda x: np.vdot(phi, sub.apply(x, psi)), p)
    np.testing.assert_allclose(g_s, fd, atol=1e-6)


def trotter_error(order, dt, terms_a, terms_b, space, psi, exact_h, t_total=1.0):
    steps = int(round(t_total / dt))
    c = trotter_circuit(space, [terms_a, terms_b], dt, steps, order)
    # reference: scipy.linalg.expm of the full Hamiltonian
    exact = sla.expm(-1j * t_total * exact_h) @ psi
    return np.linalg.norm(c.apply(None, psi) - exact)


@pytest.mark.parametrize("order,slope", [(1, 1.0), (2, 2.0)])
def test_trotter_error_scaling(order, slope):
    # standard Trotter-Suzuki result: global error O(dt) for order 1, O(dt^2) for Strang
    rng = np.random.default_rng(4)
    n, d = 3, 2
    a = [LocalTerm((0, 1), random_hermitian(rng, 4)), LocalTerm((2,), random_hermitian(rng, 2))]
    b = [LocalTerm((1, 2), random_hermitian(rng, 4))]
    h = sum(embed_local(t.matrix, t.qudits, n, d) for t in a + b)
    psi = random_state(rng, d**n)
    space = Space.qudits(n, d)
    errs = [trotter_error(order, dt, a, b, space, psi, h) for dt in (0.05, 0.025, 0.0125)]
    slopes = np.diff(np.log(errs)) / np.diff(np.log([0.05, 0.025, 0.0125]))
    assert np.all(np.abs(slopes - slope) < 0.15), slopes


def test_trotter_schedule_fuses_half_steps():
    seq = trotter_schedule(3, 2, 2)
    assert [(g, f) for g, f, _ in seq] == [(0, 0.5), (1, 0.5), (2, 1.0), (1, 0.5), (0, 1.0), (1, 0.5), (2, 1.0), (1, 0.5), (0, 0.5)]
    assert len(trotter_schedule(2, 4, 1)) == 8


def test_fit_recovers_reachable_target():
    rng = np.random.default_rng(6)
    c = native_brickwork(3, 3, 2)
    psi0 = product_state([0, 1, 2], 3)
    target = c.apply(rng.uniform(-0.3, 0.3, c.n_params), psi0)
    res = fit_to_target(c, psi0, target, tol=1e-10, maxiter=1000)
    assert res.fidelity > 1 - 1e-6
    assert res.nfev >= 1 and res.wall_time > 0
    np.testing.assert_allclose(abs(np.vdot(target, c.apply(res.params, psi0))) ** 2, res.fidelity, atol=1e-12)


def test_compile_two_qubit_unitary():
    # reference: scipy.stats.unitary_group (Haar-random target); a generic two-qubit unitary
    # needs three entanglers (textbook KAK result), so one brickwork layer cannot reach it
    u = unitary_group.rvs(4, random_state=3)
    spec = NativeLayerSpec(rotations=((0, 1, 0.0), (0, 1, np.pi / 2)), phases=((1.0, -1.0),))
    res = compile_unitary(u, 2, 2, spec, fidelity=0.999, max_layers=5, restarts=4, seed=1)
    assert res.fidelity >= 0.999
    assert res.history[0][1] < 0.999 and res.n_layers >= 3
    v = res.circuit.unitary(res.params)
    assert abs(np.trace(u.conj().T @ v)) ** 2 / 16 == pytest.approx(res.fidelity, abs=1e-10)
    assert res.counts["two"] == res.n_layers
