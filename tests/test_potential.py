"""Static potential, string tension and meson masses against strong-coupling results and dense spectra."""

from __future__ import annotations

import numpy as np
import pytest

from lgt.errors import ConfigError
from lgt.model import ModelParams
from lgt.potential import fit_string, meson_masses, resolve_potential, static_pair_sites, static_potential


@pytest.mark.parametrize("J", [1.0, 0.7])
def test_strong_coupling_potential_is_linear(J):
    """Strong coupling w = 0 (Kogut & Susskind, Phys. Rev. D 11, 395 (1975)): a flux string of
    length r costs J per link, V(r) = J·r, while screening both charges costs 2m + 2J here
    (one static–dynamical meson at each end, derived from Gauss's law with w = 0)."""
    m = 3.0
    out = static_potential(ModelParams(sites=12, hopping=0.0, mass=m, coupling=J), [1, 3, 5, 7])
    assert np.allclose(out["potential"], J * np.array([1, 3, 5, 7]), atol=1e-10)
    assert out["string_tension"] == pytest.approx(J) and out["breaking_distance"] is None
    # the lightest meson at w = 0 is one pair on one link: 2m + J (textbook strong-coupling spectrum)
    assert out["meson_masses"][0] == pytest.approx(2 * m + J)


def test_strong_coupling_breaking_distance():
    """w = 0: V(r) = min(J r, 2m + 2J), so the string breaks at r_b = (2m + 2J)/J (derived as above)."""
    m, J = 1.0, 1.0
    out = static_potential(ModelParams(sites=12, hopping=0.0, mass=m, coupling=J), [1, 3, 5, 7, 9])
    assert np.allclose(out["potential"], np.minimum(J * np.array([1, 3, 5, 7, 9]), 2 * m + 2 * J))
    assert out["plateau"] == pytest.approx(2 * m + 2 * J)
    assert out["breaking_distance"] == pytest.approx((2 * m + 2 * J) / J)


def test_weak_hopping_tension_close_to_coupling():
    """Second-order perturbation theory lowers V by O(w²/Δ); for w = 0.1 the tension stays within 5 % of J."""
    out = static_potential(ModelParams(sites=12, hopping=0.1, mass=3.0), [1, 3, 5, 7])  # breaks near r = 8
    assert out["string_tension"] == pytest.approx(1.0, rel=0.05)


def test_meson_masses_are_gaps_of_dense_spectrum():
    """Reference: numpy.linalg.eigh of the same Hamiltonian built densely."""
    from lgt.basis import PhysicalBasis
    from lgt.hamiltonian import build_hamiltonian
    p = ModelParams(sites=8, hopping=0.6, mass=0.4)
    E = np.linalg.eigvalsh(build_hamiltonian(PhysicalBasis(p)).toarray())
    assert np.allclose(meson_masses(p, 3), E[1:4] - E[0])


@pytest.mark.parametrize("N", [8, 10, 12, 14, 20])
def test_placement_rule_keeps_sublattices_and_centre(N):
    for r in range(1, N, 2):
        i, j = static_pair_sites(N, r)
        assert i % 2 == 0 and j % 2 == 1 and j - i == r and 0 <= i and j < N
        assert abs((i + j) / 2 - (N - 1) / 2) <= 1.0


def test_fit_string_without_breaking():
    out = fit_string([1, 3, 5], [1.5, 3.5, 5.5])
    assert out["string_tension"] == pytest.approx(1.0) and out["intercept"] == pytest.approx(0.5)
    assert out["breaking_distance"] is None


@pytest.mark.parametrize("distances,key,words", [
    ([2], "--distances", "odd"),
    ([1, 13], "--distances", "does not fit"),
    ([0], "--distances", "at least 1"),
])
def test_bad_distances_named(distances, key, words):
    with pytest.raises(ConfigError) as info:
        resolve_potential({"model": {"sites": 12}}, distances)
    assert info.value.key == key and words in info.value.reason


def test_bad_potential_config_named():
    with pytest.raises(ConfigError) as info:
        resolve_potential({"model": {"sites": 8}})
    assert info.value.key == "potential.distances"
    with pytest.raises(ConfigError) as info:
        resolve_potential({"model": {"sites": 8}, "potential": {"distances": [1], "width": 2}})
    assert info.value.key == "potential.width"
    # the key is named by validation; the physics function raises a plain ValueError
    with pytest.raises(ConfigError) as info:
        resolve_potential({"model": {"sites": 8, "static_charges": [[2, 1], [5, -1]]}}, [1])
    assert info.value.key == "model.static_charges"
    with pytest.raises(ValueError, match="no static charges") as plain:
        static_potential(ModelParams(sites=8, static_charges=[[2, 1], [5, -1]]), [1])
    assert not isinstance(plain.value, ConfigError)


def test_potential_command_json(tmp_path, capsys):
    import json

    from lgt.cli import main

    cfg = tmp_path / "p.toml"
    cfg.write_text("[model]\nsites = 10\nhopping = 0.0\nmass = 3.0\ncoupling = 0.5\n")
    assert main(["potential", str(cfg), "--distances", "1", "3", "5", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert np.allclose(out["potential"], [0.5, 1.5, 2.5])  # V = J r at w = 0 (Kogut & Susskind 1975)
    assert main(["potential", str(cfg), "--distances", "4"]) == 2
    assert "--distances" in capsys.readouterr().err
