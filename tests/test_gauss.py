"""Gauss's law module (lgt.gauss) and register-size independence of the basis lookups.

References: Gauss's law written out by hand in the tests (brute force over the register, from
docs/conventions.md §2); free-fermion ground energies from the single-particle hopping matrix
(textbook: a quadratic fermion Hamiltonian's ground state fills its lowest one-particle levels);
the independent spins-only formulation of tests/independent_models.py (docs/conventions.md §2 (c)).
"""

from __future__ import annotations

from math import comb

import numpy as np
import pytest
import scipy.sparse.linalg as sla
from hypothesis import given, settings, strategies as st

from independent_models import spin_only_hamiltonian
from lgt import gauss
from lgt.basis import PhysicalBasis, codes_of, register_fits_int64
from lgt.errors import ResourceError
from lgt.hamiltonian import build_hamiltonian, hopping_pairs, physical_terms
from lgt.model import ModelParams
from lgt.resources import count_physical_states
from test_basis_properties import brute_force_physical, small_models


def built(params: ModelParams) -> PhysicalBasis | None:
    """The basis, or None when Gauss's law admits no state."""
    try:
        return PhysicalBasis(params)
    except ValueError:
        return None


@st.composite
def models_with_boundary(draw):
    """small_models, plus odd-d windows whose boundary field ε sits anywhere on the grid."""
    params = draw(small_models())
    if params.levels % 2 and draw(st.booleans()):
        params = params.replace(boundary_field=float(draw(st.integers(-2, 2))))
    return params


@settings(max_examples=40, deadline=None)
@given(params=models_with_boundary())
def test_count_equals_enumeration_equals_brute_force(params):
    # reference: every register configuration checked by hand (test_basis_properties.brute_force_physical)
    brute = brute_force_physical(params)
    assert count_physical_states(params) == gauss.count_physical_states(params) == brute.shape[0]
    if brute.shape[0] == 0:
        with pytest.raises(ValueError):
            PhysicalBasis(params)
        return
    basis = PhysicalBasis(params)
    np.testing.assert_array_equal(basis.level_table, brute)
    occ = basis.occupations()
    assert set(np.unique(occ)) <= {0, 1}


@settings(max_examples=40, deadline=None)
@given(params=small_models())
def test_fields_from_charges_inverts_occupations(params):
    basis = built(params)
    if basis is None:
        return
    occ = gauss.occupations_from_levels(basis.level_table, params)
    np.testing.assert_array_equal(gauss.fields_from_occupations(occ, params), basis.fields())
    Q = occ - np.arange(params.sites) % 2
    np.testing.assert_array_equal(gauss.fields_from_charges(params, Q), basis.fields())
    # any leading shape: a (2, dim, K) stack gives (2, dim, N)
    stack = np.stack([basis.level_table, basis.level_table])
    assert gauss.occupations_from_levels(stack, params).shape == (2, basis.dimension, params.sites)


@settings(max_examples=30, deadline=None)
@given(params=small_models(), seed=st.integers(0, 2 ** 31))
def test_mean_occupations_and_density_are_linear_in_the_state(params, seed):
    basis = built(params)
    if basis is None:
        return
    rng = np.random.default_rng(seed)
    prob = rng.random(basis.dimension)
    norm = float(prob.sum())
    exact = prob @ basis.occupations()
    mean_levels = prob @ basis.level_table
    np.testing.assert_allclose(gauss.occupations_from_mean_levels(mean_levels, params, norm), exact, atol=1e-9)
    # ν written out: particles on even sites, holes on odd sites, averaged over the N sites
    occ = basis.occupations()
    by_hand = np.array([(sum(o[n] if n % 2 == 0 else 1 - o[n] for n in range(params.sites))) / params.sites
                        for o in occ])
    np.testing.assert_allclose(gauss.particle_density(occ), by_hand)


@settings(max_examples=30, deadline=None)
@given(params=small_models(), seed=st.integers(0, 2 ** 31))
def test_ranking_is_the_basis_index(params, seed):
    basis = built(params)
    if basis is None:
        return
    np.testing.assert_array_equal(basis.index_of_levels(basis.level_table), np.arange(basis.dimension))
    # random register configurations: index where physical (by hand), −1 elsewhere
    rng = np.random.default_rng(seed)
    rows = rng.integers(0, params.levels, size=(50, params.n_links))
    lookup = {tuple(r): i for i, r in enumerate(basis.level_table.tolist())}
    expected = [lookup.get(tuple(r), -1) for r in rows.tolist()]
    np.testing.assert_array_equal(basis.index_of_levels(rows), expected)
    np.testing.assert_array_equal(basis.index_of_codes(basis.codes), np.arange(basis.dimension))
    if params.n_links > 1:
        cut = params.n_links // 2
        left, right = basis.cut_codes(cut)
        np.testing.assert_array_equal(left * params.levels ** (params.n_links - cut) + right, basis.codes)


def test_hopping_targets_raise_one_link():
    p = ModelParams(sites=8, levels=5, link="quantum-link", static_charges=[[2, 1], [5, -1]])
    basis = PhysicalBasis(p)
    for link in range(p.n_links):
        src, dst, _ = hopping_pairs(basis, link)
        diff = basis.level_table[dst].astype(int) - basis.level_table[src]
        expected = np.zeros(p.n_links, dtype=int)
        expected[link] = 1
        assert src.size and np.all(diff == expected)


def test_register_beyond_int64_free_fermions():
    # N = 20, d = 11: d^K = 11^19 ≈ 6e19 does not fit int64 codes. The field never exceeds
    # ⌈N/4⌉ = 5 = S (docs/conventions.md §2), so the window is never reached and the subspace is
    # the whole zero-charge sector: C(20, 10) states (10 of 20 sites occupied). At J = 0 the model is free fermions
    # (nearest-neighbour hopping on an open chain: no Jordan–Wigner sign), so the ground energy
    # is the sum of the 10 lowest eigenvalues of the 20 × 20 one-particle matrix
    # h = w (δ_{n,n+1} + δ_{n+1,n}) + m (−1)^n δ_{nn} (textbook result).
    N, w, m = 20, 0.8, 0.6
    p = ModelParams(sites=N, levels=11, hopping=w, mass=m, coupling=0.0)
    assert not register_fits_int64(p.levels, p.n_links)
    basis = PhysicalBasis(p)
    assert basis.dimension == comb(N, N // 2) == 184_756 == count_physical_states(p)
    with pytest.raises(ResourceError):
        codes_of(basis.level_table, p.levels)
    # exact codes beyond int64 (Python ints), and lookups through them
    row = basis.level_table[12345]
    assert basis.codes[12345] == sum(int(j) * 11 ** (18 - n) for n, j in enumerate(row))
    assert basis.index_of_codes(basis.codes[[0, 12345, -1]]).tolist() == [0, 12345, basis.dimension - 1]
    left, right = basis.cut_codes(9)
    assert int(left[12345]) * 11 ** 10 + int(right[12345]) == basis.codes[12345]
    H = build_hamiltonian(basis)
    e0 = sla.eigsh(H, k=1, which="SA")[0][0]
    h = np.diag(m * (-1.0) ** np.arange(N)) + w * (np.eye(N, k=1) + np.eye(N, k=-1))
    assert e0 == pytest.approx(np.sort(np.linalg.eigvalsh(h))[: N // 2].sum(), abs=1e-8)


@pytest.mark.parametrize("seed", [0, 1])
def test_register_beyond_int64_interacting_matches_spins_only(seed):
    # N = 16, d = 21 (d^K = 21^15 ≈ 7e19 > int64): |L| ≤ ⌈N/4⌉ = 4 < S = 10 (static pair: ≤ 5), so the truncated model
    # is the untruncated one; reference: the spins-only formulation without a window
    # (tests/independent_models.py, docs/conventions.md §2 (c)), one static pair included.
    rng = np.random.default_rng(seed)
    w, m, J = rng.uniform(0.3, 1.5, 3)
    theta = float(rng.uniform(-np.pi, np.pi))
    charges = {3: 1, 10: -1} if seed else {}
    p = ModelParams(sites=16, levels=21, hopping=w, mass=m, coupling=J, theta=theta,
                    static_charges=[[k, v] for k, v in charges.items()])
    assert not register_fits_int64(p.levels, p.n_links)
    basis = PhysicalBasis(p)
    H = build_hamiltonian(basis)
    ref = spin_only_hamiltonian(16, None, w=w, m=m, J=J, theta=theta, charges=charges)
    assert H.shape == ref.shape
    ours = np.sort(sla.eigsh(H, k=4, which="SA", tol=1e-12)[0])
    theirs = np.sort(sla.eigsh(ref, k=4, which="SA", tol=1e-12)[0])
    np.testing.assert_allclose(ours, theirs, atol=1e-8)
    total = sum(t.matrix for t in physical_terms(basis))
    assert abs(total - H).max() < 1e-12


@settings(max_examples=30, deadline=None)
@given(params=small_models())
def test_successors_invert_the_site_occupation(params):
    # the forward step used by enumeration and counting gives exactly n = 0 and n = 1
    for link in range(params.n_links):
        left = None if link == 0 else np.arange(params.levels)
        succ = gauss.successors(params, link, left)
        occ = gauss.site_occupation(params, link, left if left is None else left[:, None], succ)
        assert np.all(occ == np.arange(2))


def test_unbalanced_static_charge_is_refused_by_name():
    # Gauss's law at the right end: L_(N−1) = ε + Σ (Q + q) must return to ε (zero total charge),
    # so a vacuum (Q = 0) cannot hold an unbalanced static charge
    from lgt.errors import ConfigError
    from lgt.states import resolve_initial
    p = ModelParams(sites=6, static_charges=[[2, 1]])
    assert gauss.end_field(p) == 1.0
    # the sector still exists: one extra dynamical antiparticle cancels the static charge
    assert gauss.count_physical_states(p) == len(brute_force_physical(p)) > 0
    with pytest.raises(ConfigError, match="static_charges"):
        resolve_initial({"kind": "vacuum"}, p)
