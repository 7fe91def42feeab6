"""Production spectra against textbook and published limits."""

from __future__ import annotations

import numpy as np
import pytest

from independent_models import spin_only_hamiltonian
from lgt.basis import PhysicalBasis
from lgt.hamiltonian import build_hamiltonian, register_hamiltonian
from lgt.model import ModelParams
from lgt.spectrum import lowest_levels


def spectrum(params: ModelParams, count: int) -> np.ndarray:
    return lowest_levels(build_hamiltonian(PhysicalBasis(params)), count)


@pytest.mark.parametrize("N,w,m", [(4, 1.0, 0.5), (6, 0.7, 0.3), (8, 1.2, 0.0), (10, 0.5, 1.1)])
def test_free_staggered_fermions_ground_energy(N, w, m):
    # textbook: open tight-binding chain, single-particle energies ±sqrt(m² + 4w² cos²(πj/(N+1))),
    # j = 1..N/2; the half-filled (zero-charge) ground state fills the negative ones.
    window = 2 * ((N + 2) // 4) + 1  # wide enough that the links never truncate
    p = ModelParams(sites=N, hopping=w, mass=m, coupling=0.0, levels=window)
    j = np.arange(1, N // 2 + 1)
    expected = -np.sum(np.sqrt(m ** 2 + 4 * w ** 2 * np.cos(np.pi * j / (N + 1)) ** 2))
    assert spectrum(p, 1)[0] == pytest.approx(expected, abs=1e-10)


@pytest.mark.parametrize("N,m,J,d,link", [(6, 0.4, 1.0, 3, "truncated"), (8, 1.3, 0.6, 5, "truncated"),
                                          (6, 0.8, 2.0, 3, "quantum-link")])
def test_strong_coupling_lowest_excitation(N, m, J, d, link):
    # textbook strong-coupling limit (w = 0): the cheapest excitation of the bare vacuum is a
    # nearest-neighbour meson, costing 2m (particle + antiparticle) + J (one unit of flux).
    p = ModelParams(sites=N, hopping=0.0, mass=m, coupling=J, levels=d, link=link)
    E = spectrum(p, 2)
    assert E[0] == pytest.approx(-m * N / 2, abs=1e-12)  # bare vacuum: odd sites filled
    assert E[1] - E[0] == pytest.approx(2 * m + J, abs=1e-12)


@pytest.mark.parametrize("N", [4, 6, 8, 10])
def test_wide_truncated_window_equals_untruncated_model(N):
    # |L| <= floor((N+2)/4) holds for every Gauss-law configuration without static charges, so a
    # truncated window that wide is exact: compare with the untruncated spins-only model (docs/conventions.md §2 c)
    S = (N + 2) // 4
    kw = dict(w=0.8, m=0.35, J=1.1, theta=0.6)
    p = ModelParams(sites=N, hopping=kw["w"], mass=kw["m"], coupling=kw["J"], theta=kw["theta"], levels=2 * S + 1)
    exact = np.linalg.eigvalsh(spin_only_hamiltonian(N, None, **kw).toarray())
    prod = np.linalg.eigvalsh(build_hamiltonian(PhysicalBasis(p)).toarray())
    np.testing.assert_allclose(prod, exact, atol=1e-10)
    # one level narrower is no longer exact (the bound is tight)
    if S > 1:
        narrower = np.linalg.eigvalsh(build_hamiltonian(PhysicalBasis(p.replace(levels=2 * S - 1))).toarray())
        assert narrower.shape != exact.shape


def test_register_operator_from_qutip_tensor_products():
    # reference: qutip 5 tensor products of the link operators (L, U) with the Gauss-law
    # conditions written as projectors; low spectrum on the register equals production's.
    import qutip
    from independent_models import link_operators

    N, d = 4, 3
    w, m, J = 0.9, 0.45, 1.2
    p = ModelParams(sites=N, hopping=w, mass=m, coupling=J, levels=d)
    K = N - 1
    Lm, Um = link_operators("truncated", d)
    eye = qutip.qeye(d)

    def op(mats: dict[int, np.ndarray]) -> qutip.Qobj:
        return qutip.tensor(*[qutip.Qobj(mats[k]) if k in mats else eye for k in range(K)])

    # occupations implied by Gauss's law on each site, as diagonal operators
    Lfull = [op({k: Lm}) for k in range(K)]
    zero = 0 * op({})
    occ = []
    for n in range(N):
        left = Lfull[n - 1] if n > 0 else zero
        right = Lfull[n] if n < K else zero
        occ.append(right - left + (n % 2) * op({}))
    H = zero
    for n in range(N):
        H = H + m * (-1) ** n * occ[n]
    for k in range(K):
        H = H + J * Lfull[k] * Lfull[k]
    # hopping across link k: raise L_k if n_k = 0 and n_{k+1} = 1; projectors from the spectra
    def projector(x: qutip.Qobj, value: int) -> qutip.Qobj:
        diag = np.real(x.diag())
        return qutip.qdiags((np.abs(diag - value) < 1e-9).astype(float), 0, dims=x.dims)

    for k in range(K):
        hop = w * op({k: Um}) * projector(occ[k], 0) * projector(occ[k + 1], 1)
        H = H + hop + hop.dag()
    # restrict both to the physical register states and compare low spectra
    diag_ok = np.ones(d ** K, dtype=bool)
    for n in range(N):
        v = np.real(occ[n].diag())
        diag_ok &= (np.abs(v) < 1e-9) | (np.abs(v - 1) < 1e-9)
    Hq = H.full()[np.ix_(diag_ok, diag_ok)]
    ref = np.linalg.eigvalsh(Hq)
    ours = np.linalg.eigvalsh(register_hamiltonian(p).toarray()[np.ix_(diag_ok, diag_ok)])
    np.testing.assert_allclose(ours, ref, atol=1e-10)
    np.testing.assert_allclose(spectrum(p, 4), ref[:4], atol=1e-10)


def test_massless_schwinger_boson_mass():
    # Schwinger, Phys. Rev. 128, 2425 (1962): the massless model has a free boson of mass
    # M/g = 1/sqrt(pi) ≈ 0.5642. Procedure (dimensionless form of docs/conventions.md §1: J = 1, w = x,
    # m = 0): N = 16 sites, d = 5 levels, x = 2, 4, 8. Gaps E_k in units of g are ΔE/(2√x). On
    # an open chain the lowest one-boson states carry box momenta p_1, p_2 = 2 p_1, so
    # E_1² = M² + p², E_2² = M² + 4p² gives M² = (4E_1² − E_2²)/3. M(x) is then extrapolated
    # linearly in a·g = 1/√x to the continuum.
    xs = np.array([2.0, 4.0, 8.0])
    masses = []
    for x in xs:
        p = ModelParams(sites=16, hopping=x, mass=0.0, coupling=1.0, levels=5)
        E = spectrum(p, 3)
        e1, e2 = (E[1:] - E[0]) / (2 * np.sqrt(x))
        masses.append(np.sqrt((4 * e1 ** 2 - e2 ** 2) / 3))
    slope, intercept = np.polyfit(1 / np.sqrt(xs), masses, 1)
    assert intercept == pytest.approx(1 / np.sqrt(np.pi), rel=0.03)


def test_lanczos_path_repeats_degenerate_levels():
    # textbook strong coupling (w = 0): the N − 1 nearest-neighbour mesons are degenerate at
    # 2m + J above the bare vacuum; N = 16 (6714 states) takes the sparse Lanczos path
    from lgt.spectrum import DENSE_THRESHOLD

    m, J, N = 0.5, 1.0, 16
    basis = PhysicalBasis(ModelParams(sites=N, hopping=0.0, mass=m, coupling=J, levels=3))
    assert basis.dimension > DENSE_THRESHOLD
    E = lowest_levels(build_hamiltonian(basis), N)
    np.testing.assert_allclose(E[0], -m * N / 2, atol=1e-9)
    np.testing.assert_allclose(E[1:], -m * N / 2 + 2 * m + J, atol=1e-9)
