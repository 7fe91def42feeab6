"""Property tests of the Gauss-law basis and the Hamiltonian views (hypothesis)."""

from __future__ import annotations

import itertools

import numpy as np
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st

from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian, local_terms, physical_terms, register_hamiltonian
from lgt.model import ModelParams


@st.composite
def small_models(draw, max_register: int = 20000):
    d = draw(st.integers(2, 5))
    link = "quantum-link" if d % 2 == 0 or draw(st.booleans()) else "truncated"
    N = draw(st.sampled_from([n for n in (2, 4, 6, 8) if d ** (n - 1) <= max_register]))
    charges = []
    if draw(st.booleans()):
        site = draw(st.integers(0, N - 1))
        charges = [[site, draw(st.sampled_from([-1, 1]))]]
    eps = None
    if d % 2 == 0 and draw(st.booleans()):
        eps = 0.5
    return ModelParams(sites=N, levels=d, link=link, static_charges=charges, boundary_field=eps,
                       hopping=draw(st.floats(-2, 2)), mass=draw(st.floats(-2, 2)),
                       coupling=draw(st.floats(0, 2)), theta=draw(st.floats(-4, 4)))


def brute_force_physical(params: ModelParams) -> np.ndarray:
    """Every register configuration checked one by one against Gauss's law (reference loop)."""
    N, K, d = params.sites, params.n_links, params.levels
    q = params.charge_array()
    eps = params.boundary_field
    found = []
    for levels in itertools.product(range(d), repeat=K):
        L = [eps] + [j - params.spin for j in levels] + [eps]
        occ = [L[n + 1] - L[n] - q[n] + n % 2 for n in range(N)]
        if all(o in (0, 1) for o in occ):
            found.append(levels)
    return np.array(found, dtype=int).reshape(-1, K)


@settings(max_examples=40, deadline=None)
@given(params=small_models())
def test_basis_equals_brute_force_count_and_obeys_gauss(params):
    try:
        basis = PhysicalBasis(params)
    except ValueError:
        assert brute_force_physical(params).shape[0] == 0
        return
    brute = brute_force_physical(params)
    assert basis.dimension == brute.shape[0]
    np.testing.assert_array_equal(basis.level_table, brute)  # same states, same (row-major) order
    occ = basis.occupations()
    assert np.all((occ == 0) | (occ == 1))
    # Gauss's law L_n - L_{n-1} = Q_n + q_n with L_{-1} = L_{N-1} = eps
    L = np.concatenate([np.full((basis.dimension, 1), params.boundary_field), basis.fields(),
                        np.full((basis.dimension, 1), params.boundary_field)], axis=1)
    np.testing.assert_allclose(np.diff(L, axis=1), basis.charges() + params.charge_array())


@settings(max_examples=40, deadline=None)
@given(params=small_models())
def test_hamiltonian_is_hermitian_and_terms_sum_to_it(params):
    try:
        basis = PhysicalBasis(params)
    except ValueError:
        return
    H = build_hamiltonian(basis)
    assert abs(H - H.T.conj()).max() == 0 if H.nnz else True
    total = sum((t.matrix for t in physical_terms(basis)), sp.csr_matrix(H.shape))
    assert abs(total - H).max() < 1e-12 if H.nnz else True


@settings(max_examples=25, deadline=None)
@given(params=small_models(max_register=800))
def test_local_terms_reproduce_h_and_preserve_gauss_sectors(params):
    try:
        basis = PhysicalBasis(params)
    except ValueError:
        return
    Hl = register_hamiltonian(params, physical_only=False)
    Hp = register_hamiltonian(params, physical_only=True)
    assert abs(Hl - Hl.T).max() < 1e-12 if Hl.nnz else True
    on = basis.codes
    off = np.setdiff1d(np.arange(Hl.shape[0]), on)
    assert abs(Hl[on][:, on] - Hp[on][:, on]).max() < 1e-12 if Hp.nnz else True
    if off.size:
        assert (abs(Hl[off][:, on]).max() if Hl[off][:, on].nnz else 0.0) == 0.0
    for term in local_terms(params):
        assert np.allclose(term.matrix, term.matrix.T)


@settings(max_examples=25, deadline=None)
@given(params=small_models(max_register=3000), seed=st.integers(0, 2 ** 31))
def test_register_maps_round_trip_and_report_leakage(params, seed):
    try:
        basis = PhysicalBasis(params)
    except ValueError:
        return
    rng = np.random.default_rng(seed)
    v = rng.standard_normal(basis.dimension) + 1j * rng.standard_normal(basis.dimension)
    reg = basis.to_register(v)
    back, leaked = basis.from_register(reg)
    np.testing.assert_allclose(back, v)
    assert leaked < 1e-9 * np.vdot(v, v).real
    noise = np.zeros_like(reg)
    off = np.setdiff1d(np.arange(reg.size), basis.codes)
    if off.size:
        noise[off[0]] = 0.5
        _, leaked = basis.from_register(reg + noise)
        assert abs(leaked - 0.25) < 1e-9
