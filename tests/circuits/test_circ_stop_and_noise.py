"""Early stop of fits on a fidelity threshold; depolarizing density-matrix simulation."""

from __future__ import annotations

import numpy as np
import qutip

from circuits.fitting import fit_to_target
from circuits.layers import native_brickwork
from circuits.noise import depolarize, depolarizing_probability, noisy_density_matrix


def _problem(seed: int = 3):
    c = native_brickwork(2, 3, 2)
    rng = np.random.default_rng(seed)
    psi0 = np.zeros(9, complex)
    psi0[4] = 1
    target = c.apply(rng.normal(scale=0.3, size=c.n_params), psi0)
    return c, psi0, target


def test_fit_stops_at_threshold_and_full_fit_goes_further():
    c, psi0, target = _problem()
    stopped = fit_to_target(c, psi0, target, tol=1e-15, maxiter=2000, stop_infidelity=1e-3)
    full = fit_to_target(c, psi0, target, tol=1e-15, maxiter=2000)
    assert 1 - stopped.fidelity <= 1e-3
    assert stopped.iterations < full.iterations
    assert 1 - full.fidelity < 1 - stopped.fidelity


def test_fit_with_good_start_costs_one_evaluation():
    c, psi0, target = _problem()
    res = fit_to_target(c, psi0, psi0, np.zeros(c.n_params), stop_infidelity=1e-12)
    assert res.nfev == 1 and res.iterations == 0 and res.fidelity > 1 - 1e-12


def test_depolarize_matches_qutip_partial_trace():
    # reference: qutip 5 ptrace/tensor — (1-p) rho + p Tr_Q(rho) (x) 1/D, with Q = qudit 1 of 3
    rng = np.random.default_rng(7)
    a = rng.normal(size=(27, 27)) + 1j * rng.normal(size=(27, 27))
    rho = a @ a.conj().T
    rho /= np.trace(rho)
    p = 0.3
    ours = depolarize(rho, [1], p, 3, 3)
    q = qutip.Qobj(rho, dims=[[3, 3, 3], [3, 3, 3]])
    reduced = q.ptrace([0, 2])  # keeps qudits 0 and 2 (order 0, 2)
    mixed = qutip.tensor(reduced, qutip.qeye(3) / 3).permute([0, 2, 1])
    ref = (1 - p) * q + p * mixed
    np.testing.assert_allclose(ours, ref.full(), atol=1e-12)


def test_noiseless_density_matrix_is_the_pure_state_and_noise_follows_gate_fidelity():
    c = native_brickwork(3, 3, 1)
    th = np.random.default_rng(1).normal(size=c.n_params)
    psi = np.zeros(27, complex)
    psi[13] = 1
    v = c.apply(th, psi)
    np.testing.assert_allclose(noisy_density_matrix(c, th, psi, lambda op: 1.0), np.outer(v, v.conj()), atol=1e-12)
    # depolarizing probability from process fidelity F_e = 1 - p (1 - 1/D^2) (textbook channel fidelity)
    p = depolarizing_probability(0.99, 2, 3)
    assert abs((1 - p) + p / 81 - 0.99) < 1e-12
    rho = noisy_density_matrix(c, th, psi, lambda op: 0.995)
    assert abs(np.trace(rho) - 1) < 1e-12
    assert np.allclose(rho, rho.conj().T)
    assert np.min(np.linalg.eigvalsh(rho)) > -1e-12
