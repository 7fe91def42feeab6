"""State Jacobian, quantum geometric tensor and McLachlan velocity of layer circuits."""

from __future__ import annotations

import numpy as np

from circuits.layers import build_layers, generator_layer_builder
from circuits.register import Space
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from lgt.states import basis_state
from lgt.variational.ansatz import make_ansatz
from lgt.variational.geometry import geometric_tensor, mclachlan_velocity, state_and_jacobian

BASIS = PhysicalBasis(ModelParams(sites=4, hopping=1.0, mass=0.5, coupling=1.0, levels=3))


def test_jacobian_matches_central_differences():
    # reference: central finite differences of the circuit's own state, error O(h^2)
    rng = np.random.default_rng(3)
    for family in ("symmetric", "hardware"):
        ansatz = make_ansatz(BASIS, family, 2)
        v0 = ansatz.embed(basis_state(BASIS, np.zeros(3)))
        theta = rng.normal(scale=0.4, size=ansatz.n_params)
        psi, J = state_and_jacobian(ansatz.circuit, theta, v0)
        np.testing.assert_allclose(psi, ansatz.circuit.apply(theta, v0), atol=1e-12)
        h = 1e-5
        for k in rng.choice(ansatz.n_params, size=5, replace=False):
            e = np.zeros(ansatz.n_params)
            e[k] = h
            fd = (ansatz.circuit.apply(theta + e, v0) - ansatz.circuit.apply(theta - e, v0)) / (2 * h)
            np.testing.assert_allclose(J[:, k], fd, atol=1e-8)


def test_geometric_tensor_is_the_fubini_study_metric():
    # reference: Fubini–Study line element 1 - |<ψ(θ)|ψ(θ+δ)>|² ≈ δᵀ G δ (Stokes et al., Quantum 4, 269 (2020))
    ansatz = make_ansatz(BASIS, "hardware", 2)
    v0 = ansatz.embed(basis_state(BASIS, np.zeros(3)))
    rng = np.random.default_rng(4)
    theta = rng.normal(scale=0.4, size=ansatz.n_params)
    psi, J = state_and_jacobian(ansatz.circuit, theta, v0)
    G = geometric_tensor(psi, J)
    assert np.allclose(G, G.T) and np.linalg.eigvalsh(G).min() > -1e-12
    delta = 1e-4 * rng.normal(size=ansatz.n_params)
    moved = ansatz.circuit.apply(theta + delta, v0)
    np.testing.assert_allclose(1 - abs(np.vdot(psi, moved)) ** 2, delta @ G @ delta, rtol=1e-3)


def test_mclachlan_velocity_of_the_exact_propagator_is_one():
    # ψ(θ) = e^{-iθH}ψ₀ solves the Schrödinger equation at θ̇ = 1 exactly (textbook), so McLachlan's
    # principle must return θ̇ = 1 for the one-parameter circuit e^{-iθH}
    H = build_hamiltonian(BASIS)
    space = Space.subspace(BASIS.dimension)
    circuit = build_layers(space, 1, generator_layer_builder(space, [H]))
    psi0 = basis_state(BASIS, np.zeros(3))
    for theta in (0.0, 0.3, 1.1):
        np.testing.assert_allclose(mclachlan_velocity(circuit, np.array([theta]), psi0, H), [1.0], rtol=1e-10)
