"""Exact quench dynamics against qutip 5 ``sesolve``, perturbation theory, spectra and conservation laws."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import qutip
from hypothesis import given, settings, strategies as st

from lgt.basis import PhysicalBasis, occupations_from_levels
from lgt.errors import ConfigError, ResourceError
from lgt.evolution import count_physical_states, run_evolution, validate_evolution_config
from lgt.hamiltonian import build_hamiltonian
from lgt.model import ModelParams
from lgt.states import prepare_initial_state, resolve_initial


def config(model: dict, initial: dict, **evolution) -> dict:
    return {"model": model, "initial": initial, "evolution": evolution}


# ------------------------------------------------------------------ qutip reference
def fermion_link_model(N: int, d: int, w: float, m: float, J: float, theta: float = 0.0):
    """Fermions (Jordan–Wigner via qutip.fdestroy) ⊗ truncated link qudits, original −i w hopping.

    Built only from textbook definitions with qutip 5 (no Fluxline code): U|L⟩ = |L+1⟩,
    H = −i w Σ (c†_n U_n c_{n+1} − h.c.) + m Σ (−1)^n c†_n c_n + J Σ (L_n + θ/2π)².
    Returns (H, fermion annihilators, link field operators, embed-fermion, embed-link helpers).
    """
    K = N - 1
    S = (d - 1) / 2
    L = np.diag(np.arange(d) - S)
    U = np.diag(np.ones(d - 1), -1)
    fid, lid = qutip.qeye([2] * N), [qutip.qeye(d)] * K

    def on_link(op, n):
        ops = list(lid)
        ops[n] = qutip.Qobj(op)
        return qutip.tensor(fid, *ops)

    def on_fermions(op):
        return qutip.tensor(op, *lid)

    c = [on_fermions(qutip.fdestroy(N, n)) for n in range(N)]
    Lops = [on_link(L, n) for n in range(K)]
    H = 0
    for n in range(K):
        hop = -1j * w * c[n].dag() * on_link(U, n) * c[n + 1]
        H = H + hop + hop.dag()
    for n in range(N):
        H = H + m * (-1) ** n * c[n].dag() * c[n]
    for n in range(K):
        shifted = Lops[n] + theta / (2 * np.pi)
        H = H + J * shifted * shifted
    return H, c, Lops, fid, lid


def product_state(N: int, d: int, occupied: list[int], fields: list[int]):
    """c†…c† |empty⟩ ⊗ |fields⟩, the empty state found as the common kernel of all c_n (qutip)."""
    empty = None
    for candidate in range(2):  # qutip's fdestroy annihilates one of the two qubit levels
        vac = qutip.tensor(*[qutip.basis(2, candidate)] * N)
        if all((qutip.fdestroy(N, n) * vac).norm() < 1e-12 for n in range(N)):
            empty = vac
    assert empty is not None
    f = empty
    for n in sorted(occupied, reverse=True):
        f = qutip.fcreate(N, n) * f
    S = (d - 1) // 2
    links = [qutip.basis(d, int(L + S)) for L in fields]
    return qutip.tensor(f.unit(), *links)


@pytest.mark.parametrize("N,initial", [
    (4, {"kind": "vacuum"}),
    (6, {"kind": "meson", "sites": [2, 3]}),
    (6, {"kind": "fields", "fields": [0, -1, -1, -1, 0]}),
])
def test_trajectories_match_qutip_sesolve(N, initial):
    """Reference: qutip 5 sesolve on the full 2^N ⊗ d^(N−1) fermion ⊗ link space."""
    d, w, m, J, theta = 3, 0.8, 0.4, 1.0, 0.9
    times = np.linspace(0, 3, 16)
    model = {"sites": N, "hopping": w, "mass": m, "coupling": J, "theta": theta, "levels": d}
    run = run_evolution(config(model, initial, times=list(times)))
    params = ModelParams(**model)
    fields0 = run.series["electric_field"].values[0]
    occ0 = run.series["occupation"].values[0]
    H, c, Lops, _, _ = fermion_link_model(N, d, w, m, J, theta)
    psi0 = product_state(N, d, [n for n in range(N) if occ0[n] > 0.5], list(np.rint(fields0).astype(int)))
    e_ops = Lops + [cn.dag() * cn for cn in c]
    res = qutip.sesolve(H, psi0, times, e_ops=e_ops, options={"atol": 1e-11, "rtol": 1e-9, "nsteps": 100000})
    ref = np.array([np.real(e) for e in res.expect]).T
    K = params.n_links
    assert np.allclose(run.series["electric_field"].values, ref[:, :K], atol=1e-6)
    assert np.allclose(run.series["occupation"].values, ref[:, K:], atol=1e-6)
    states = qutip.sesolve(H, psi0, times, options={"atol": 1e-11, "rtol": 1e-9, "nsteps": 100000,
                                                    "store_states": True}).states
    echo = np.array([abs(psi0.overlap(s)) ** 2 for s in states])
    assert np.allclose(run.series["loschmidt_echo"].values, echo, atol=1e-6)


# ------------------------------------------------------------------ perturbation theory
def test_vacuum_return_probability_first_order_perturbation_theory():
    """Textbook first-order time-dependent perturbation theory (e.g. Sakurai, Modern QM, §5.6).

    From the bare vacuum each of the N − 1 links creates one pair (particle on the even end,
    antiparticle on the odd end, |L| = 1) with matrix element w, energy cost Δ = 2m + J. The
    first-order amplitude of each is c = (w/Δ)(e^{−iΔt} − 1), |c|² = 4 (w/Δ)² sin²(Δt/2), so
    P_return ≈ 1 − 4 (N − 1) (w/Δ)² sin²(Δt/2) (derived here; agrees with the issue's formula).
    Corrections are O((w/Δ)^4) and secular O((w² t/Δ)²), both < 1e-3 of the signal here.
    """
    N, w, m, J = 8, 0.004, 1.0, 1.0
    delta = 2 * m + J
    times = np.linspace(0, 4 * np.pi / delta, 41)
    run = run_evolution(config({"sites": N, "hopping": w, "mass": m, "coupling": J},
                               {"kind": "vacuum"}, times=list(times)))
    depletion = 1 - run.series["loschmidt_echo"].values
    predicted = 4 * (N - 1) * (w / delta) ** 2 * np.sin(delta * times / 2) ** 2
    scale = 4 * (N - 1) * (w / delta) ** 2
    assert np.max(np.abs(depletion - predicted)) < 2e-3 * scale


# ------------------------------------------------------------------ spectrum of a meson
def test_meson_field_oscillation_frequency_matches_eigenvalue_differences():
    """Dominant FFT frequency of ⟨L_n(t)⟩ equals the |E_k − E_l| carrying the largest spectral weight
    2|c_k c_l ⟨k|L_n|l⟩| (eigenpairs from numpy.linalg.eigh / LAPACK)."""
    model = {"sites": 6, "hopping": 0.25, "mass": 0.6, "coupling": 1.0}
    T, dt = 400.0, 0.1
    run = run_evolution(config(model, {"kind": "meson", "sites": [2, 3]}, t_final=T, dt=dt,
                               observables=["electric_field"]))
    link = 2
    signal = run.series["electric_field"].values[:, link]
    signal = (signal - signal.mean()) * np.hanning(signal.size)
    pad = 16 * signal.size
    spectrum = np.abs(np.fft.rfft(signal, pad))
    omega = 2 * np.pi * np.fft.rfftfreq(pad, dt)
    omega_peak = omega[np.argmax(spectrum)]

    p = ModelParams(**model)
    b = PhysicalBasis(p)
    E, V = np.linalg.eigh(build_hamiltonian(b).toarray())
    psi0 = prepare_initial_state(b, resolve_initial({"kind": "meson", "sites": [2, 3]}, p))
    coeff = V.T @ psi0
    Lk = V.T @ (b.fields()[:, link][:, None] * V)
    weight = 2 * np.abs(np.outer(coeff.conj(), coeff) * Lk)
    np.fill_diagonal(weight, 0)
    diffs = np.abs(E[:, None] - E[None, :])
    # group near-degenerate frequencies before picking the strongest
    freqs = np.round(diffs.ravel(), 6)
    uniq, inv = np.unique(freqs, return_inverse=True)
    total = np.bincount(inv, weights=weight.ravel())
    total[uniq == 0] = 0
    omega_pred = uniq[np.argmax(total)]
    assert abs(omega_peak - omega_pred) < 2 * np.pi / T


# ------------------------------------------------------------------ conservation laws
@settings(max_examples=12, deadline=None)
@given(N=st.sampled_from([4, 6, 8]), w=st.floats(0.05, 2.0), m=st.floats(-1.0, 2.0),
       J=st.floats(0.1, 2.0), theta=st.floats(0, 2 * np.pi), data=st.data())
def test_norm_energy_conserved_and_occupations_binary(N, w, m, J, theta, data):
    """Unitarity and [H, H] = 0 (textbook); the evolved register vector keeps Gauss's law:
    every register configuration with weight implies occupations in {0, 1}."""
    i = data.draw(st.sampled_from(range(0, N, 2)))
    j = data.draw(st.sampled_from(range(1, N, 2)))
    model = {"sites": N, "hopping": w, "mass": m, "coupling": J, "theta": theta}
    kept = []
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a drift warning would fail the test
        run = run_evolution(config(model, {"kind": "meson", "sites": [i, j]}, t_final=2.0, dt=0.25),
                            callback=lambda k, psi: kept.append(psi.copy()))
    assert run.attributes["norm_drift"] < 1e-10
    assert run.attributes["energy_drift"] < 1e-9
    p = ModelParams(**model)
    b = PhysicalBasis(p)
    K = p.n_links
    for psi in kept:
        reg = b.to_register(psi)
        support = np.flatnonzero(np.abs(reg) > 1e-14)
        levels = np.stack(np.unravel_index(support, (p.levels,) * K), axis=1)
        occ = occupations_from_levels(levels, p)
        assert np.all((occ == 0) | (occ == 1))
    occ_mean = run.series["occupation"].values
    assert np.all(occ_mean > -1e-12) and np.all(occ_mean < 1 + 1e-12)


def test_drift_warning_is_raised_for_tiny_tolerance():
    with pytest.warns(RuntimeWarning, match="drift"):
        run_evolution(config({"sites": 6, "hopping": 1.0}, {"kind": "meson", "sites": [2, 3]},
                             t_final=1.0, dt=0.5, drift_tolerance=1e-300))


def test_explicit_times_and_uniform_grid_agree():
    model = {"sites": 6, "hopping": 0.9, "mass": 0.2}
    a = run_evolution(config(model, {"kind": "vacuum"}, t_final=2.0, dt=0.25))
    b = run_evolution(config(model, {"kind": "vacuum"}, times=[0.0, 0.5, 1.3, 2.0]))
    ta = a.series["loschmidt_echo"].times
    for t, echo in zip(b.series["loschmidt_echo"].times, b.series["loschmidt_echo"].values):
        if np.any(np.isclose(ta, t)):
            assert np.isclose(echo, a.series["loschmidt_echo"].values[np.isclose(ta, t)][0], atol=1e-12)


def test_quench_from_ground_state():
    model = {"sites": 6, "hopping": 0.8, "mass": 0.5}
    run = run_evolution(config(model, {"kind": "ground", "model": {"mass": 3.0}}, t_final=1.0, dt=0.5))
    assert run.series["loschmidt_echo"].values[0] == pytest.approx(1.0)
    assert run.series["loschmidt_echo"].values[-1] < 1.0


# ------------------------------------------------------------------ sizes and bad input
@pytest.mark.parametrize("model", [dict(sites=10), dict(sites=8, levels=5), dict(sites=8, levels=4, link="quantum-link"),
                                   dict(sites=10, static_charges=[[2, 1], [7, -1]]), dict(sites=6, levels=2, link="quantum-link")])
def test_cheap_count_equals_enumeration(model):
    p = ModelParams(**model)
    assert count_physical_states(p) == PhysicalBasis(p).dimension


def test_too_large_run_refused_up_front():
    with pytest.raises(ResourceError, match="dimension"):
        validate_evolution_config(config({"sites": 40}, {"kind": "vacuum"}, t_final=1.0, dt=0.1))
    with pytest.raises(ResourceError, match="GiB"):
        validate_evolution_config(config({"sites": 12}, {"kind": "vacuum"}, t_final=1.0, dt=0.1,
                                         memory_limit_gb=1e-6))


@pytest.mark.parametrize("evolution,key", [
    ({}, "evolution.t_final"),
    ({"t_final": 1.0}, "evolution.dt"),
    ({"t_final": -1.0, "dt": 0.1}, "evolution.t_final"),
    ({"t_final": 1.0, "dt": 0.3}, "evolution.dt"),
    ({"t_final": 1.0, "dt": 0.0}, "evolution.dt"),
    ({"times": [0.0, 0.5, 0.2]}, "evolution.times"),
    ({"times": [0.0, 1.0], "dt": 0.5}, "evolution.times"),
    ({"times": []}, "evolution.times"),
    ({"t_final": 1.0, "dt": 0.5, "cut": 7}, "evolution.cut"),
    ({"t_final": 1.0, "dt": 0.5, "observables": ["spin"]}, "evolution.observables"),
    ({"t_final": 1.0, "dt": 0.5, "stride": 2}, "evolution.stride"),
    ({"t_final": 1.0, "dt": 0.5, "drift_tolerance": 0}, "evolution.drift_tolerance"),
])
def test_bad_evolution_input_is_named(evolution, key):
    with pytest.raises(ConfigError) as info:
        validate_evolution_config(config({"sites": 8}, {"kind": "vacuum"}, **evolution))
    assert info.value.key == key


def test_missing_sections_named():
    with pytest.raises(ConfigError) as info:
        validate_evolution_config({"model": {"sites": 4}, "initial": {"kind": "vacuum"}})
    assert info.value.key == "evolution"
    with pytest.raises(ConfigError) as info:
        validate_evolution_config({"evolution": {"t_final": 1, "dt": 1}})
    assert info.value.key == "model"


def test_states_equal_dense_matrix_exponential():
    """Reference: scipy.linalg.expm(−iHt) ψ₀ on the dense physical-subspace H (global phase included)."""
    import scipy.linalg

    model = {"sites": 6, "hopping": 0.9, "mass": 0.3, "theta": 1.1}
    p = ModelParams(**model)
    b = PhysicalBasis(p)
    H = build_hamiltonian(b).toarray()
    initial = {"kind": "meson", "sites": [1, 4]}
    psi0 = prepare_initial_state(b, resolve_initial(initial, p))
    kept = {}
    times = [0.0, 0.3, 0.6, 0.9, 1.7]
    run_evolution(config(model, initial, times=times), callback=lambda k, psi: kept.__setitem__(k, psi.copy()))
    for k, t in enumerate(times):
        assert np.allclose(kept[k], scipy.linalg.expm(-1j * H * t) @ psi0, atol=1e-12)
