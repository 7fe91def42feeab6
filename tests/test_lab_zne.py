"""Zero-noise extrapolation by gate folding."""

from __future__ import annotations

import json

import numpy as np
import pytest

from circuits.density import simulate_density
from circuits.noise_model import GateNoise, NoiseModel
from circuits.noise_program import noisy_program
from circuits.register import product_state
from cli_runner import run_cli
from lgt.lab.zne import extrapolate, fold_circuit, richardson_coefficients
from test_lab import ERROR_FREE_PROFILE, _config
from test_noise_model import _random_circuit


def test_richardson_coefficients_are_lagrange_weights_at_zero():
    """Σ c_i f(λ_i) = f(0) for polynomials of degree < S (Lagrange interpolation; Richardson
    extrapolation as in Temme, Bravyi & Gambetta 2017): [1, 3] → (3/2, −1/2)."""
    assert np.allclose(richardson_coefficients([1, 3]), [1.5, -0.5])
    rng = np.random.default_rng(0)
    scales = [1, 3, 5]
    poly = rng.normal(size=3)
    values = np.polyval(poly, scales)
    value, error = extrapolate(scales, values, np.full(3, 0.1))
    assert np.isclose(value, poly[-1])
    assert np.isclose(error, 0.1 * np.sqrt(np.sum(richardson_coefficients(scales) ** 2)))


def test_folding_keeps_the_unitary_and_extrapolation_removes_first_order_noise():
    """U (U†U) = U; with weak depolarizing gate noise the extrapolated outcome distribution is
    far closer to the ideal one than the unfolded noisy one (first order removed)."""
    circuit = _random_circuit(2, 3, 4)
    folded = fold_circuit(circuit, 3)
    assert len(folded.ops) == 3 * len(circuit.ops)
    assert np.allclose(folded.unitary(None), circuit.unitary(None), atol=1e-10)
    with pytest.raises(ValueError):
        fold_circuit(circuit, 2)
    model = NoiseModel(gates={k: GateNoise(depolarizing=0.01) for k in ("rotation", "ms", "phase2", "generator")})
    psi0 = product_state([1, 2], 3)
    ideal = np.abs(circuit.apply(None, psi0)) ** 2
    p1, p3 = (simulate_density(noisy_program(c, None, model), psi0).probabilities() for c in (circuit, folded))
    p0, _ = extrapolate([1, 3], np.stack([p1, p3]), np.zeros((2, p1.size)))
    assert np.abs(p0 - ideal).max() < 0.1 * np.abs(p1 - ideal).max()


def test_predict_reports_zne_with_errors(tmp_path):
    cfg = _config(tmp_path, ERROR_FREE_PROFILE)
    with open(cfg) as fh:
        text = fh.read()
    with open(cfg, "w") as fh:
        fh.write(text.replace("seed = 3", "seed = 3\nzne_scales = [1, 3]"))
    out = run_cli("predict", cfg, "--json")
    assert out.returncode == 0, out.stderr
    rep = json.loads(out.stdout)
    for name in ("particle_density", "electric_field"):
        e = {k: np.array(v) for k, v in rep[name].items()}
        assert e["zne"].shape == e["mitigated"].shape
        assert np.all(e["zne_error"] >= e["mitigated_error"])  # |c_1| > 1
        assert np.all(np.abs(e["zne"] - e["circuit"]) <= 3 * e["zne_error"] + 1e-12)
    with open(cfg, "w") as fh:
        fh.write(text.replace("seed = 3", "seed = 3\nzne_scales = [3, 1]"))
    bad = run_cli("predict", cfg)
    assert bad.returncode == 2 and "lab.zne_scales" in bad.stderr
