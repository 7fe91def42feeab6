"""MPS backend (lgt.mps): MPO, gate evolution and DMRG against exact diagonalization.

External references named beside each check. The exact evolution and spectrum of this project
(Gauss-law subspace, scipy sparse) are the reference for the MPS results; they are themselves
checked against independent formulations in test_formulations.py.
"""

from __future__ import annotations

import json
import warnings

import numpy as np
import pytest
import scipy.linalg as sla
from scipy.sparse.linalg import expm_multiply

from lgt.basis import PhysicalBasis
from lgt.evolution import run_evolution
from lgt.hamiltonian import build_hamiltonian, register_gauss_violation, register_hamiltonian
from lgt.model import ModelParams
from lgt.mps.chain import ChainMPS, Truncation
from lgt.mps.mpo import hamiltonian_mpo, physical_projector_mpo
from lgt.mps.tebd import GateEvolver, window_hamiltonians
from lgt.spectrum import lowest_levels

#: Observables both backends record.
COMPARED = ("electric_field", "electric_field_squared", "occupation", "charge", "particle_density",
            "string_length", "loschmidt_echo", "entanglement_entropy", "renyi2_entropy", "energy", "norm")

MODELS = [
    ModelParams(sites=6, hopping=0.7, mass=0.4, coupling=1.3, theta=0.9, static_charges=((1, -1), (4, 1))),
    ModelParams(sites=4, levels=4, link="quantum-link", mass=-0.3, hopping=1.1),
    ModelParams(sites=4, levels=5, hopping=0.5, mass=1.2, coupling=0.8, theta=-2.0),
]


# ---------------------------------------------------------------------- MPO (self-consistency)
@pytest.mark.parametrize("params", MODELS)
def test_mpo_equals_register_hamiltonian(params):
    """MPO contracted to a dense matrix = the sum of the model's local terms on the register."""
    dense = hamiltonian_mpo(params).to_dense()
    ref = register_hamiltonian(params, physical_only=False).toarray()
    assert np.abs(dense - ref).max() < 1e-12


@pytest.mark.parametrize("params", MODELS)
def test_projector_mpo_and_penalty(params):
    """Projector MPO = indicator of the Gauss-law subspace; the penalty leaves P H P unchanged."""
    P = physical_projector_mpo(params).to_dense()
    phys = ~register_gauss_violation(params)
    assert np.array_equal(P, np.diag(phys.astype(float)))
    H = hamiltonian_mpo(params).to_dense()
    Hp = hamiltonian_mpo(params, penalty=5.0, constant=-2.0).to_dense()
    diff = Hp - H + 2.0 * np.eye(len(phys))
    assert np.abs(diff[np.ix_(phys, phys)]).max() < 1e-12  # zero on the physical subspace
    assert np.all(np.diag(diff)[~phys] >= 5.0 - 1e-12)     # ≥ λ on every unphysical state


@pytest.mark.parametrize("params", [MODELS[0], ModelParams(sites=6, levels=5, mass=1.2, theta=-2.0)])
def test_gate_windows_sum_to_hamiltonian(params):
    K, d = params.n_links, params.levels
    total = sum(np.kron(np.kron(np.eye(d ** s), h), np.eye(d ** (K - 3 - s)))
                for s, h in enumerate(window_hamiltonians(params)))
    assert np.abs(total - register_hamiltonian(params, physical_only=False).toarray()).max() < 1e-12


def test_fourth_order_gates_converge_to_exact_propagator():
    """Suzuki's fourth-order product (Suzuki 1990): error falls by ~2^4 when the step halves."""
    params = ModelParams(sites=8, hopping=1.0, mass=0.5, theta=0.7)
    H = register_hamiltonian(params, physical_only=False)
    levels = np.array([1, 1, 2, 2, 2, 1, 1])  # meson: L = 1 on links 2..4
    psi0 = ChainMPS.product(levels, 3)
    exact = expm_multiply(-2j * H, psi0.to_dense())
    errors = []
    for step in (0.2, 0.1):
        psi = psi0.copy()
        GateEvolver(params, Truncation(400), order=4, max_step=step).evolve(psi, 2.0)
        errors.append(np.linalg.norm(psi.to_dense() - exact))
    assert errors[1] < errors[0] / 10


def test_subspace_split_is_near_optimal():
    """Truncating a gated saturated bond inside the old bond's span (QR-based TEBD, Unfried,
    Hauschild & Pollmann 2023) drops at least the optimal weight (Eckart–Young theorem: the
    truncated SVD is the best rank-χ approximation) and not much more: here ≈ 3× on a random
    state with a random window operator (on model states 1–10 % more was measured, docs/mps.md)."""
    from lgt.mps.chain import gram_split, subspace_split

    rng = np.random.default_rng(7)
    chi, d = 12, 3
    # a right part with decaying weights, as in a physical state: theta = A · BC, BC orthonormal rows
    BC = np.linalg.qr(rng.normal(size=(d * d * chi, chi)) + 1j * rng.normal(size=(d * d * chi, chi)))[0].T.conj()
    A = (rng.normal(size=(chi * d, chi)) + 1j * rng.normal(size=(chi * d, chi))) * np.exp(-np.arange(chi))[None, :]
    h = rng.normal(size=(d ** 3, d ** 3))
    h = (h + h.T) / np.linalg.norm(h + h.T, 2) * 4.0  # ‖h‖ = 4, like a 3-link window of the model
    gate = sla.expm(-0.05j * h)
    theta = np.matmul(gate, (A @ BC).reshape(chi, d ** 3, chi)).reshape(chi * d, d * d * chi)
    s = np.linalg.svd(theta, compute_uv=False)
    optimal = float((s[chi:] ** 2).sum() / (s ** 2).sum())
    X, Y, dropped = subspace_split(theta, BC.conj().T, Truncation(chi), True)
    _, _, exact_dropped = gram_split(theta, Truncation(chi), True)
    assert exact_dropped == pytest.approx(optimal, rel=1e-6)
    assert optimal * (1 - 1e-9) <= dropped < 4 * optimal
    assert np.abs(X.conj().T @ X - np.eye(X.shape[1])).max() < 1e-12  # left isometry
    fidelity = abs(np.vdot(theta, X @ Y)) / np.linalg.norm(theta) / np.linalg.norm(X @ Y)
    assert 1 - fidelity ** 2 == pytest.approx(dropped, abs=1e-10)  # the reported weight is the lost one


def test_time_estimate_follows_the_bond_growth():
    """Realistic estimate: grows with χ, saturates with time, order 2 cheaper than order 4."""
    from lgt.mps.guards import estimate_mps_seconds

    times = np.round(np.arange(1, 101) * 0.1, 10)
    e64 = estimate_mps_seconds(99, 3, 64, times, 0.1)
    e128 = estimate_mps_seconds(99, 3, 128, times, 0.1)
    early = estimate_mps_seconds(99, 3, 64, times[:10], 0.1)
    assert e128 > 2 * e64 > 0
    assert early < 0.05 * e64  # χ is still small during the first time unit
    assert estimate_mps_seconds(99, 3, 64, times, 0.1, order=2) < e64 / 3


#: CPU seconds measured on this project's development machine (docs/mps.md "Measured",
#: benchmarks/bench_mps.py, d = 3, dt = 0.1, bare vacuum and meson): (N, χ, t, CPU s).
MEASURED_MPS_RUNS = [(24, 64, 10, 61), (24, 64, 10, 64), (24, 128, 10, 257), (24, 128, 10, 246),
                     (50, 64, 10, 193), (50, 64, 10, 194), (50, 128, 10, 957),
                     (50, 128, 10, 935), (100, 64, 5, 153), (100, 64, 5, 150),
                     (100, 128, 5, 423), (100, 128, 5, 378), (100, 64, 10, 893),
                     (100, 64, 10, 803)]


@pytest.mark.parametrize("sites, chi, t_final, cpu_seconds", MEASURED_MPS_RUNS)
def test_time_estimate_within_a_factor_two_of_measured_runs(sites, chi, t_final, cpu_seconds):
    """The guard's estimate against measured whole runs (short chains whose end bonds never
    fill χ as well as long ones whose bonds all do)."""
    from lgt.mps.guards import estimate_mps_seconds

    times = np.round(np.arange(1, int(round(t_final / 0.1)) + 1) * 0.1, 10)
    estimate = estimate_mps_seconds(sites - 1, 3, chi, times, 0.1)
    assert 0.5 < estimate / cpu_seconds < 2.0


# ---------------------------------------------------------------------- evolution vs exact
def scenarios(N: int) -> dict:
    base = {"sites": N, "hopping": 1.0, "mass": 0.5, "coupling": 1.0}
    return {
        "vacuum": (base, {"kind": "vacuum"}),
        "meson": (base, {"kind": "meson", "sites": [N // 2 - 2, N // 2 + 1]}),
        "string": ({**base, "theta": 0.8, "static_charges": [[2, 1], [N - 3, -1]]}, {"kind": "string"}),
    }


def compare(model, initial, t_final, chi, **mps_keys):
    ev = {"t_final": t_final, "dt": 0.1}
    exact = run_evolution({"model": model, "initial": initial, "evolution": ev})
    mps = run_evolution({"model": model, "initial": initial,
                         "evolution": {**ev, "method": "mps", "bond_dimension": chi, **mps_keys}})
    errors = {k: float(np.max(np.abs(np.asarray(mps.series[k].values) - np.asarray(exact.series[k].values))))
              for k in COMPARED}
    echo = np.asarray(exact.series["loschmidt_echo"].values)
    rate = np.abs(np.asarray(mps.series["loschmidt_rate"].values) - np.asarray(exact.series["loschmidt_rate"].values))
    # the rate −ln(echo)/N turns an absolute echo error δ into δ/(N·echo): compare where echo > 1e-2
    errors["loschmidt_rate"] = float(rate[echo > 1e-2].max())
    return errors, exact, mps


@pytest.mark.parametrize("name", ["vacuum", "meson", "string"])
def test_mps_matches_exact_small(name):
    """Every observable within 1e-4 of exact evolution at N = 10, t = 2, default bond dimension."""
    model, initial = scenarios(10)[name]
    errors, _, mps = compare(model, initial, 2.0, 64)
    assert max(errors.values()) < 1e-4, errors
    assert not mps.attributes["flag_discarded_weight"] and not mps.attributes["flag_energy_drift"]
    profile = np.asarray(mps.series["entanglement_profile"].values)
    assert profile.shape == (21, 8)


@pytest.mark.parametrize("name", ["meson", "string"])
def test_mps_charge_correlation_matches_exact(name):
    """Opt-in ⟨Q_i Q_j⟩ − ⟨Q_i⟩⟨Q_j⟩ (transfer-matrix pass + linear Gauss law) = exact, N = 10, t = 2."""
    model, initial = scenarios(10)[name]
    ev = {"t_final": 2.0, "dt": 0.25}
    exact = run_evolution({"model": model, "initial": initial, "evolution": ev})
    mps = run_evolution({"model": model, "initial": initial,
                         "evolution": {**ev, "method": "mps", "observables": ["charge_correlation", "charge"]}})
    got = np.asarray(mps.series["charge_correlation"].values)
    ref = np.asarray(exact.series["charge_correlation"].values)
    assert got.shape == ref.shape == (9, 10, 10)
    assert np.abs(got - ref).max() < 1e-4
    assert np.abs(ref).max() > 1e-2  # the quench does correlate the charges
    assert np.abs(got[:, :, :].sum(axis=2)).max() < 1e-8  # Σ_j Q_j is fixed by the boundary fields


def test_charge_correlation_is_opt_in():
    model, initial = scenarios(8)["vacuum"]
    mps = run_evolution({"model": model, "initial": initial,
                         "evolution": {"t_final": 0.2, "dt": 0.1, "method": "mps"}})
    assert "charge_correlation" not in mps.series and "charge" in mps.series


def test_error_shrinks_with_bond_dimension():
    model, initial = scenarios(12)["meson"]
    worst = []
    for chi in (4, 8, 16):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            errors, _, _ = compare(model, initial, 2.0, chi)
        worst.append(errors["electric_field"])
    assert worst[0] > worst[1] > worst[2]


def test_small_bond_dimension_is_flagged(tmp_path):
    """A run whose bond dimension is too small warns and carries the flag into the HDF5 file."""
    import h5py

    from lgt.io import write_run_file

    model, initial = scenarios(12)["vacuum"]
    cfg = {"model": model, "initial": initial,
           "evolution": {"t_final": 2.0, "dt": 0.5, "method": "mps", "bond_dimension": 3}}
    with pytest.warns(RuntimeWarning, match="not converged"):
        result = run_evolution(cfg)
    assert result.attributes["flag_discarded_weight"]
    assert result.attributes["discarded_weight"] > 1e-6
    path = tmp_path / "run.h5"
    write_run_file(path, result)
    with h5py.File(path) as f:
        assert bool(f.attrs["result.flag_discarded_weight"])
        assert f["observables/discarded_weight/value"].shape == (5,)


def test_evolve_json_carries_mps_diagnostics(tmp_path, capsys):
    from lgt.cli import main

    path = tmp_path / "q.toml"
    path.write_text('[model]\nsites = 8\nmass = 0.5\n[initial]\nkind = "meson"\nsites = [2, 5]\n'
                    '[evolution]\nt_final = 0.5\ndt = 0.25\nmethod = "mps"\nbond_dimension = 16\n')
    assert main(["evolve", str(path), "--json", "--quiet"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert len(out["bond_dimension"]) == 3 and out["bond_dimension"][0] == 1
    assert len(out["discarded_weight"]) == 3


@pytest.mark.parametrize("key,value", [("bond_dimension", 0), ("truncation", 1.5), ("trotter_order", 3),
                                       ("max_step", -0.1), ("observables", ["no_such_observable"])])
def test_bad_mps_keys_are_named(key, value):
    from lgt.errors import ConfigError

    cfg = {"model": {"sites": 8}, "evolution": {"t_final": 1.0, "dt": 0.5, "method": "mps", key: value}}
    with pytest.raises(ConfigError) as info:
        run_evolution(cfg)
    assert key in str(info.value)


def test_memory_guard_refuses_before_work():
    from lgt.errors import ResourceError

    cfg = {"model": {"sites": 200, "levels": 7}, "evolution": {"t_final": 1.0, "dt": 0.5, "method": "mps",
                                                                "bond_dimension": 4000, "memory_limit_gb": 1}}
    with pytest.raises(ResourceError, match="bond_dimension"):
        run_evolution(cfg)


# ---------------------------------------------------------------------- free fermions
def free_fermion_occupations(N: int, w: float, m: float, t: float) -> np.ndarray:
    """n_i(t) from C(t) = e^{−iht} C(0) e^{iht} (textbook free-fermion result), bare vacuum C(0).

    h: single-particle hopping w between neighbours and staggered mass m(−1)^n (the Jordan–Wigner
    string of nearest-neighbour hopping on an open chain is trivial).
    """
    h = np.diag(m * (-1.0) ** np.arange(N)) + w * (np.eye(N, k=1) + np.eye(N, k=-1))
    C0 = np.diag((np.arange(N) % 2).astype(float))  # odd sites filled
    U = sla.expm(-1j * h * t)
    C = U @ C0 @ U.conj().T
    return np.real(np.diag(C))


def free_fermion_check(N: int, levels: int, t_final: float, chi: int) -> None:
    """J = 0 and a window too wide to be reached: the gauge field is a spectator of free fermions.

    With J = 0 the link formulation is exactly free fermions only while no link reaches the
    window edge ±S (a hop that would leave the window is blocked); the weight on the edge levels
    is measured and bounds the deviation.
    """
    model = {"sites": N, "hopping": 0.5, "mass": 1.0, "coupling": 0.0, "levels": levels}
    cfg = {"model": model, "initial": {"kind": "vacuum"},
           "evolution": {"t_final": t_final, "dt": t_final / 4, "method": "mps", "bond_dimension": chi,
                         "observables": ["occupation", "electric_field_squared"]}}
    result = run_evolution(cfg)
    occ = np.asarray(result.series["occupation"].values)
    S = (levels - 1) / 2
    # ⟨L²⟩ ≥ S² · P(|L| = S): the edge weight stays tiny
    edge = np.asarray(result.series["electric_field_squared"].values).max() / S ** 2
    assert edge < 0.05
    for i, t in enumerate(result.series["occupation"].times):
        ref = free_fermion_occupations(N, 0.5, 1.0, t)
        assert np.abs(occ[i] - ref).max() < 1e-4


def test_free_fermions_small():
    free_fermion_check(24, 5, 2.0, 32)


@pytest.mark.slow
def test_free_fermions_sixty_sites():
    free_fermion_check(60, 5, 3.0, 64)


# ---------------------------------------------------------------------- DMRG
def exact_levels(params: ModelParams, count: int) -> np.ndarray:
    return np.sort(lowest_levels(build_hamiltonian(PhysicalBasis(params)), count))


def dmrg_check(params: ModelParams, count: int, chi: int) -> None:
    """DMRG levels (after the Rayleigh–Ritz step) against exact diagonalization (scipy sparse)."""
    pytest.importorskip("tenpy")
    from lgt.mps.dmrg import lowest_states

    res = lowest_states(params, count, chi)
    exact = exact_levels(params, count)
    assert abs(res.energies[0] - exact[0]) < 1e-8
    assert np.abs(res.energies - exact).max() < 1e-6
    assert max(res.leakage) < 1e-6
    # Krylov–Weinstein bound (textbook, e.g. Parlett, The Symmetric Eigenvalue Problem, 1998):
    # an exact level lies within sqrt(variance) of every returned energy
    everything = exact_levels(params, count + 1)
    for energy, variance in zip(res.energies, res.variance):
        assert np.abs(everything - energy).min() <= np.sqrt(max(variance, 0.0)) + 1e-10


def test_dmrg_ground_and_excited_small():
    dmrg_check(ModelParams(sites=8, hopping=1.0, mass=0.3, coupling=1.2, theta=0.5,
                           static_charges=((2, 1), (5, -1))), 3, 48)


def test_ritz_step_separates_a_mixed_pair():
    """Two orthonormal mixtures of a pair of eigenstates: the Ritz values are the pair's levels."""
    pytest.importorskip("tenpy")
    from lgt.mps.dmrg import lowest_states, mps_to_tenpy, ritz_step, tenpy_sites
    from lgt.mps.mpo import to_tenpy

    params = ModelParams(sites=6, mass=0.5, theta=1.0)
    res = lowest_states(params, 3, 32)
    sites = tenpy_sites(params)
    psi = [mps_to_tenpy(s, sites) for s in res.states[1:]]
    c, s = np.cos(0.6), np.sin(0.6)
    mixed = [psi[0].add(psi[1], c, s), psi[0].add(psi[1], -s, c)]
    values, _ = ritz_step(mixed, to_tenpy(hamiltonian_mpo(params), sites))
    assert np.abs(values - res.energies[1:]).max() < 1e-10
    assert np.abs(values - exact_levels(params, 3)[1:]).max() < 1e-10


@pytest.mark.slow
@pytest.mark.parametrize("params", [
    ModelParams(sites=20, hopping=1.0, mass=0.5),
    # levels 1 and 2 split by only 1.7e-4: orthogonal DMRG alone returns them mixed (each 7.5e-5
    # off); the Rayleigh–Ritz step recovers both
    ModelParams(sites=16, hopping=0.8, mass=0.2, theta=2.0, static_charges=((4, 1), (11, -1)))])
def test_dmrg_matches_exact_large(params):
    dmrg_check(params, 4, 128)


def test_quench_from_dmrg_ground_state():
    """``[initial] kind = "ground"`` with method = "mps" (DMRG start) matches the exact quench."""
    pytest.importorskip("tenpy")
    model = {"sites": 10, "hopping": 1.0, "mass": 0.6}
    initial = {"kind": "ground", "model": {"mass": 2.0}}
    errors, _, _ = compare(model, initial, 1.0, 64)
    assert max(errors.values()) < 1e-4, errors


# ---------------------------------------------------------------------- long-chain checks
@pytest.mark.slow
@pytest.mark.parametrize("name", ["vacuum", "meson", "string"])
def test_mps_matches_exact_sixteen_sites(name):
    """N = 16, d = 3, t = 5 at the default bond dimension; the error shrinks as χ grows."""
    model, initial = scenarios(16)[name]
    errors, _, _ = compare(model, initial, 5.0, 64)
    assert max(errors.values()) < 1e-4, errors
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        small, _, _ = compare(model, initial, 5.0, 16)
    assert small["electric_field"] > errors["electric_field"]


def test_spectrum_task_with_dmrg():
    """``[spectrum] method = "mps"`` through the task registry equals the exact levels."""
    pytest.importorskip("tenpy")
    from lgt.tasks import get_task

    task = get_task("spectrum")
    config = {"model": {"sites": 8, "mass": 0.4, "theta": 1.0}, "spectrum": {"count": 2, "method": "mps",
                                                                              "bond_dimension": 32}}
    result = task.run(task.validate(config))
    exact = exact_levels(ModelParams(sites=8, mass=0.4, theta=1.0), 2)
    assert np.abs(result.arrays["energies"] - exact).max() < 1e-8


def test_unconverged_dmrg_levels_are_flagged():
    """A bond-dimension cap far too small for the excited states: warning and flag, not silence.
    Converged levels pass (variance ⟨H²⟩ − ⟨H⟩² ≥ (distance to the nearest exact level)², the
    Krylov–Weinstein bound, textbook: Parlett, The Symmetric Eigenvalue Problem, 1998)."""
    pytest.importorskip("tenpy")
    from lgt.mps.dmrg import ERROR_LIMIT
    from lgt.tasks import get_task

    task = get_task("spectrum")
    model = {"sites": 10, "mass": 0.3, "theta": 0.7}
    good = task.run(task.validate({"model": model, "spectrum": {"count": 3, "method": "mps",
                                                                "bond_dimension": 32}}))
    assert not good.attributes["flag_unconverged"]
    assert good.arrays["error_estimate"].max() < ERROR_LIMIT  # stricter than the model's own limit
    with pytest.warns(RuntimeWarning, match="not converged"):
        poor = task.run(task.validate({"model": model, "spectrum": {"count": 3, "method": "mps",
                                                                    "bond_dimension": 2}}))
    assert poor.attributes["flag_unconverged"]
    exact = exact_levels(ModelParams(**model), 20)  # the bound names some level, not always a low one
    for energy, variance in zip(poor.arrays["energies"], poor.arrays["variance"]):
        assert np.abs(exact - energy).min() <= np.sqrt(variance) + 1e-10


def test_dmrg_error_estimate_is_the_smaller_bound():
    """min(variance / gap, √variance): Kato–Temple and Krylov–Weinstein (Parlett 1998); an exactly
    degenerate converged pair is not flagged, an isolated level with a large variance is."""
    from lgt.mps.dmrg import DMRGResult

    res = DMRGResult(np.array([-3.0, -1.0, -1.0]), [], [], [], [], 0.0, variance=[4e-8, 1e-14, 1e-14])
    np.testing.assert_allclose(res.error_estimate, [2e-8, 1e-7, 1e-7])
    assert res.unconverged == []
    res = DMRGResult(np.array([-3.0, -2.5]), [], [], [], [], 0.0, variance=[1e-9, 1e-5])
    np.testing.assert_allclose(res.error_estimate, [2e-9, 2e-5])
    assert res.unconverged == [1]
    assert DMRGResult(np.array([-3.0]), [], [], [], [], 0.0, variance=[1e-7]).unconverged == []


def test_tenpy_round_trip():
    """ChainMPS → tenpy MPS (canonical: tenpy's own norm test) → ChainMPS keeps the state."""
    pytest.importorskip("tenpy")
    from lgt.mps.dmrg import from_tenpy, mps_to_tenpy, tenpy_sites

    params = ModelParams(sites=6, mass=0.5)
    psi = ChainMPS.product(np.array([1, 1, 2, 2, 1]), 3)
    GateEvolver(params, Truncation(50)).evolve(psi, 1.0)
    converted = mps_to_tenpy(psi, tenpy_sites(params))
    assert np.max(converted.norm_test()) < 1e-12
    assert abs(np.vdot(psi.to_dense(), from_tenpy(converted).to_dense())) == pytest.approx(1.0, abs=1e-12)
