"""Variational time evolution against the exact reference, Trotter scaling, budget, export."""

from __future__ import annotations

import json

import numpy as np
import pytest

from circuits.export import from_dict
from circuits.hardware import GateFigures, HardwareProfile
from lgt.basis import PhysicalBasis
from lgt.errors import ConfigError
from lgt.model import ModelParams
from lgt.states import basis_state
from lgt.variational.ansatz import make_ansatz, symmetric_ansatz
from lgt.variational.budget import density_matrix_check
from lgt.variational.settings import VariationalSettings, resolve_variational
from lgt.variational.stepper import fit_trajectory
from lgt.variational.trotter_baseline import trotter_max_infidelity
from lgt.variational.workflow import export_circuits, initial_state_from_document, run_fit, validate_variational_config

MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}


def vacuum(basis: PhysicalBasis) -> np.ndarray:
    return basis_state(basis, np.zeros(basis.params.n_links))


@pytest.fixture(scope="module")
def small_basis() -> PhysicalBasis:
    return PhysicalBasis(ModelParams(**MODEL))


def test_symmetric_layers_follow_exact_dynamics_without_leakage(small_basis):
    # reference: exact propagation with scipy expm_multiply; fidelity >= 0.999 up to t = 2 (K = 3)
    psi0 = vacuum(small_basis)
    for space in ("physical", "register"):
        ansatz = symmetric_ansatz(small_basis, 3, space=space)
        traj = fit_trajectory(ansatz, psi0, 0.1, 20, 1e-7, maxiter=500)
        assert traj.fidelity.min() >= 0.999
        assert traj.leakage.max() < 1e-12  # symmetric layers keep Gauss's law exactly
        assert np.allclose(np.linalg.norm(traj.states, axis=1), 1.0)


def test_hardware_layers_follow_exact_dynamics(small_basis):
    # reference: exact propagation with scipy expm_multiply; fidelity >= 0.999 up to t = 2 (K = 3)
    psi0 = vacuum(small_basis)
    ansatz = make_ansatz(small_basis, "hardware", 4, spec=VariationalSettings().native_spec())
    traj = fit_trajectory(ansatz, psi0, 0.1, 20, 1e-7, maxiter=500, restarts=2)
    assert traj.fidelity.min() >= 0.999
    assert traj.leakage.max() < 1e-3


def test_hardware_layers_short_window(small_basis):
    # reference: exact propagation with scipy expm_multiply; native brickwork reaches 0.999 to t = 0.5
    psi0 = vacuum(small_basis)
    ansatz = make_ansatz(small_basis, "hardware", 3, spec=VariationalSettings().native_spec())
    traj = fit_trajectory(ansatz, psi0, 0.1, 5, 1e-7, maxiter=400, restarts=2)
    assert traj.fidelity.min() >= 0.999
    assert traj.leakage.max() > 0  # native layers do not respect Gauss's law: leakage is reported


def test_step_infidelity_does_not_grow_with_depth(small_basis):
    # with enough layers every step reaches the optimiser's threshold; deeper circuits do not do worse
    psi0 = vacuum(small_basis)
    tol = 1e-7
    worst = []
    for layers in (3, 4, 5):
        traj = fit_trajectory(symmetric_ansatz(small_basis, layers), psi0, 0.1, 10, tol, maxiter=800)
        worst.append(traj.step_infidelity.max())
    assert max(worst) <= 2 * tol


@pytest.mark.parametrize("order,slope", [(1, 1.0), (2, 2.0)])
def test_trotter_error_scaling(order, slope):
    # Trotter–Suzuki (Suzuki, Commun. Math. Phys. 51, 183 (1976); J. Math. Phys. 32, 400 (1991)):
    # at fixed T the state error of an order-p product formula scales as dt^p, so the amplitude
    # error sqrt(1 - F) has slope p against dt on a log-log plot.
    basis = PhysicalBasis(ModelParams(sites=6, hopping=1.0, mass=0.4, coupling=0.8, levels=3))
    psi0 = vacuum(basis)
    steps = np.array([16, 32, 64])
    errors = [np.sqrt(trotter_max_infidelity(basis, psi0, 1.0, int(n), order)[1][-1]) for n in steps]
    fitted = np.polyfit(np.log(1.0 / steps), np.log(errors), 1)[0]
    assert fitted == pytest.approx(slope, abs=0.15)


def test_product_of_fidelities_agrees_with_depolarizing_simulation(small_basis):
    # reference: density-matrix simulation with depolarizing noise after each gate (checked against
    # qutip in tests/circuits/test_circ_stop_and_noise.py). To first order in the gate errors the
    # simulated infidelity lies between (1 - 1/d) and 1 times the product-rule prediction: a
    # depolarizing error on D >= d levels returns the state with probability at most 1/D.
    profile = HardwareProfile("test", {k: GateFigures(1.0, f) for k, f in
                                       {"rotation": 0.999, "phase": 0.9995, "ms": 0.995, "phase2": 0.995}.items()})
    ansatz = make_ansatz(small_basis, "hardware", 2, spec=VariationalSettings().native_spec())
    params = np.random.default_rng(5).normal(scale=0.4, size=ansatz.n_params)
    psi0 = small_basis.to_register(vacuum(small_basis))
    predicted, simulated = density_matrix_check(ansatz, params, psi0, profile)
    lost_pred, lost_sim = 1 - predicted, 1 - simulated
    assert (1 - 1 / 3) * lost_pred * 0.95 <= lost_sim <= lost_pred * 1.01


@pytest.mark.parametrize("family", ["symmetric", "hardware"])
def test_exported_circuits_reproduce_fitted_states(tmp_path, family):
    # reference: the exported JSON alone, re-simulated by the generic circuit engine
    config = {"model": MODEL, "initial": {"kind": "meson", "sites": [1, 2]},
              "variational": {"family": family, "layers": 3, "dt": 0.1, "t_final": 0.5,
                              "tolerance": 1e-3, "compile": False}}
    result = run_fit(config)
    basis = PhysicalBasis(ModelParams(**MODEL))
    paths = export_circuits(config, result.arrays["parameters"], tmp_path)
    assert len(paths) == 6
    assert result.series["fidelity"].values.min() > 0.999
    ansatz = make_ansatz(basis, family, 3, spec=VariationalSettings().native_spec())
    for k, path in enumerate(paths):
        doc = json.loads(path.read_text())
        circuit = from_dict(doc)
        psi0 = initial_state_from_document(doc["initial_state"], 3, 3)
        state = circuit.apply(None, psi0)
        fitted = ansatz.circuit.apply(result.arrays["parameters"][k], ansatz.embed(vacuum_like(basis, psi0)))
        np.testing.assert_allclose(state, basis.to_register(fitted) if family == "symmetric" else fitted,
                                   atol=1e-10)


def vacuum_like(basis: PhysicalBasis, register_state: np.ndarray) -> np.ndarray:
    return basis.from_register(register_state)[0]


@pytest.mark.parametrize("section,key", [
    ({"layers": 0}, "variational.layers"),
    ({"family": "magic"}, "variational.family"),
    ({"dt": 0.3, "t_final": 1.0}, "variational.dt"),
    ({"tolerance": 1.5}, "variational.tolerance"),
    ({"entangler_levels": [0, 0]}, "variational.entangler_levels"),
    ({"trotter_orders": [3]}, "variational.trotter_orders"),
    ({"depth": 3}, "variational.depth"),
    ({"hardware_profile": "/nonexistent.toml"}, "variational.hardware_profile"),
])
def test_bad_variational_input_names_the_key(section, key):
    config = {"model": MODEL, "variational": {"t_final": 1.0, **section}}
    with pytest.raises(ConfigError) as err:
        validate_variational_config(config)
    assert err.value.key == key


def test_default_step_tolerance_follows_total_tolerance():
    s = resolve_variational({"variational": {"t_final": 2.0, "dt": 0.1, "tolerance": 0.01}}, 3)
    assert s.n_steps == 20
    assert s.step_tolerance == pytest.approx(0.01 / 400)
