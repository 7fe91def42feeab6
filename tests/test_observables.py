"""Observables against direct definitions, qutip 5 partial traces and textbook entangled states."""

from __future__ import annotations

import numpy as np
import pytest
import qutip
from hypothesis import given, settings, strategies as st

from lgt.basis import PhysicalBasis
from lgt.errors import ConfigError
from lgt.model import ModelParams
from lgt.observables import (Observer, cut_structure, entanglement_entropy, particle_density,
                             register_leakage)
from lgt.states import basis_state

MODELS = [dict(sites=6), dict(sites=8), dict(sites=6, levels=4, link="quantum-link"),
          dict(sites=8, static_charges=[[3, 1], [6, -1]]), dict(sites=6, levels=5)]


def random_state(dim: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    psi = rng.normal(size=dim) + 1j * rng.normal(size=dim)
    return psi / np.linalg.norm(psi)


@settings(max_examples=15, deadline=None)
@given(model=st.sampled_from(MODELS), seed=st.integers(0, 2 ** 32 - 1), data=st.data())
def test_entropies_match_qutip_partial_trace(model, seed, data):
    """Reference: qutip 5 ``ptrace`` + ``entropy_vn`` (natural log) on the d^K register vector."""
    p = ModelParams(**model)
    b = PhysicalBasis(p)
    psi = random_state(b.dimension, seed)
    K = p.n_links
    cut = data.draw(st.integers(1, K - 1))
    vn, r2 = entanglement_entropy(b, psi, cut)
    rho = qutip.Qobj(b.to_register(psi), dims=[[p.levels] * K, [1] * K]).ptrace(list(range(cut)))
    assert np.isclose(vn, qutip.entropy_vn(rho), atol=1e-10)
    assert np.isclose(r2, -np.log((rho * rho).tr().real), atol=1e-10)


def test_product_state_has_zero_entropy():
    p = ModelParams(sites=10)
    b = PhysicalBasis(p)
    psi = basis_state(b, [1, 1, 1, 0, 0, -1, 0, 0, 0])  # two mesons: a basis (product) state
    for cut in range(1, 9):
        assert entanglement_entropy(b, psi, cut) == (0.0, 0.0)


def test_two_link_cat_state_has_ln2():
    """(|0,0,0⟩ + |1,1,1⟩)/√2 across a cut: Schmidt rank 2 with equal weights, S = S₂ = ln 2 (textbook)."""
    p = ModelParams(sites=4)
    b = PhysicalBasis(p)
    psi = (basis_state(b, [0, 0, 0]) + basis_state(b, [1, 1, 1])) / np.sqrt(2)
    for cut in (1, 2):
        vn, r2 = entanglement_entropy(b, psi, cut)
        assert np.isclose(vn, np.log(2), atol=1e-12) and np.isclose(r2, np.log(2), atol=1e-12)


def test_default_cut_and_bad_cut():
    b = PhysicalBasis(ModelParams(sites=8))
    assert cut_structure(b).cut == 3
    with pytest.raises(ConfigError) as info:
        cut_structure(b, 7)
    assert info.value.key == "evolution.cut"


@pytest.mark.parametrize("model", MODELS)
def test_one_body_observables_match_direct_sums(model):
    """⟨L⟩, ⟨L²⟩, ⟨n⟩, ⟨Q⟩, correlations, ν from the definitions summed state by state."""
    p = ModelParams(**model)
    b = PhysicalBasis(p)
    psi = random_state(b.dimension, 7)
    prob = abs(psi) ** 2
    occ = b.occupations().astype(float)
    Q = b.charges().astype(float)
    out = Observer(b).measure(psi)
    assert np.allclose(out["electric_field"], prob @ b.fields())
    assert np.allclose(out["electric_field_squared"], prob @ b.fields() ** 2)
    assert np.allclose(out["occupation"], prob @ occ)
    assert np.allclose(out["charge"], prob @ Q)
    corr = np.einsum("s,si,sj->ij", prob, Q, Q) - np.outer(prob @ Q, prob @ Q)
    assert np.allclose(out["charge_correlation"], corr)
    nu = prob @ np.where(np.arange(p.sites) % 2 == 1, 1 - occ, occ).mean(axis=1)
    assert np.isclose(out["particle_density"], nu)
    assert np.isclose(out["string_length"], prob @ np.abs(b.fields() - p.boundary_field).sum(axis=1))
    assert np.isclose(out["norm"], 1.0)


def test_particle_density_of_vacuum_and_meson():
    assert particle_density([0, 1, 0, 1]) == 0.0
    assert particle_density([1, 0, 0, 1]) == 0.5  # one meson on 4 sites: 2 excitations / 4


def test_loschmidt_and_energy():
    p = ModelParams(sites=6, hopping=0.7, mass=0.4)
    b = PhysicalBasis(p)
    from lgt.hamiltonian import build_hamiltonian
    H = build_hamiltonian(b)
    psi0 = random_state(b.dimension, 1)
    psi = random_state(b.dimension, 2)
    out = Observer(b, H, reference=psi0).measure(psi)
    echo = abs(np.vdot(psi0, psi)) ** 2
    assert np.isclose(out["loschmidt_echo"], echo)
    assert np.isclose(out["loschmidt_rate"], -np.log(echo) / 6)
    assert np.isclose(out["energy"], np.vdot(psi, H.toarray() @ psi).real)


def test_register_leakage():
    p = ModelParams(sites=4)
    b = PhysicalBasis(p)
    reg = b.to_register(basis_state(b, [0, 0, 0]))
    assert register_leakage(b, reg) == 0.0
    bad = np.zeros_like(reg)
    bad[np.setdiff1d(np.arange(reg.size), b.codes)[0]] = 1.0  # a Gauss-violating register state
    mixed = (reg + bad) / np.sqrt(2)
    assert np.isclose(register_leakage(b, mixed), 0.5)


def test_unknown_observable_named():
    with pytest.raises(ConfigError) as info:
        Observer(PhysicalBasis(ModelParams(sites=4)), which=["magnetisation"])
    assert info.value.key == "evolution.observables"
