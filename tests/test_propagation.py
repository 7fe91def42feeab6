"""The one exact propagator, its kernels and its callers, against scipy (reference library)."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as sla
import scipy.sparse as sp
from hypothesis import given, settings, strategies as st

import lgt.kernels as kernels
from lgt.basis import PhysicalBasis
from lgt.chebyshev import ChebyshevPropagator, gershgorin_interval, lanczos_interval
from lgt.evolution import run_evolution
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from lgt.observables import Observer, level_weights, loschmidt, occupation_products
from lgt.propagation import METHODS, ExactPropagator, evolve_states
from lgt.states import prepare_initial_state

needs_numba = pytest.mark.skipif(not kernels.HAVE_NUMBA, reason="numba not installed")


def random_symmetric(seed: int, n: int, scale: float = 1.0) -> sp.csr_matrix:
    rng = np.random.default_rng(seed)
    a = sp.random(n, n, density=0.3, random_state=rng) * scale
    return sp.csr_matrix(a + a.T + sp.diags(rng.normal(size=n) * scale))


def schwinger(N: int = 8, d: int = 3) -> tuple[PhysicalBasis, sp.csr_matrix]:
    basis = PhysicalBasis(ModelParams(sites=N, hopping=1.0, mass=0.4, coupling=0.8, levels=d))
    return basis, build_hamiltonian(basis).tocsr()


@pytest.mark.parametrize("method", METHODS)
@pytest.mark.parametrize("complex_start", [False, True])
def test_propagator_matches_dense_expm(method, complex_start):
    # reference: scipy.linalg.expm (Padé, Al-Mohy & Higham 2009) of the dense matrix
    basis, H = schwinger()
    rng = np.random.default_rng(3)
    psi0 = rng.normal(size=basis.dimension) + (1j * rng.normal(size=basis.dimension) if complex_start else 0)
    psi0 /= np.linalg.norm(psi0)
    times = np.array([0.0, 0.3, 0.35, 1.0, 2.5, 2.5, 7.0])  # non-uniform, with a repeat
    out = evolve_states(H, psi0, times, method=method)
    for t, v in zip(times, out):
        np.testing.assert_allclose(v, sla.expm(-1j * t * H.toarray()) @ psi0, atol=1e-10)


def test_long_window_uses_lanczos_bound_and_stays_exact():
    # reference: scipy.linalg.expm; a window long enough that the Lanczos interval is chosen
    basis, H = schwinger()
    psi0 = prepare_initial_state(basis, {"kind": "vacuum"})
    with ExactPropagator(H) as prop:
        times = np.linspace(0, 40.0, 81)
        lo, hi = prop.interval_for(times[-1])
        glo, ghi = gershgorin_interval(H)
        assert hi - lo < ghi - glo  # the tight bound was taken
        out = prop.trajectory(psi0, times)
    np.testing.assert_allclose(out[-1], sla.expm(-40j * H.toarray()) @ psi0, atol=1e-9)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 2 ** 31), n=st.integers(50, 300), scale=st.floats(0.1, 30.0))
def test_lanczos_interval_is_an_outer_bound(seed, n, scale):
    # reference: numpy.linalg.eigvalsh (LAPACK) of the same random real symmetric matrix
    H = random_symmetric(seed, n, scale)
    lo, hi = lanczos_interval(H)
    eig = np.linalg.eigvalsh(H.toarray())
    assert lo <= eig[0] and eig[-1] <= hi
    glo, ghi = gershgorin_interval(H)
    assert glo <= lo and hi <= ghi


def test_lanczos_interval_outer_bound_on_lattice_models():
    # reference: ARPACK extremal eigenvalues (scipy.sparse.linalg.eigsh)
    from scipy.sparse.linalg import eigsh

    for N, d, w, m, J in [(12, 3, 1.0, 0.5, 1.0), (10, 5, 1.0, 0.1, 0.3), (12, 3, 0.2, 1.0, 1.0)]:
        H = build_hamiltonian(PhysicalBasis(ModelParams(sites=N, hopping=w, mass=m, coupling=J, levels=d)))
        lo, hi = lanczos_interval(H)
        assert lo <= eigsh(H, 1, which="SA")[0][0] and eigsh(H, 1, which="LA")[0][0] <= hi


def test_too_small_interval_breaks_chebyshev():
    # why the bound must be an outer one: 10 % too narrow and the series no longer converges to
    # exp(−iHt)ψ (reference: scipy.linalg.expm)
    basis, H = schwinger()
    psi0 = prepare_initial_state(basis, {"kind": "vacuum"})
    eig = np.linalg.eigvalsh(H.toarray())
    c, r = 0.5 * (eig[0] + eig[-1]), 0.5 * (eig[-1] - eig[0])
    ref = sla.expm(-20j * H.toarray()) @ psi0
    good = ChebyshevPropagator(lambda x: H @ x, (c - 1.001 * r, c + 1.001 * r)).block(psi0, [20.0])[0]
    bad = ChebyshevPropagator(lambda x: H @ x, (c - 0.9 * r, c + 0.9 * r)).block(psi0, [20.0])[0]
    assert np.abs(good - ref).max() < 1e-10
    assert np.abs(bad - ref).max() > 1e-3


@needs_numba
@pytest.mark.parametrize("m", [1, 2, 3])
def test_fused_kernel_equals_scipy_product(m, monkeypatch):
    # reference: scipy.sparse CSR product; H x alone is bit-identical for one column (same order)
    monkeypatch.setattr(kernels, "THREADED_NONZEROS", 0)  # two row blocks even for this small H
    H = random_symmetric(7, 500, 3.0)
    rng = np.random.default_rng(1)
    x, prev = rng.normal(size=(500, m)), rng.normal(size=(500, m))
    for threads in (1, 2):
        k = kernels.SparseKernel(H, threads, compiled=True)
        assert len(k.blocks) == threads
        out = np.empty_like(x)
        k.fused(x, prev, out, 2 / 3.0, -0.25, 1.0)
        np.testing.assert_allclose(out, (2 / 3.0) * (H @ x) - 0.25 * x - prev, rtol=1e-14, atol=1e-13)
        hx = k.apply(x)
        if m == 1:
            assert np.array_equal(hx, H @ x)
        np.testing.assert_allclose(hx, H @ x, rtol=1e-14, atol=1e-13)
        assert k.quadratic(x) == pytest.approx(float(np.sum(x * (H @ x))), rel=1e-13)
        k.close()


@pytest.mark.parametrize("compiled", [False, pytest.param(True, marks=needs_numba)])
def test_one_sweep_moments_equal_direct_formulas(compiled):
    # reference: the direct numpy formulas (bincount histograms, N × N products, vdot)
    basis = PhysicalBasis(ModelParams(sites=18, hopping=1.0, mass=0.5, coupling=1.0, levels=3))
    rng = np.random.default_rng(5)
    psi = rng.normal(size=basis.dimension) + 1j * rng.normal(size=basis.dimension)
    ref = rng.normal(size=basis.dimension) + 1j * rng.normal(size=basis.dimension)
    psi /= np.linalg.norm(psi)
    ref /= np.linalg.norm(ref)
    occ = basis.occupations()
    norm, hist, overlap, hists = kernels.state_moments(psi, basis.levels, 3, ref,
                                                       kernels.occupation_bytes(occ), compiled=compiled)
    prob = np.abs(psi) ** 2
    np.testing.assert_allclose(hist, level_weights(np.ascontiguousarray(basis.levels.T), prob, 3), atol=1e-12)
    np.testing.assert_allclose(kernels.occupation_products_from_histograms(*hists, 18),
                               occupation_products(occ, prob), atol=1e-12)
    assert abs(overlap - np.vdot(ref, psi)) < 1e-12 and abs(norm - 1.0) < 1e-12


def test_observer_equals_direct_formulas():
    # reference: the direct formulas for echo, fields and ⟨Q_i Q_j⟩ − ⟨Q_i⟩⟨Q_j⟩ (numpy)
    basis, H = schwinger(10)
    rng = np.random.default_rng(2)
    psi = rng.normal(size=basis.dimension) + 1j * rng.normal(size=basis.dimension)
    psi /= np.linalg.norm(psi)
    psi0 = prepare_initial_state(basis, {"kind": "vacuum"})
    got = Observer(basis, H, reference=psi0).measure(psi)
    prob = np.abs(psi) ** 2
    w = level_weights(np.ascontiguousarray(basis.levels.T), prob, 3)
    np.testing.assert_allclose(got["electric_field"], w @ basis.params.field_values, atol=1e-12)
    occ = basis.occupations().astype(float)
    mean = prob @ occ
    np.testing.assert_allclose(got["charge_correlation"], occupation_products(basis.occupations(), prob)
                               - np.outer(mean, mean), atol=1e-12)
    assert got["loschmidt_echo"] == pytest.approx(loschmidt(psi0, psi, 10)[0], abs=1e-12)
    assert got["energy"] == pytest.approx(float(np.vdot(psi, H @ psi).real), abs=1e-12)


@needs_numba
def test_compiled_run_equals_numpy_run(monkeypatch):
    # the numba route against the scipy/numpy route of the same task (scipy reference products)
    config = {"model": {"sites": 10, "hopping": 1.0, "mass": 0.4, "coupling": 1.0},
              "initial": {"kind": "meson", "sites": [4, 5]},
              "evolution": {"t_final": 2.0, "dt": 0.1}}
    slow = run_evolution(config)
    monkeypatch.setattr(kernels, "NUMBA_NONZEROS", 0)
    monkeypatch.setattr(kernels, "NUMBA_DIMENSION", 0)
    fast = run_evolution(config)
    for name, series in slow.series.items():
        np.testing.assert_allclose(fast.series[name].values, series.values, atol=1e-12, err_msg=name)


def test_entropy_stride_keeps_its_own_times():
    config = {"model": {"sites": 10, "hopping": 1.0, "mass": 0.4, "coupling": 1.0},
              "initial": {"kind": "meson", "sites": [4, 5]},
              "evolution": {"t_final": 2.0, "dt": 0.1, "entropy_stride": 1,
                            "observables": ["entanglement_entropy", "electric_field"]}}
    every = run_evolution(config)
    config["evolution"]["entropy_stride"] = 3
    some = run_evolution(config)
    s = some.series["entanglement_entropy"]
    idx = list(range(0, 21, 3)) + [20]
    np.testing.assert_allclose(s.times, every.series["entanglement_entropy"].times[idx])
    np.testing.assert_allclose(s.values, every.series["entanglement_entropy"].values[idx], atol=1e-12)
    assert some.series["electric_field"].times.size == 21


def test_bad_entropy_stride_is_named():
    from lgt.errors import ConfigError

    config = {"model": {"sites": 6}, "evolution": {"t_final": 1.0, "dt": 0.5, "entropy_stride": 0}}
    with pytest.raises(ConfigError, match="entropy_stride"):
        run_evolution(config)


def test_variational_reference_and_trotter_use_the_exact_propagator():
    # reference: scipy.linalg.expm; the Trotter baseline with a reused propagator gives the same
    # infidelities as with its own, and second order converges as dt² (Suzuki, Phys. Lett. A 146,
    # 319 (1990)) against that exact reference
    from lgt.variational.ansatz import symmetric_ansatz
    from lgt.variational.stepper import exact_trajectory
    from lgt.variational.trotter_baseline import trotter_max_infidelity

    params = ModelParams(sites=6, hopping=1.0, mass=0.5, coupling=1.0)
    basis = PhysicalBasis(params)
    psi0 = prepare_initial_state(basis, {"kind": "vacuum"})
    Hd = build_hamiltonian(basis).toarray()
    for space in ("physical", "register"):
        traj = exact_trajectory(symmetric_ansatz(basis, 1, space=space), psi0, 0.25, 4)
        for k, v in enumerate(traj):
            np.testing.assert_allclose(v, sla.expm(-0.25j * k * Hd) @ psi0, atol=1e-12)
    with ExactPropagator(build_hamiltonian(basis)) as prop:
        shared = trotter_max_infidelity(basis, psi0, 1.0, 8, 2, propagator=prop)[1]
        coarse = trotter_max_infidelity(basis, psi0, 1.0, 4, 2, propagator=prop)[0]
    own = trotter_max_infidelity(basis, psi0, 1.0, 8, 2)[1]
    np.testing.assert_allclose(shared, own, atol=1e-13)
    # infidelity ∝ (error)² ∝ dt⁴ for second order: halving dt divides it by ~16
    assert 8.0 < coarse / shared.max() < 32.0


def test_bessel_table_matches_scipy_jv():
    # reference: scipy.special.jv (Amos / Cephes)
    from scipy.special import jv

    from lgt.chebyshev import bessel_table

    x = np.concatenate([[0.0, 1e-9, 1e-3], np.linspace(0.1, 400.0, 57)])
    n = 480
    np.testing.assert_allclose(bessel_table(n, x), jv(np.arange(n)[:, None], x[None, :]), atol=5e-14)


def test_auto_entropy_stride_follows_the_cost_rule():
    # the documented rule (docs/dynamics.md; a cost model, common practice, no source): every
    # stored time while the eigensolves are cheap in total, a stride once they would dominate
    from lgt.evolution import entropy_stride

    times = np.round(np.arange(101) * 0.1, 12)
    small = PhysicalBasis(ModelParams(sites=10, hopping=1.0, mass=0.5, coupling=1.0))
    assert entropy_stride("auto", small, 4, times, 2000, 10.0) == 1
    big = PhysicalBasis(ModelParams(sites=20, hopping=1.0, mass=0.5, coupling=1.0))
    stride = entropy_stride("auto", big, 9, times, 827_785, 18.6)
    assert 1 < stride < 100
    assert entropy_stride(3, big, 9, times, 827_785, 18.6) == 3
