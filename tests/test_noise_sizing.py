"""Sizing with noise: noisy and post-selected fidelity, discard rate and predicted observable error
of each depth's native circuit, the depth chosen by it, and the ``noise_sizing`` key."""

from __future__ import annotations

import numpy as np
import pytest

from circuits.density import simulate_density
from circuits.export import from_dict
from circuits.hardware import load_profile
from circuits.noise_model import NoiseModel
from circuits.noise_program import noisy_program
from lgt.basis import PhysicalBasis
from lgt.cli import main
from lgt.lab.mitigation import StringObservables
from lgt.lab.noise import LabNoise
from lgt.lab.sizing import predicted_observable_error
from lgt.model import ModelParams
from lgt.states import prepare_initial_state
from lgt.variational import sizing
from lgt.variational.ansatz import LayerOptions
from lgt.variational.budget import Costing
from lgt.variational.families import get_family
from lgt.variational.native_cost import model_term_costs
from lgt.variational.settings import resolve_variational
from lgt.variational.sizing import NONE, best_simulated, evaluate_depth, noise_columns, sizing_shots
from lgt.variational.workflow import run_size, size_summary_dict

MODEL = {"sites": 4, "hopping": 1.0, "mass": 0.5, "coupling": 1.0, "levels": 3}
VAR = {"family": "hardware", "dt": 0.1, "t_final": 0.3, "tolerance": 1e-3, "compile": False,
       "compare_families": False}


@pytest.fixture(scope="module", params=["hardware", "symmetric"])
def fitted(request):
    """Depth 2 of each family fitted over [0, 0.3] on 4 sites (K = 3 qutrit links)."""
    basis = PhysicalBasis(ModelParams(**MODEL))
    settings = resolve_variational({"variational": {**VAR, "family": request.param}}, MODEL["levels"])
    profile = load_profile(None)
    costing = Costing(profile, lambda: model_term_costs(basis.params, settings.native_spec(), profile, compile=False))
    psi0 = prepare_initial_state(basis, {"kind": "vacuum"})
    row, traj, _ = evaluate_depth(basis, psi0, settings, 2, costing)
    return basis, settings, profile, row, traj


def test_error_free_noise_gives_the_algorithmic_fidelity(fitted):
    # exact limit: without noise the native circuit's output is the fitted state, so the noisy
    # fidelity is the algorithmic fidelity at T and nothing leaves Gauss's law up to the fit's leakage
    basis, settings, profile, row, traj = fitted
    noise = LabNoise(profile, NoiseModel.noiseless(), "test")
    cols = noise_columns(basis, settings, profile, noise, 2, traj, shots=10 ** 12)
    assert cols["noisy_fidelity"] == pytest.approx(row.final_fidelity, abs=1e-8)
    assert cols["discard_rate"] == pytest.approx(float(traj.leakage[-1]), abs=1e-8)
    assert cols["discard_rate"] < 1e-3
    # with (almost) unlimited shots the predicted error is the fit's own bias at T
    obs = StringObservables.for_model(basis.params)
    fitted_p = np.abs(basis.to_register(traj.states[-1])) ** 2
    exact_p = np.abs(basis.to_register(traj.exact_states[-1])) ** 2
    table = np.vstack([obs.density, obs.field])
    bias = np.max(np.abs(table @ (fitted_p / fitted_p.sum()) - table @ exact_p))
    assert cols["predicted_observable_error"] == pytest.approx(bias, rel=1e-4, abs=1e-9)


def test_post_selection_under_depolarizing_noise_matches_the_projector(fitted):
    # post-selected state PρP / Tr(Pρ) of a projective measurement (Nielsen & Chuang 2000, §2.2.5);
    # the target φ is physical (Pφ = φ), so F_ps = ⟨φ|ρ|φ⟩ / Tr(Pρ) ≥ F: checked against an
    # explicit projector matrix on the density matrix
    basis, settings, profile, row, traj = fitted
    noise = LabNoise(profile, NoiseModel(name="depolarizing"), "test")  # profile fidelities as depolarizing
    cols = noise_columns(basis, settings, profile, noise, 2, traj, shots=1000)
    doc = get_family(settings.family).export(basis, 2, LayerOptions.from_settings(settings), traj.params[-1],
                                        profile, "native")[0]
    program = noisy_program(from_dict(doc), None, noise.model, noise.spec())
    rho = simulate_density(program, basis.to_register(traj.exact_states[0])).rho
    P = np.diag(StringObservables.for_model(basis.params).physical.astype(float))
    phi = basis.to_register(traj.exact_states[-1])
    kept = np.trace(P @ rho).real
    assert cols["noisy_fidelity"] == pytest.approx(np.vdot(phi, rho @ phi).real, abs=1e-12)
    assert cols["discard_rate"] == pytest.approx(1 - kept, abs=1e-12)
    assert cols["post_selected_fidelity"] == pytest.approx(np.vdot(phi, P @ rho @ P @ phi).real / kept, abs=1e-12)
    assert 0 < cols["discard_rate"] < 1
    assert cols["post_selected_fidelity"] > cols["noisy_fidelity"]


def test_trajectories_agree_with_the_density_matrix(fitted, monkeypatch):
    # Monte-Carlo wave functions average to the density matrix (Dalibard, Castin & Mølmer,
    # PRL 68, 580 (1992)); each fidelity is a mean of numbers in [0, 1], so 4 σ ≤ 2/√n
    basis, settings, profile, row, traj = fitted
    noise = LabNoise(profile, NoiseModel(name="depolarizing"), "test")
    exact = noise_columns(basis, settings, profile, noise, 2, traj, shots=1000)
    n = 1500
    monkeypatch.setattr(sizing, "NOISE_DENSITY_MAX_STRINGS", 1)
    monkeypatch.setattr(sizing, "NOISE_TRAJECTORIES", n)
    mc = noise_columns(basis, settings, profile, noise, 2, traj, shots=1000)
    for key in ("noisy_fidelity", "post_selected_fidelity", "discard_rate"):
        assert mc[key] == pytest.approx(exact[key], abs=2 / np.sqrt(n)), key


def test_predicted_error_is_the_root_mean_square_error_of_the_estimate():
    # bias² + variance = mean squared error of the sample mean (textbook decomposition, e.g.
    # Wasserman, All of Statistics (2004), Thm 6.9): checked by sampling the shots repeatedly
    params = ModelParams(**MODEL)
    obs = StringObservables.for_model(params)
    rng = np.random.default_rng(1)
    noisy = rng.random(obs.physical.size) ** 4
    noisy *= 0.9 / noisy.sum()  # 10 % lost
    kept = noisy * obs.physical
    other = np.where(obs.physical, rng.random(obs.physical.size), 0.0)
    exact = 0.8 * kept / kept.sum() + 0.2 * other / other.sum()  # bias comparable to the shot error
    shots = 400
    eps, bias, shot = predicted_observable_error(noisy, exact, obs, shots)
    table = np.vstack([obs.density, obs.field])
    lost = 1 - noisy.sum()
    draws = rng.multinomial(shots, np.append(noisy, lost), size=4000)[:, :-1] * obs.physical
    means = (draws @ table.T) / draws.sum(axis=1, keepdims=True)
    rmse = np.sqrt(np.mean((means - table @ exact) ** 2, axis=0))
    assert 0.3 < bias / shot < 3  # both parts matter
    assert eps == pytest.approx(rmse.max(), rel=0.05)


@pytest.fixture(scope="module")
def sized():
    config = {"model": MODEL, "initial": {"kind": "vacuum"}, "variational": {**VAR, "max_layers": 3}}
    return run_size(config)


def test_simulated_depth_is_the_argmin_of_the_predicted_errors(sized):
    table = sized.tables["depth_hardware"].columns
    errors = table["predicted_observable_error"]
    assert np.all((errors > 0) & np.isfinite(errors))
    assert np.all((table["noisy_fidelity"] > 0) & (table["noisy_fidelity"] <= table["post_selected_fidelity"]))
    full = table["reached_time"] >= VAR["t_final"] - 1e-12
    brute = int(table["layers"][full][np.argmin(errors[full])])
    assert sized.attributes["best_layers_under_noise_simulated"] == brute
    assert size_summary_dict(sized)["budget"]["best_layers_under_noise_simulated"] == brute
    assert sized.tables["families"].rows()[0]["best_layers_under_noise_simulated"] == brute


def test_best_simulated_skips_aborted_and_unsimulated_rows(sized):
    rows = [sizing.DepthRow(**{k: v[i].item() for k, v in sized.tables["depth_hardware"].columns.items()})
            for i in range(len(sized.tables["depth_hardware"].columns["layers"]))]
    rows[0].predicted_observable_error = 0.0
    rows[0].reached_time = 0.1  # an aborted fit cannot win
    rows[-1].predicted_observable_error = NONE  # nor an unsimulated one
    rest = [r for r in rows[1:-1]]
    assert best_simulated(rows, VAR["t_final"]) == (min(rest, key=lambda r: r.predicted_observable_error).layers
                                                    if rest else None)


def test_noise_sizing_off_or_register_too_large_leaves_the_columns_empty(monkeypatch):
    config = {"model": MODEL, "initial": {"kind": "vacuum"}, "variational": {**VAR, "max_layers": 1}}
    off = run_size({**config, "variational": {**config["variational"], "noise_sizing": False}})
    monkeypatch.setattr(sizing, "NOISE_SIZING_MAX_STRINGS", 26)  # 3^3 = 27 strings
    big = run_size(config)
    for result in (off, big):
        assert np.all(result.tables["depth_hardware"].columns["noisy_fidelity"] == NONE)
        assert result.attributes["best_layers_under_noise_simulated"] == NONE


def test_sizing_shots_from_the_standard_error():
    # common practice, no source: 1/ε² shots give standard error ε on an observable of unit variance
    assert sizing_shots(resolve_variational({"variational": {**VAR, "shots_error": 0.01}}, 3)) == 10_000
    assert sizing_shots(resolve_variational({"variational": {**VAR, "shots_error": 0.03}}, 3)) == 1112


def test_bad_noise_sizing_value_exits_2(tmp_path, capsys):
    path = tmp_path / "size.toml"
    path.write_text('[model]\nsites = 4\nlevels = 3\n[initial]\nkind = "vacuum"\n'
                    '[variational]\nt_final = 0.3\nnoise_sizing = "yes"\n')
    assert main(["size", str(path), "--quiet"]) == 2
    assert "variational.noise_sizing" in capsys.readouterr().err
