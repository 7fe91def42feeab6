"""Continuum-limit workflow (lgt.continuum): fits, lattice points against ED, massless Schwinger model."""

from __future__ import annotations

import numpy as np
import pytest

from lgt.continuum import (MASSLESS_CONDENSATE, SCHWINGER_BOSON_MASS, condensate, dimensionless_params,
                           extrapolate, lattice_mass, resolve_continuum, weighted_fit)
from lgt.errors import ConfigError


def test_mass_shift():
    """m_lat = m − g²a/8 (Dempsey, Klebanov, Pufu & Zan, PRL 2022): μ = 2(m/g)√x − 1/4."""
    assert lattice_mass(0.0, 16.0) == -0.25
    assert lattice_mass(0.5, 16.0) == pytest.approx(4.0 - 0.25)
    assert lattice_mass(0.5, 16.0, mass_shift=False) == pytest.approx(4.0)
    p = dimensionless_params(25.0, 10, 0.0)
    assert (p.hopping, p.coupling, p.mass) == (25.0, 1.0, -0.25)


def test_weighted_fit_matches_numpy_polyfit():
    """Coefficients and covariance equal numpy.polyfit's (reference library) for weighted data."""
    rng = np.random.default_rng(3)
    u = np.linspace(0.1, 0.5, 6)
    sigma = np.full(6, 0.01)
    y = 0.56 + 0.3 * u - 0.2 * u ** 2 + rng.normal(0, 0.01, 6)
    coef, cov = weighted_fit(u, y, 2, sigma)
    ref, ref_cov = np.polyfit(u, y, 2, w=1 / sigma, cov="unscaled")
    assert np.allclose(coef[::-1], ref)
    chi2 = np.sum(((np.polyval(ref, u) - y) / sigma) ** 2) / 3
    assert np.allclose(cov[::-1, ::-1], ref_cov * max(1.0, chi2))
    value, err = extrapolate(u, 1.5 - 2 * u, 1)
    assert value == pytest.approx(1.5) and err < 1e-12


def test_condensate_of_staggered_pattern():
    """Bare vacuum (odd sites filled): Σ/g = −√x/2 on every bulk window."""
    occ = (np.arange(20) % 2).astype(float)
    assert condensate(occ, 4.0) == pytest.approx(-1.0)
    assert condensate(occ, 4.0, 1.0) == pytest.approx(-1.0)


def test_bad_continuum_keys_are_named():
    for section, key in [({"x": [4.0]}, "continuum.x"), ({"sites": [7, 8]}, "continuum.sites"),
                         ({"levels": 4}, "continuum.levels"), ({"x_degree": 5}, "continuum.x_degree"),
                         ({"nope": 1}, "continuum.nope")]:
        with pytest.raises(ConfigError) as info:
            resolve_continuum({"continuum": section})
        assert key in str(info.value)


def test_points_equal_exact_diagonalization():
    """A DMRG point (x, N) equals exact diagonalization of the same lattice model."""
    pytest.importorskip("tenpy")
    from lgt.basis import PhysicalBasis
    from lgt.continuum import measure_point
    from lgt.hamiltonian import build_hamiltonian
    from lgt.observables import Observer
    from lgt.spectrum import lowest_eigenpairs

    section = resolve_continuum({"continuum": {"x": [1.0, 2.0], "sites": [8, 10], "levels": 3,
                                               "bond_dimension": 32}})["continuum"]
    point = measure_point(2.0, 8, section)
    basis = PhysicalBasis(dimensionless_params(2.0, 8, 0.0, True, 3))
    H = build_hamiltonian(basis)
    E, V = lowest_eigenpairs(H, 2)
    assert point["E0"] == pytest.approx(E[0], abs=1e-8)
    assert point["meson_mass"] == pytest.approx((E[1] - E[0]) / (2 * np.sqrt(2.0)), abs=1e-6)
    occ = Observer(basis, H, which=["occupation"]).measure(V[:, 0].astype(complex))["occupation"]
    assert point["condensate"] == pytest.approx(condensate(occ, 2.0, section["bulk_fraction"]), abs=1e-6)


@pytest.mark.slow
def test_massless_schwinger_model():
    """Massless continuum values with the mass shift: M/g = 1/√π (Schwinger 1962) within 1 %,
    Σ/g = −e^γ/(2π^{3/2}) (Hetrick & Hosotani 1988) within 5 %, E₀/(2Nx) → −1/π (free fermions)."""
    pytest.importorskip("tenpy")
    from lgt.continuum import run_continuum

    # the setup measured in docs/continuum.md (279 s wall at load 2-3 on 2 cores)
    config = {"continuum": {"x": [4.0, 9.0, 16.0], "volumes": [6.0, 8.0, 10.0], "levels": 5,
                            "bond_dimension": 40, "x_degree": 1}}
    result = run_continuum(resolve_continuum(config))
    fin = {k: float(v[0]) for k, v in result.tables["continuum"].columns.items()}
    assert fin["meson_mass"] == pytest.approx(SCHWINGER_BOSON_MASS, rel=0.01)
    assert fin["condensate"] == pytest.approx(MASSLESS_CONDENSATE, rel=0.05)
    assert fin["energy_density"] == pytest.approx(-1 / np.pi, rel=0.02)
