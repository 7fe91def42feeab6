"""Initial states from ``[initial]``: field patterns follow Gauss's law (docs/conventions.md §2–3); bad input is named."""

from __future__ import annotations

import numpy as np
import pytest

from lgt.basis import PhysicalBasis
from lgt.errors import ConfigError
from lgt.model import ModelParams
from lgt.states import ground_state, initial_fields, prepare_initial_state, resolve_initial


def occupations(params: ModelParams, fields: np.ndarray) -> np.ndarray:
    """n_n = L_n − L_(n−1) − q_n + (1 − (−1)^n)/2 with L_(−1) = L_(N−1) = ε (Gauss's law, written out)."""
    eps = params.boundary_field
    L = np.concatenate([[eps], fields, [eps]])
    return np.diff(L) - params.charge_array() + np.arange(params.sites) % 2


def test_vacuum_is_all_epsilon_with_staggered_filling():
    p = ModelParams(sites=8)
    fields = initial_fields(p, resolve_initial({"kind": "vacuum"}, p))
    assert np.all(fields == 0.0)
    assert list(occupations(p, fields)) == [0, 1] * 4  # bare vacuum: odd sites filled


def test_missing_section_means_vacuum():
    p = ModelParams(sites=6)
    assert resolve_initial(None, p) == {"kind": "vacuum"}


@pytest.mark.parametrize("sites,flux", [([2, 5], +1), ([5, 2], +1), ([3, 6], -1), ([6, 3], -1), ([0, 9], +1)])
def test_meson_flux_and_charges(sites, flux):
    # ``flux`` by hand: a particle (even site) on the left end sends flux +1 to the right, an
    # antiparticle (odd site) on the left sends −1; the order in which the pair is listed is irrelevant
    p = ModelParams(sites=10)
    fields = initial_fields(p, resolve_initial({"kind": "meson", "sites": sites}, p))
    i, j = sorted(sites)
    expected = np.zeros(9)
    expected[i:j] = flux
    np.testing.assert_array_equal(fields, expected)
    # independent check: L_n = Σ_{k≤n} Q_k (Gauss's law, ε = 0, no static charges) summed by hand
    Q = np.zeros(10, dtype=int)
    Q[i], Q[j] = (1, -1) if i % 2 == 0 else (-1, 1)
    running, by_hand = 0, []
    for n in range(9):
        running += Q[n]
        by_hand.append(running)
    np.testing.assert_array_equal(fields, by_hand)
    np.testing.assert_array_equal(occupations(p, fields) - np.arange(10) % 2, Q)


def test_several_mesons():
    p = ModelParams(sites=12)
    fields = initial_fields(p, resolve_initial({"kind": "meson", "sites": [[0, 1], [6, 9]]}, p))
    assert list(fields) == [1, 0, 0, 0, 0, 0, 1, 1, 1, 0, 0]


def test_string_between_static_charges():
    p = ModelParams(sites=8, static_charges=[[2, 1], [5, -1]])
    fields = initial_fields(p, resolve_initial({"kind": "string"}, p))
    assert list(fields) == [0, 0, 1, 1, 1, 0, 0]
    assert np.all(np.isin(occupations(p, fields), (0, 1)))


def test_fields_kind_half_integer_window():
    p = ModelParams(sites=4, levels=2, link="quantum-link")  # ε = −1/2
    r = resolve_initial({"kind": "fields", "fields": [0.5, -0.5, -0.5]}, p)
    b = PhysicalBasis(p)
    psi = prepare_initial_state(b, r)
    assert psi.dtype == np.complex128 and np.isclose(np.linalg.norm(psi), 1)
    k = int(np.argmax(abs(psi)))
    assert list(b.fields()[k]) == [0.5, -0.5, -0.5]


def test_ground_kind_is_ground_state_of_overridden_model():
    p = ModelParams(sites=6, hopping=1.0, mass=0.3)
    b = PhysicalBasis(p)
    psi = prepare_initial_state(b, resolve_initial({"kind": "ground", "model": {"mass": 2.0}}, p))
    # reference: dense numpy diagonalisation of the overridden model (numpy.linalg.eigh)
    from lgt.hamiltonian import build_hamiltonian
    H2 = build_hamiltonian(PhysicalBasis(p.replace(mass=2.0))).toarray()
    w, v = np.linalg.eigh(H2)
    assert abs(abs(np.vdot(v[:, 0], psi)) - 1) < 1e-10
    e0, _ = ground_state(b)
    assert np.isclose(e0, np.linalg.eigvalsh(build_hamiltonian(b).toarray())[0])


@pytest.mark.parametrize("section,key,words", [
    ({"kind": "bubble"}, "initial.kind", "must be one of"),
    ({"kind": "meson"}, "initial.sites", "required"),
    ({"kind": "meson", "sites": [2, 4]}, "initial.sites", "even sites"),
    ({"kind": "meson", "sites": [1, 3]}, "initial.sites", "odd sites"),
    ({"kind": "meson", "sites": [2, 9]}, "initial.sites", "outside"),
    ({"kind": "meson", "sites": [[0, 1], [1, 2]]}, "initial.sites", "two mesons"),
    ({"kind": "meson", "sites": [[0, 3], [2, 5]]}, "initial.sites", "outside the window"),
    ({"kind": "meson", "sites": [2, 3], "fields": [0] * 7}, "initial.fields", "unknown key"),
    ({"kind": "fields", "fields": [0, 0]}, "initial.fields", "K = 7"),
    ({"kind": "fields", "fields": [0, 0, 2, 0, 0, 0, 0]}, "initial.fields", "outside the window"),
    ({"kind": "fields", "fields": [0, 0, 0.5, 0, 0, 0, 0]}, "initial.fields", "grid"),
    ({"kind": "fields", "fields": [0, 1, 0, 0, 0, 0, 0]}, "initial.fields", "Gauss's law at site 1"),
    ({"kind": "string"}, "initial.kind", "no static_charges"),
    ({"kind": "ground", "model": {"sites": 10}}, "initial.model.sites", "cannot be changed"),
    ({"kind": "ground", "model": {"mass": "heavy"}}, "initial.model.mass", "number"),
])
def test_impossible_requests_are_named(section, key, words):
    p = ModelParams(sites=8)
    with pytest.raises(ConfigError) as info:
        resolve_initial(section, p)
    assert info.value.key == key and words in info.value.reason


def test_static_charge_site_cannot_host_meson_end():
    p = ModelParams(sites=8, static_charges=[[2, 1], [5, -1]])
    with pytest.raises(ConfigError, match="static charge"):
        resolve_initial({"kind": "meson", "sites": [2, 3]}, p)
